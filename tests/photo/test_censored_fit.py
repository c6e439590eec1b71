"""Over-exposed edges fitted as censored least squares (critline.photo.edgemodel.censored_solve).

Sources: the Fresnel equations (critline.optics, cross-checked against textbook closed
forms in test_edges.py) for the edge; Snell's law for the onset (the critical angle); the
censored objective is convex, so any general minimiser (scipy.optimize.minimize) must reach
the same optimum as the active-set solver (textbook property of convex functions).
"""

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter1d
from scipy.optimize import minimize

from critline.optics import unpolarised_reflectance
from critline.photo import edgemodel
from critline.photo.edges import analyse_profile

N_PRISM = 1.88


def over_exposed(values, onset, *, gain, sigma=0.002, low=0.05, noise=0.003, post=0.0, seed=0):
    """A blurred Fresnel edge exposed ``gain`` times full scale, clipped at 1 by the sensor and
    smoothed after the clip by ``post`` (scale units: the phone's processing and JPEG)."""
    rng = np.random.default_rng(seed)
    step = sigma / 12.0
    fine = np.arange(values[0] - 0.05, values[-1] + 0.05, step)
    lit = gaussian_filter1d(low + (1 - low) * unpolarised_reflectance(fine, onset, N_PRISM), sigma / step,
                            mode="nearest")
    y = np.interp(values, fine, lit) * gain + rng.normal(0.0, noise, values.size)
    y = np.clip(y, 0.0, 1.0)
    if post > 0:
        y = gaussian_filter1d(y, post / np.median(np.diff(values)), mode="nearest")
    return y


def _window(values, y, clip_level):
    clipped = y >= clip_level
    w = np.full(values.size, 1.0 / 0.003)
    return edgemodel.make_window(values, y, w, clipped, clip_level, values[0], values[-1], 0.0005, 0.004,
                                 N_PRISM, exact_censoring=True)


def test_censored_solve_reaches_the_optimum_of_the_convex_objective():
    values = np.linspace(1.52, 1.57, 160)
    y = over_exposed(values, 1.55, gain=1.7, seed=3)
    win = _window(values, y, float(np.min(y[y >= 0.99])))
    basis = edgemodel.design(win, [1.551], 0.002, 1.0)[:, :4]  # low, p, a, q
    levels = edgemodel.censor_levels(win)

    def objective(c):
        m = basis @ c
        r = np.where(win.clipped, np.maximum(levels - m, 0.0), win.brightness - m) * win.weight
        return float(r @ r)

    coef = edgemodel.censored_solve(basis, win)
    ref = minimize(objective, np.zeros(basis.shape[1]), method="Powell",
                   options={"xtol": 1e-10, "ftol": 1e-12, "maxiter": 200000})
    assert objective(coef) <= ref.fun * (1 + 1e-6) + 1e-9
    # the plain active-set passes started from every clipped sample stop higher (a flat top)
    plain = edgemodel.solve_linear(basis, edgemodel.make_window(
        values, y, win.weight, win.clipped, win.clip_level, values[0], values[-1], 0.0005, 0.004, N_PRISM))
    assert objective(coef) <= objective(plain)


@pytest.mark.parametrize("gain", [1.3, 1.6])
@pytest.mark.parametrize("post", [0.0, 0.0005])
def test_over_exposed_onset_is_unbiased_when_censored(gain, post):
    # the sensor clips the rise well below the onset (at R = 1 / gain of the bright level);
    # the smoothing after the clip rounds the corner; the censored fit reads the onset from
    # the rise below the clip
    values = np.arange(1.49, 1.59, 0.0004)
    errors, z = [], []
    for seed in range(10):
        y = over_exposed(values, 1.544, gain=gain, post=post, seed=seed)
        a = analyse_profile(values, y, 0.003, censored=True)
        (edge,) = [e for e in a.edges if e.kind == "stone"]
        errors.append(edge.value - 1.544)
        z.append(abs(edge.value - 1.544) / edge.uncertainty)
    # unbiased at the precision a reading is given to (the third decimal, domain notes)
    assert abs(np.mean(errors)) <= 0.001
    assert np.median(np.abs(errors)) <= 0.001
    assert np.mean(np.asarray(z) <= 2.0) >= 0.9


def test_censoring_is_off_by_default_and_leaves_unclipped_profiles_alone():
    values = np.arange(1.49, 1.59, 0.0004)
    y = over_exposed(values, 1.544, gain=0.8, seed=1)  # bright level 0.8: nothing clipped
    plain = analyse_profile(values, y, 0.003)
    censored = analyse_profile(values, y, 0.003, censored=True)
    assert [e.value for e in plain.edges] == [e.value for e in censored.edges]


def test_plain_clip_handling_misses_or_misreads_over_exposed_edges():
    # the reason for the censored fit: counted at the clip level, the clipped samples pull the
    # model into a flat top; on these profiles the plain analysis loses the edge or reads it low
    values = np.arange(1.49, 1.59, 0.0004)
    plain, censored = [], []
    for gain in (1.15, 1.3):
        for seed in range(4):
            y = over_exposed(values, 1.544, gain=gain, seed=seed)
            plain += [e.value - 1.544 for e in analyse_profile(values, y, 0.003).edges if e.kind == "stone"]
            censored += [(e.value - 1.544) / e.uncertainty for e in
                         analyse_profile(values, y, 0.003, censored=True).edges if e.kind == "stone"]
    assert len(censored) == 8 and max(np.abs(censored)) <= 2.0
    assert len(plain) <= 5 and all(x < 0 for x in plain)


def test_strongly_over_exposed_edge_is_honest():
    # exposed twice full scale: the rise below the clip is the Fresnel shoulder only; the onset
    # is an extrapolation and its uncertainty says so
    values = np.arange(1.49, 1.59, 0.0004)
    for seed in range(6):
        y = over_exposed(values, 1.544, gain=2.0, post=0.0005, seed=seed)
        for e in analyse_profile(values, y, 0.003, censored=True).edges:
            if e.kind == "stone":
                assert abs(e.value - 1.544) <= 2 * e.uncertainty
                assert e.uncertainty >= 0.002
