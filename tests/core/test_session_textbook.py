"""Textbook worked cases of refractometer sessions, and bad input.

The rules are those of the standard gemmology texts (e.g. B. W. Anderson, "Gem Testing";
R. Webster, "Gems"), restated in the team's domain notes.  The principal indices of each
case are given with their source; the readings are written out by hand as a student would
record them at each position (values marked "from memory" are typical textbook values).
"""

from __future__ import annotations

import pytest

from critline.core.session import Observation, ReadingError, analyse_session
from critline.errors import UsageError

U = 0.0003  # standard uncertainty of each hand-recorded reading (common practice: +-0.001 at 3 sigma)


def series(pairs, rotations=None, u=U):
    rotations = rotations if rotations is not None else [30.0 * i for i in range(len(pairs))]
    return [
        Observation(edges=tuple((x, u) for x in pair), rotation=r, label=f"pos{r:g}")
        for pair, r in zip(pairs, rotations, strict=True)
    ]


def test_quartz_uniaxial_positive():
    # quartz omega 1.544, epsilon 1.553 (Ghosh 1999 at 589.3 nm gives 1.5442 / 1.5533):
    # the low edge stays at omega, the high edge moves up to epsilon -> U+
    result = analyse_session(series([
        (1.5442, 1.5533), (1.5441, 1.5519), (1.5443, 1.5490), (1.5442, 1.5468),
        (1.5441, 1.5490), (1.5442, 1.5518),
    ]))
    assert (result.optic_character, result.optic_sign) == ("uniaxial", "+")
    assert result.omega == pytest.approx(1.5442, abs=0.0003)
    assert result.epsilon == pytest.approx(1.5533, abs=0.0003)
    assert result.birefringence == pytest.approx(0.0091, abs=0.0005)
    assert not result.flags


def test_calcite_uniaxial_negative():
    # calcite omega 1.658, epsilon 1.486 (Ghosh 1999: 1.6583 / 1.4861): the high edge constant
    result = analyse_session(series([
        (1.4862, 1.6583), (1.5010, 1.6584), (1.5380, 1.6582), (1.5720, 1.6583),
        (1.5400, 1.6583), (1.5030, 1.6582),
    ]))
    assert (result.optic_character, result.optic_sign) == ("uniaxial", "-")
    assert result.ri_low == pytest.approx(1.4862, abs=0.0004)
    assert result.birefringence == pytest.approx(0.172, abs=0.001)


def test_corundum_uniaxial_negative():
    # corundum omega 1.770, epsilon 1.762 (typical ruby, from memory; Malitson and Dodge 1972
    # give 1.7681 / 1.7600 for synthetic sapphire)
    result = analyse_session(series([
        (1.7620, 1.7700), (1.7632, 1.7701), (1.7660, 1.7700), (1.7688, 1.7699),
        (1.7661, 1.7700), (1.7630, 1.7701),
    ]))
    assert (result.optic_character, result.optic_sign) == ("uniaxial", "-")
    assert result.birefringence == pytest.approx(0.008, abs=0.0006)


def test_topaz_biaxial_positive():
    # topaz alpha 1.619, beta 1.620, gamma 1.627 (typical values, from memory): both edges move;
    # both candidate betas (1.620 and 1.6215) lie nearer alpha than gamma -> B+
    result = analyse_session(series([
        (1.6190, 1.6270), (1.6194, 1.6255), (1.6199, 1.6232), (1.6200, 1.6215),
        (1.6196, 1.6238), (1.6192, 1.6262),
    ], u=0.0001))
    assert (result.optic_character, result.optic_sign) == ("biaxial", "+")
    assert result.ri_low == pytest.approx(1.619, abs=0.0002)
    assert result.ri_high == pytest.approx(1.627, abs=0.0002)
    assert set(result.beta_candidates) == {1.6200, 1.6215}


def test_sinhalite_biaxial_negative():
    # sinhalite alpha 1.669, beta 1.699, gamma 1.707 (from memory): beta nearer gamma -> B-
    result = analyse_session(series([
        (1.6690, 1.7010), (1.6760, 1.7030), (1.6880, 1.7055), (1.6985, 1.7070),
        (1.6900, 1.7050), (1.6770, 1.7025),
    ]))
    assert (result.optic_character, result.optic_sign) == ("biaxial", "-")


def test_biaxial_sign_undetermined_when_the_two_betas_disagree():
    # forsterite-like indices alpha 1.635, beta 1.651, gamma 1.670 (from memory) on a facet
    # where the highest low edge (1.651) and the lowest high edge (1.662) give opposite signs
    result = analyse_session(series([
        (1.6505, 1.6677), (1.6488, 1.6624), (1.6396, 1.6623), (1.6350, 1.6646),
        (1.6388, 1.6676), (1.6459, 1.6699),
    ]))
    assert result.optic_character == "biaxial"
    assert result.optic_sign is None
    assert result.beta is None
    assert any("sign undetermined" in n for n in result.notes)


def test_both_edges_constant_means_facet_perpendicular_to_optic_axis():
    # quartz basal facet (textbook): both edges constant, full birefringence, sign undecidable
    result = analyse_session(series([(1.5442, 1.5533)] * 6))
    assert result.optic_character == "uniaxial"
    assert result.optic_sign is None
    assert result.birefringence == pytest.approx(0.0091, abs=0.0004)
    assert any("cannot be decided from this" in n for n in result.notes)


def test_spinel_singly_refractive():
    # spinel 1.718 (typical, from memory): one edge, constant at every position
    result = analyse_session(series([(1.7180,), (1.7181,), (1.7179,), (1.7180,), (1.7182,), (1.7180,)]))
    assert result.optic_character == "isotropic"
    assert result.ri_low == pytest.approx(1.718, abs=0.0002)
    assert result.birefringence == 0.0


def test_strained_garnet_flags_anomalous_double_refraction():
    # pyrope 1.746 with a faint second edge 0.002 above at two of six positions (common practice:
    # strained garnets show weak, erratic anomalous double refraction)
    result = analyse_session(series([
        (1.7460,), (1.7461, 1.7482), (1.7460,), (1.7459,), (1.7460, 1.7478), (1.7461,),
    ]))
    assert "possible_anomalous_double_refraction" in result.flags
    assert result.optic_character == "undetermined"


def test_one_position_is_too_few():
    result = analyse_session(series([(1.5442, 1.5533)]))
    assert result.optic_character == "undetermined"
    assert "too_few_positions" in result.flags
    assert result.birefringence == pytest.approx(0.0091, abs=0.0005)


def test_works_without_rotation_angles():
    # the same quartz series typed in without rotations: the photos are the positions
    observations = [
        Observation(edges=((lo, U), (hi, U)))
        for lo, hi in [(1.5442, 1.5533), (1.5441, 1.5519), (1.5443, 1.5490), (1.5442, 1.5468)]
    ]
    result = analyse_session(observations)
    assert (result.optic_character, result.optic_sign) == ("uniaxial", "+")
    assert "rotation_unknown" in result.flags


def test_polarised_single_rays_are_paired_by_rotation():
    obs = []
    for rot, lo, hi in [(0, 1.5442, 1.5533), (45, 1.5441, 1.5500), (90, 1.5442, 1.5468), (135, 1.5443, 1.5501)]:
        obs.append(Observation(edges=((lo, U),), rotation=rot, polariser=0))
        obs.append(Observation(edges=((hi, U),), rotation=rot, polariser=90))
    result = analyse_session(obs)
    assert (result.optic_character, result.optic_sign) == ("uniaxial", "+")


def test_one_polariser_orientation_cannot_show_single_refraction():
    obs = [Observation(edges=((1.5442, U),), rotation=r, polariser=0) for r in (0, 45, 90, 135)]
    result = analyse_session(obs)
    assert result.optic_character == "undetermined"
    assert any("other ray was not" in n for n in result.notes)


def test_single_edge_spread_beyond_uncertainty_is_flagged():
    result = analyse_session(series([(1.540,), (1.544,), (1.548,), (1.551,)], u=0.0005))
    assert "readings_spread" in result.flags
    assert result.optic_character == "undetermined"


def test_over_the_limit():
    result = analyse_session([Observation(over_limit=True, label="a.jpg")], liquid_ri=1.79)
    assert result.over_limit and result.ri_low == 1.79 and result.ri_high is None
    assert result.optic_character == "undetermined"
    assert result.to_json()["over_limit"] is True


def test_one_ray_over_the_limit():
    # rhodochrosite: epsilon about 1.60 on the scale, omega above a 1.79 liquid (from memory)
    obs = [Observation(edges=((1.597 + 0.003 * i, U),), rotation=30 * i, over_limit=True) for i in range(4)]
    result = analyse_session(obs, liquid_ri=1.79)
    assert result.over_limit and result.ri_high is None
    assert result.ri_low == pytest.approx(1.597, abs=0.001)


def test_spot_reading():
    result = analyse_session([Observation(edges=((1.66, 0.0),), spot=True)])
    assert result.spot_ri == pytest.approx(1.66)
    assert result.optic_character == "undetermined"


def test_to_json_has_the_batch_fields():
    data = analyse_session(series([(1.5442, 1.5533)] * 4)).to_json()
    for key in ("ri_low", "ri_high", "birefringence", "uncertainty", "optic_character",
                "optic_sign", "over_limit", "flags"):
        assert key in data


@pytest.mark.parametrize(
    "observations, message",
    [
        ([], "no readings"),
        ([Observation(label="blank.jpg"), Observation()], "no stone edge in any of the 2"),
    ],
)
def test_no_readings_is_an_error(observations, message):
    with pytest.raises(ReadingError, match=message):
        analyse_session(observations)


def test_bad_readings_are_usage_errors():
    with pytest.raises(UsageError, match="outside 1.0-3.5"):
        Observation(edges=((0.9, 0.001),))
    with pytest.raises(UsageError, match="outside 1.0-3.5"):
        Observation(edges=((3.6, 0.001),))
    with pytest.raises(UsageError, match="zero or positive"):
        Observation(edges=((1.54, -0.001),))
    with pytest.raises(UsageError, match="above the contact liquid"):
        analyse_session([Observation(edges=((1.85, 0.001),))], liquid_ri=1.79)
    with pytest.raises(UsageError, match="spot reading and over the limit"):
        Observation(edges=((1.6, 0.01),), spot=True, over_limit=True)
