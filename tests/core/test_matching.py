"""Matching measured properties against the materials table."""

from __future__ import annotations

import json

import pytest

from critline.core.matching import TIE_RATIO, identify
from critline.core.materials import load_materials
from critline.core.session import Observation, ReadingError, analyse_session
from critline.instrument import DEFAULT


def keys(result, group=0):
    return set(result.groups[group])


def test_quartz_readings_put_quartz_in_the_lead_and_name_separating_tests():
    # quartz 1.544 / 1.553 (textbook values; Ghosh 1999 gives 1.5442 / 1.5533)
    result = identify(ris=[1.544, 1.553])
    assert {"quartz", "synthetic quartz"} <= keys(result)
    # scapolite and iolite overlap in RI; sign and character separate them (textbook)
    assert any(t.startswith("optic sign") for t in result.separating_tests)
    quartz = next(c for c in result.candidates if c.key == "quartz")
    assert quartz.score == pytest.approx(1.0)
    assert not quartz.conflicts and quartz.agrees


def test_sign_and_character_narrow_the_field():
    result = identify(ris=[1.544, 1.553], character="uniaxial", sign="+")
    assert keys(result) == {"quartz", "synthetic quartz"}
    scapolite = next(c for c in result.candidates if c.key == "scapolite")
    assert any("optic sign" in c for c in scapolite.conflicts)
    assert any("magnification" in t for t in result.separating_tests)


def test_specific_gravity_separates_topaz_from_similar_ri():
    # topaz 1.619-1.627, SG 3.53 (from memory)
    result = identify(ris=[1.619, 1.627], sg=3.53)
    assert result.groups[0] == ("topaz",)


def test_isotropic_reading_conflicts_with_doubly_refractive_materials():
    result = identify(ris=[1.718], character="isotropic")
    assert "spinel" in keys(result)
    for c in result.candidates:
        if c.score > 0.5:
            assert c.material.optic_character in ("isotropic", "amorphous", "aggregate")


def test_over_the_limit_returns_materials_above_the_liquid():
    result = identify(over_limit=True)
    assert any(f"{DEFAULT.liquid_ri:.3f}" in n and "assumed" in n for n in result.notes)
    assert {"diamond", "cubic zirconia", "andradite"} <= keys(result)
    for c in result.candidates:
        if c.score >= 0.5:
            # at least half of the material's lowest-index range lies above the liquid
            lowest = min(c.material.indices, key=lambda i: i.mid)
            assert lowest.mid > DEFAULT.liquid_ri - 0.005, c.key
    assert all(c.key not in ("quartz", "spinel", "corundum") for c in result.candidates)


def test_over_the_limit_with_a_higher_liquid():
    result = identify(over_limit=True, liquid_ri=1.81)
    assert "spessartine" not in keys(result)  # 1.790-1.820 (from memory): mostly below 1.81
    assert "diamond" in keys(result)


def test_one_ray_over_the_limit():
    # rhodochrosite: epsilon near 1.60 on the scale, omega above the liquid (from memory)
    result = identify(ris=[1.597], over_limit=True)
    assert result.groups[0][0] == "rhodochrosite"


def test_spot_reading_matches_at_two_decimals():
    # jadeite spot 1.66, nephrite 1.61-1.62 (common practice)
    jade = identify(spot=1.66)
    assert "jadeite" in keys(jade) and "nephrite" not in keys(jade)
    neph = identify(spot=1.61)
    assert "nephrite" in keys(neph) and "jadeite" not in keys(neph)
    # 0.01 outside a range still agrees, 0.03 outside does not
    assert identify(spot=1.64, materials=[m for m in load_materials() if m.key == "jadeite"]).candidates[0].score > 0.3
    assert not identify(spot=1.62, materials=[m for m in load_materials() if m.key == "jadeite"]).candidates


def test_session_analysis_feeds_identify():
    obs = [
        Observation(edges=((1.7620, 0.0003), (1.7700, 0.0003)), rotation=0),
        Observation(edges=((1.7640, 0.0003), (1.7701, 0.0003)), rotation=45),
        Observation(edges=((1.7690, 0.0003), (1.7699, 0.0003)), rotation=90),
        Observation(edges=((1.7641, 0.0003), (1.7700, 0.0003)), rotation=135),
    ]
    analysis = analyse_session(obs)
    result = identify(analysis)
    assert {"corundum", "synthetic corundum"} <= keys(result)
    assert result.to_json()["measured"]["optic_sign"] == "-"


def test_scores_are_ranked_and_groups_partition_the_list():
    result = identify(ris=[1.66])
    score = {c.key: c.score for c in result.candidates}
    assert all(0.0 <= s <= 1.0 for s in score.values())
    flat = [k for g in result.groups for k in g]
    assert flat == [c.key for c in result.candidates]
    best = [max(score[k] for k in g) for g in result.groups]
    assert best == sorted(best, reverse=True)
    for group, top in zip(result.groups, best, strict=True):
        assert all(score[k] >= TIE_RATIO * top for k in group)
    for later in result.groups[1:]:
        assert max(score[k] for k in later) < TIE_RATIO * best[0]


def test_json_document():
    data = identify(ris=[1.544, 1.553]).to_json()
    json.dumps(data)
    assert data["schema"] == "critline.identify/1"
    first = data["candidates"][0]
    assert set(first) >= {"material", "aliases", "score", "agrees", "conflicts"}
    assert isinstance(data["separating_tests"], list)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({}, "no readings"),
        ({"ris": [0.99]}, "outside 1.0-3.5"),
        ({"ris": [3.51]}, "outside 1.0-3.5"),
        ({"ris": [(1.54, -0.001)]}, "zero or positive"),
        ({"ris": [1.54], "uncertainty": -1}, "zero or positive"),
        ({"ris": [1.85], "over_limit": True}, "above the contact liquid"),
        ({"ris": [1.544, 1.553], "character": "isotropic"}, "contradict an isotropic"),
        ({"ris": [1.54], "character": "isotropic", "sign": "+"}, "no optic sign"),
        ({"ris": [1.54], "character": "cubic"}, "optic character must be"),
        ({"ris": [1.54], "sg": -2}, "specific gravity"),
    ],
)
def test_bad_input(kwargs, message):
    with pytest.raises(ReadingError, match=message):
        identify(**kwargs)


def test_blinking_spot_is_matched_at_both_ends():
    # pearl (aragonite) spot blinks between about 1.53 and 1.68 (common practice)
    obs = [Observation(edges=((1.53, 0.01),), spot=True), Observation(edges=((1.68, 0.01),), spot=True)]
    analysis = analyse_session(obs)
    assert "spot_blinks" in analysis.flags
    result = identify(analysis)
    assert "pearl" in keys(result)
    assert "nephrite" not in keys(result)  # 1.60-1.64 (from memory) holds neither end
