"""Shadow-edge analysis of 1-D brightness profiles (critline.photo.edges).

Every profile here is built from the physics in the test itself: the Fresnel
reflectance of critline.optics (cross-checked below against textbook closed forms
and an independent thin-film library), a Gaussian blur, noise, clipping, dust
and vignetting.
"""

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.ndimage import gaussian_filter1d

from critline.optics import critical_angle, fresnel_reflectance, unpolarised_reflectance
from critline.photo import edgemodel
from critline.photo.edges import EdgeFit, ProfileAnalysis, analyse_profile

N_PRISM = 1.88


def make_profile(values, onsets, *, sigma=0.001, weights=None, low=0.05, high=0.85, g=1.0,
                 prism=N_PRISM, liquid=None, liquid_step=0.0, trend=0.0, noise=0.003,
                 seed=0, clip=None, dust=0):
    """Brightness along the scale: low + (high - low) * sum w_k R(s; n_k)^g, blurred.

    On the 0..1 scale of a decoded photo; the default bright level stays clear of
    full scale (a plateau at full scale is taken as clipped).
    """
    rng = np.random.default_rng(seed)
    values = np.asarray(values, float)
    step = min(sigma / 12.0, 2e-5)
    fine = np.arange(values[0] - 0.05, values[-1] + 0.05, step)
    weights = weights or [1.0 / max(len(onsets), 1)] * len(onsets)
    lit = np.zeros_like(fine)
    for n, w in zip(onsets, weights, strict=True):
        lit += w * unpolarised_reflectance(fine, n, prism) ** g
    bright = low + (high - low) * lit
    if liquid is not None:
        bright += liquid_step * unpolarised_reflectance(fine, liquid, prism) ** g
    bright *= 1.0 + trend * (fine - fine.mean()) / 0.25  # vignetting: linear falloff
    blurred = gaussian_filter1d(bright, sigma / step, mode="nearest")
    y = np.interp(values, fine, blurred) + rng.normal(0.0, noise, values.size)
    if dust:
        hit = rng.choice(values.size, dust, replace=False)
        y[hit] *= rng.uniform(0.2, 0.6, dust)
    if clip is not None:
        y = np.minimum(y, clip)
    return y


def scale(lo=1.30, hi=1.80, count=2000):
    return np.linspace(lo, hi, count)


def stones(a: ProfileAnalysis):
    return [e for e in a.edges if e.kind == "stone"]


# ------------------------------------------------------------- physics cross-checks


def test_fresnel_equations_against_textbook_closed_forms_and_tmm():
    import tmm  # independent transfer-matrix implementation (S. Byrnes, "tmm" package)

    big_n, n = N_PRISM, 1.544
    # normal incidence: R = ((N - n) / (N + n))**2 (Hecht, "Optics", 4th ed., section 4.6.2)
    rs, rp = fresnel_reflectance(0.0, n, big_n)
    assert rs == pytest.approx(((big_n - n) / (big_n + n)) ** 2, rel=1e-12)
    assert rp == pytest.approx(rs, rel=1e-12)
    # Brewster angle tan(theta_B) = n / N: rp vanishes (Born and Wolf, section 1.5.3)
    theta_b = math.atan(n / big_n)
    assert fresnel_reflectance(big_n * math.sin(theta_b), n, big_n)[1] == pytest.approx(0, abs=1e-12)
    # critical angle: Snell's law N sin(theta_c) = n, and R -> 1 as s -> n from below
    assert big_n * math.sin(critical_angle(n, big_n)) == pytest.approx(n, abs=1e-12)
    near = unpolarised_reflectance(np.array([n - 1e-4, n - 1e-8, n, n + 0.01]), n, big_n)
    assert near[0] < near[1] < 1.0 and near[1] > 0.99 and near[2] == near[3] == 1.0
    # the fit's lean copy is the same function
    s = np.linspace(1.2, 1.7, 501)
    np.testing.assert_allclose(edgemodel.reflectance(s, n, big_n),
                               unpolarised_reflectance(s, n, big_n), rtol=1e-12, atol=1e-15)
    # and both agree with the transfer-matrix library for a bare interface
    for value in (0.3, 1.0, 1.5, 1.54):
        theta = math.asin(value / big_n)
        ref = [tmm.coh_tmm(pol, [big_n, n], [np.inf, np.inf], theta, 589.3)["R"] for pol in "sp"]
        got = fresnel_reflectance(value, n, big_n)
        assert got[0] == pytest.approx(ref[0], rel=1e-9)
        assert got[1] == pytest.approx(ref[1], rel=1e-9, abs=1e-12)


# ------------------------------------------------------------------- accuracy


@pytest.mark.parametrize("onset", [1.40, 1.544, 1.718])
@pytest.mark.parametrize("sigma", [0.0004, 0.0015])
def test_onset_recovered_on_clean_profiles(onset, sigma):
    values = scale()
    a = analyse_profile(values, make_profile(values, [onset], sigma=sigma, seed=3), 0.003)
    assert a.status == "ok"
    (edge,) = stones(a)
    assert abs(edge.value - onset) < 0.0003
    assert abs(edge.width - sigma) < 0.3 * sigma + 0.0002
    assert edge.uncertainty < 0.0004


def test_unevenly_spaced_partial_scale():
    # the graduation spacing drifts along the scale and only part of it is seen
    idx = np.linspace(0, 1, 900)
    values = 1.45 + 0.2 * (idx + 0.15 * idx**2) / 1.15
    a = analyse_profile(values, make_profile(values, [1.5862], sigma=0.0008, seed=5), 0.003)
    (edge,) = stones(a)
    assert abs(edge.value - 1.5862) < 0.0003


def test_half_brightness_point_is_biased_low_so_the_model_matters():
    values = scale(1.45, 1.65, 1000)
    onset, sigma = 1.544, 0.0015
    clean = make_profile(values, [onset], sigma=sigma, noise=0.0)
    # a plain step reading: half-way between the level 0.02 below and the level above
    dark = np.interp(onset - 0.02, values, clean)
    lit = np.interp(onset + 4 * sigma, values, clean)
    sel = (values > onset - 0.02) & (values < onset + 4 * sigma)
    half = np.interp(0.5 * (dark + lit), clean[sel], values[sel])
    assert onset - half > 0.001  # biased low by more than a thousandth
    a = analyse_profile(values, make_profile(values, [onset], sigma=sigma, seed=8), 0.003)
    (edge,) = stones(a)
    assert abs(edge.value - onset) < 0.25 * (onset - half)
    assert edge.figures["half_brightness"] == pytest.approx(half, abs=0.0005)


def _random_case(rng):
    span = rng.uniform(0.12, 0.5)
    count = int(rng.integers(300, 1500))
    lo = rng.uniform(1.30, 1.80 - span)
    values = np.linspace(lo, lo + span, count)
    onset = rng.uniform(lo + 0.05, lo + span - 0.03)
    sigma = float(np.exp(rng.uniform(np.log(0.0003), np.log(0.004))))
    kw = dict(sigma=sigma, low=rng.uniform(0.0, 0.2), high=rng.uniform(0.5, 1.0),
              g=rng.uniform(0.8, 1.3), trend=rng.uniform(-0.3, 0.3),
              noise=rng.uniform(0.002, 0.02), seed=int(rng.integers(1 << 30)))
    return values, onset, kw


def test_two_sigma_interval_covers_the_truth_in_95_percent():
    rng = np.random.default_rng(20261202)
    hits, total = 0, 0
    for _ in range(80):  # the bench (bench/edges_bench.py) runs 300 per mismatch class
        values, onset, kw = _random_case(rng)
        a = analyse_profile(values, make_profile(values, [onset], **kw), kw["noise"])
        total += 1
        found = stones(a)
        if len(found) == 1 and abs(found[0].value - onset) <= 2 * found[0].uncertainty:
            hits += 1
    assert hits / total >= 0.95


# ---------------------------------------------------------------- edge count


def test_uniform_profiles_have_no_edge():
    values = scale()
    rng = np.random.default_rng(1)
    bright = 0.8 * (1 + 0.3 * (values - 1.55)) + rng.normal(0, 0.004, values.size)
    dark = 0.04 + rng.normal(0, 0.004, values.size)
    for y in (bright, dark, np.full(values.size, 0.5)):
        a = analyse_profile(values, y, 0.004)
        assert a.status == "no_edge" and a.edges == ()


def test_two_edges_of_a_birefringent_stone():
    values = scale()
    # quartz omega/epsilon, 1.544/1.553 (Webster, "Gems", from memory)
    a = analyse_profile(values, make_profile(values, [1.544, 1.553], seed=2), 0.003)
    got = sorted(e.value for e in stones(a))
    assert a.status == "ok" and len(got) == 2
    assert abs(got[0] - 1.544) < 0.0004 and abs(got[1] - 1.553) < 0.0004


def test_far_apart_edges_each_in_their_own_window():
    values = scale()
    # calcite omega/epsilon about 1.658/1.486 (from memory)
    a = analyse_profile(values, make_profile(values, [1.486, 1.658], seed=4), 0.003)
    got = sorted(e.value for e in stones(a))
    assert len(got) == 2 and abs(got[0] - 1.486) < 0.0004 and abs(got[1] - 1.658) < 0.0004


@pytest.mark.parametrize("seed", range(4))
def test_edges_0_004_apart_are_resolved(seed):
    values = scale()
    # profile noise 0.2 % of the bright level: a median across some tens of pixel columns
    y = make_profile(values, [1.620, 1.624], sigma=0.001, noise=0.002, seed=seed)
    a = analyse_profile(values, y, 0.002)
    got = sorted(e.value for e in stones(a))
    assert len(got) == 2
    assert abs(got[0] - 1.620) < 0.0008 and abs(got[1] - 1.624) < 0.0008


def test_unresolvable_pair_is_reported_as_one_edge():
    values = scale()
    a = analyse_profile(values, make_profile(values, [1.620, 1.6208], sigma=0.0015, seed=1),
                        0.003)
    (edge,) = stones(a)
    assert 1.6195 < edge.value < 1.6215


def test_liquid_line_above_a_stone_edge():
    values = scale()
    y = make_profile(values, [1.544], liquid=1.790, liquid_step=0.1, noise=0.002, seed=6)
    a = analyse_profile(values, y, 0.002, liquid_ri=1.79)
    assert a.status == "ok"
    assert [e.kind for e in a.edges] == ["stone", "liquid"]
    assert abs(a.edges[1].value - 1.790) < 0.001


@pytest.mark.parametrize("liquid_ri", [1.79, None])
@pytest.mark.parametrize(("lower_step", "seed"), [(0.03, 12), (0.03, 13), (0.04, 12)])
def test_faint_step_beside_the_liquid_line_is_not_a_stone_edge(liquid_ri, lower_step, seed):
    # An isotropic stone (spinel, about 1.712-1.718: GIA Gem Reference Guide, from memory)
    # and a liquid line seen as two faint close steps (contrast about 0.04 each).
    # Without a polariser each ray of a stone takes about half the bright level
    # (Fresnel equations, unpolarised light), so a step of contrast ~0.04 is no stone
    # edge: the reading must stay one stone edge, with the liquid's edge above it.
    values = scale(1.30, 1.82, 2400)
    y = make_profile(values, [1.712], liquid=1.788, liquid_step=0.04, noise=0.002, seed=seed)
    y = y + make_profile(values, [], low=0.0, high=0.0, liquid=1.777, liquid_step=lower_step,
                         noise=0.0)
    a = analyse_profile(values, y, 0.002, liquid_ri=liquid_ri)
    assert a.status == "ok"
    (edge,) = stones(a)
    assert abs(edge.value - 1.712) < 0.001
    assert [e.kind for e in a.edges] == ["stone", "liquid"]
    assert 1.774 < a.edges[1].value < 1.791


def test_true_pair_below_the_liquid_line_stays_two_stone_edges():
    # corundum without polariser, omega 1.770 / epsilon 1.762 (GIA Gem Reference Guide,
    # from memory): two large steps just below the liquid line stay stone edges
    values = scale(1.30, 1.82, 2400)
    y = make_profile(values, [1.762, 1.770], liquid=1.790, liquid_step=0.04, sigma=0.0008,
                     noise=0.002, seed=5)
    a = analyse_profile(values, y, 0.002, liquid_ri=1.79)
    assert a.status == "ok"
    assert [round(e.value, 2) for e in stones(a)] == [1.76, 1.77]
    assert a.edges[-1].kind == "liquid"


@pytest.mark.parametrize("lower_weight", [0.25, 0.35])
def test_unequal_pair_just_below_the_liquid_stays_two_stone_edges(lower_weight):
    # a pair whose lower edge rises from the dark field is a stone's, even when its upper
    # edge lies where the liquid may be (the over-the-limit reading needs a dark field
    # up to a strong step)
    values = scale(1.30, 1.82, 2400)
    y = make_profile(values, [1.772, 1.785], weights=[lower_weight, 1 - lower_weight],
                     sigma=0.0012, noise=0.002, seed=1)
    a = analyse_profile(values, y, 0.002, liquid_ri=1.79)
    assert a.status == "ok"
    assert [round(e.value, 3) for e in stones(a)] == [1.772, 1.785]


@pytest.mark.parametrize(("separation", "sigma"), [(0.008, 0.004), (0.012, 0.005)])
def test_pair_hidden_by_blur_is_covered_by_the_uncertainty(separation, sigma):
    # Two edges closer than about 2.5 blur widths cannot be told from one blurred edge
    # (Rayleigh-like limit, common practice); whichever reading comes out, each true
    # edge must lie within twice the stated uncertainty of a reported stone edge.
    values = scale()
    truth = (1.55, 1.55 + separation)
    y = make_profile(values, list(truth), sigma=sigma, noise=0.002, seed=2)
    a = analyse_profile(values, y, 0.002, liquid_ri=1.79)
    assert a.status == "ok"
    for t in truth:
        assert any(abs(e.value - t) <= 2 * e.uncertainty for e in stones(a))
    assert "blurred" in a.flags


@pytest.mark.parametrize("liquid_ri", [1.79, None])
def test_over_the_limit_dark_up_to_the_liquid_edge(liquid_ri):
    values = scale()
    a = analyse_profile(values, make_profile(values, [1.79], seed=7), 0.003, liquid_ri=liquid_ri)
    assert a.status == "over_limit"
    (edge,) = a.edges
    assert edge.kind == "liquid" and abs(edge.value - 1.79) < 0.0005
    assert ("liquid_assumed" in a.flags) == (liquid_ri is None)


def test_faint_liquid_line_alone_is_not_over_the_limit():
    # no stone edge in the field: bright all along, with the liquid line's faint step
    values = scale()
    y = make_profile(values, [], low=0.9, liquid=1.795, liquid_step=0.06, noise=0.002, seed=3)
    a = analyse_profile(values, y, 0.002, liquid_ri=1.79)
    assert a.status == "no_edge"
    assert all(e.kind == "liquid" for e in a.edges)


def test_a_step_at_the_very_end_of_the_profile_is_not_an_edge():
    # the field boundary or the profile's first samples: no dark side seen below it
    values = scale(1.50, 1.70, 800)
    y = make_profile(values, [1.501], seed=2)
    a = analyse_profile(values, y, 0.003)
    assert stones(a) == []


# ------------------------------------------------------------- degraded profiles


def test_clipped_highlights_are_flagged_and_honest():
    values = scale()
    for seed in range(3):
        for clip_at in (1.0, 0.7):  # full scale, or an arbitrary scale clipped exactly
            y = make_profile(values, [1.544], high=1.2 * clip_at, seed=seed, clip=clip_at)
            a = analyse_profile(values, y, 0.003)
            (edge,) = stones(a)
            assert "clipped" in a.flags
            assert abs(edge.value - 1.544) <= 2 * edge.uncertainty


def test_over_exposure_hides_the_corner_and_widens_the_uncertainty():
    # exposed 1.6x: the rise reaches full scale well below the onset, which is then
    # only known to lie above that point
    values = scale()
    y = make_profile(values, [1.6], low=0.05, high=1.6, noise=0.0, clip=1.0)
    y = np.round(y * 255) / 255
    a = analyse_profile(values, y, 0.002)
    (edge,) = stones(a)
    assert "clipped" in a.flags
    assert abs(edge.value - 1.6) <= 2 * edge.uncertainty
    assert edge.uncertainty >= 0.0015


def test_dust_and_vignetting_do_not_move_the_edge():
    values = scale()
    y = make_profile(values, [1.6], trend=0.4, dust=25, seed=9)
    a = analyse_profile(values, y, 0.003)
    (edge,) = stones(a)
    assert abs(edge.value - 1.6) < 0.0003
    assert a.figures["outliers_masked"] >= 15


def test_blurred_edge_is_flagged():
    values = scale()
    a = analyse_profile(values, make_profile(values, [1.544], sigma=0.005, seed=2), 0.003)
    (edge,) = stones(a)
    assert "blurred" in a.flags and abs(edge.value - 1.544) <= 2 * edge.uncertainty


# ------------------------------------------------------------------- light


def test_white_light_fringe_versus_sodium_light():
    values = scale()
    onset = 1.544
    # A dense-glass prism disperses more than the stone, so longer wavelengths reach
    # total reflection higher on the scale; each camera channel sees a band of them.
    bands = {"red": (0.002, 0.007), "green": (-0.002, 0.003), "blue": (-0.012, -0.004)}
    white = np.stack([
        np.mean([make_profile(values, [onset + d], noise=0.0) for d in np.linspace(*band, 9)],
                axis=0) + np.random.default_rng(k).normal(0, 0.003, values.size)
        for k, band in enumerate(bands.values())])
    mono = np.stack([make_profile(values, [onset], seed=s) for s in (1, 2, 3)])
    luminance = np.array([0.3, 0.6, 0.1]) @ white
    a = analyse_profile(values, luminance, 0.003, rgb=white)
    assert a.light == "white" and "white_light" in a.flags
    (edge,) = stones(a)
    # the 589.3 nm edge is read from the channel edges (critline.photo.whitelight); it lies
    # inside the fringe
    onsets = edge.figures["channel_onsets"].values()
    assert edge.figures["white_light_method"] == "channel_cauchy"
    assert min(onsets) < edge.value < max(onsets)
    b = analyse_profile(values, mono.mean(axis=0), 0.003, rgb=mono)
    assert b.light == "monochromatic" and "white_light" not in b.flags
    c = analyse_profile(values, mono.mean(axis=0), 0.003)
    assert c.light == "unknown"


# -------------------------------------------------------------------- properties


def _all_finite(a: ProfileAnalysis):
    assert a.status in ("ok", "over_limit", "no_edge")
    assert a.light in ("monochromatic", "white", "unknown")
    for e in a.edges:
        assert isinstance(e, EdgeFit)
        for x in (e.value, e.uncertainty, e.contrast, e.width):
            assert math.isfinite(x)
        assert e.uncertainty > 0

    def walk(d):
        for v in d.values():
            if isinstance(v, dict):
                walk(v)
            elif isinstance(v, float):
                assert math.isfinite(v)

    walk(a.figures)
    for e in a.edges:
        walk(e.figures)


finite = st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False)


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(y=arrays(float, st.integers(0, 300), elements=finite),
       noise=st.one_of(st.floats(-1.0, 1.0), st.just(0.0)))
def test_any_finite_input_gives_finite_outputs(y, noise):
    values = np.linspace(1.35, 1.80, y.size)
    _all_finite(analyse_profile(values, y, noise))


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(onset=st.floats(1.35, 1.75), sigma=st.floats(0.0002, 0.004),
       g=st.floats(0.7, 1.5), seed=st.integers(0, 1000), noise=st.floats(0.0, 0.05))
def test_random_physical_profiles_give_finite_outputs(onset, sigma, g, seed, noise):
    values = scale()
    y = make_profile(values, [onset], sigma=sigma, g=g, noise=noise, seed=seed)
    _all_finite(analyse_profile(values, y, noise if noise > 0 else 0.001, liquid_ri=1.79))


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(onset=st.floats(1.40, 1.72), rise=st.floats(0.002, 0.05),
       sigma=st.floats(0.0003, 0.002), seed=st.integers(0, 1000))
def test_a_higher_stone_index_reads_higher(onset, rise, sigma, seed):
    values = scale()
    readings = []
    for n in (onset, onset + rise):
        a = analyse_profile(values, make_profile(values, [n], sigma=sigma, seed=seed), 0.003)
        (edge,) = stones(a)
        readings.append(edge.value)
    assert readings[1] > readings[0]
