"""The phone model: field placement, sensor noise statistics, exposure clipping, dust."""

import numpy as np
import pytest

from critline.synth import Scene, render, scale_map
from critline.synth.render import phone_capture
from critline.synth.scene import clean_overrides


def _linear(img):
    # inverse sRGB transfer function (IEC 61966-2-1)
    x = img.astype(float) / 255.0
    return np.where(x <= 0.04045, x / 12.92, ((x + 0.055) / 1.055) ** 2.4)


@pytest.mark.parametrize("tilt", [0.0, 8.0])
def test_field_truth_matches_rendered_field(tilt):
    scene = Scene(stone_ris=(), liquid_line=0.0, width=640, height=480, field_cx=0.45, field_cy=0.55,
                  field_diameter=0.7, labels=False, spine=False, ink=0.0, surround=0.0,
                  **{**clean_overrides(), "tilt_deg": tilt, "tilt_axis_deg": 30.0})
    img, truth = render(scene, 0)
    lin = _linear(img)[..., 1]
    mask = lin > 0.5 * np.percentile(lin, 99)
    ys, xs = np.nonzero(mask)
    area_r = np.sqrt(mask.sum() / np.pi)
    assert xs.mean() == pytest.approx(truth["field"]["cx"], abs=0.3)
    assert ys.mean() == pytest.approx(truth["field"]["cy"], abs=0.3)
    assert area_r == pytest.approx(truth["field"]["r"], rel=0.005)


def test_sensor_noise_is_shot_plus_read_noise_in_linear_light():
    # Photon shot noise is Poisson (variance = mean electrons) plus Gaussian read noise
    # (standard sensor model, e.g. EMVA 1288).
    rng = np.random.default_rng(0)
    full_well, read = 2000.0, 4.0
    scene = Scene(full_well=full_well, read_noise=read, denoise=0.0, sharpen=0.0, vignetting=0.0,
                  exposure=1.0, white_balance=1.0, bayer=False)
    for level in (0.05, 0.2, 0.5):
        flat = np.full((1, 300, 300), level, np.float32)
        out = phone_capture(flat, scene, rng, np.ones(3))
        lin = _linear(out[..., 1])
        expected = np.sqrt(level * full_well + read**2) / full_well
        assert lin.mean() == pytest.approx(level, rel=0.02)
        # 8-bit quantisation adds a little variance; the model must dominate
        assert lin.std() == pytest.approx(expected, rel=0.12)


def test_over_exposure_clips_highlights():
    scene = Scene(stone_ris=(1.60,), width=320, height=240, **{**clean_overrides(), "exposure": 2.5})
    img, _ = render(scene, 0)
    assert (img[..., 0] == 255).mean() > 0.1  # the bright side of the field is clipped
    under = Scene(stone_ris=(1.60,), width=320, height=240, **{**clean_overrides(), "exposure": 0.3})
    assert render(under, 0)[0].max() < 200


def test_dust_specks_are_drawn_and_recorded():
    base = dict(stone_ris=(), liquid_line=0.0, width=320, height=240, **clean_overrides())
    clean, _ = render(Scene(**base), 4)
    dusty, truth = render(Scene(**{**base, "dust": 6}), 4)
    assert len(truth["dust"]) == 6
    assert (dusty.astype(int) - clean.astype(int)).min() < -20  # dark specks
    assert (dusty.astype(int) - clean.astype(int)).max() <= 1


def test_bayer_mosaic_keeps_levels_and_colour():
    rng = np.random.default_rng(1)
    scene = Scene(full_well=3000.0, denoise=0.0, sharpen=0.0, vignetting=0.0, exposure=1.0, bayer=True)
    colour = np.array([1.0, 0.6, 0.1])  # a sodium-like cast
    flat = np.full((1, 200, 200), 0.4, np.float32)
    lin = _linear(phone_capture(flat, scene, rng, colour))
    assert lin.reshape(-1, 3).mean(axis=0) == pytest.approx(0.4 * colour, rel=0.03, abs=0.003)
    # demosaicing interpolates, so neighbouring pixels' noise is correlated
    g = lin[..., 1] - lin[..., 1].mean()
    corr = (g[:, 1:] * g[:, :-1]).mean() / g.var()
    assert corr > 0.1


def test_lateral_chromatic_aberration_shifts_red_out_and_blue_in():
    # Lateral colour: red imaged larger than blue about the lens axis (textbook lens aberration).
    base = dict(stone_ris=(), liquid_line=0.0, width=600, height=400, field_cx=0.75, field_diameter=0.5,
                labels=False, spine=False, ink=0.0, surround=0.0, **clean_overrides())
    img, truth = render(Scene(**{**base, "lateral_ca": 0.01, "white_balance": 1.0, "light": "white"}), 0)
    lin = _linear(img)
    row = int(round(truth["field"]["cy"]))
    right_rim = {}
    for c in (0, 2):
        profile = lin[row, :, c] / lin[row, :, c].max()
        right_rim[c] = np.nonzero(profile > 0.5)[0].max()
    # the field's outer rim (away from the frame centre) lies further out in red than in blue
    assert right_rim[0] - right_rim[2] >= 3


def test_glare_lights_the_surround_near_the_field():
    base = dict(stone_ris=(), liquid_line=0.0, width=400, height=300, surround=0.0, **clean_overrides())
    plain, truth = render(Scene(**base), 0)
    glared, _ = render(Scene(**{**base, "glare": 0.05}), 0)
    x = int(truth["field"]["cx"] + truth["field"]["r"] + 8)
    y = int(truth["field"]["cy"])
    assert _linear(glared)[y, x, 0] > _linear(plain)[y, x, 0] + 0.005


def test_stray_light_lifts_the_dark_side_only_a_little():
    from critline.synth.render import eyepiece_view

    base = Scene(stone_ris=(1.60,), liquid_line=0.0, labels=False, spine=False, ink=0.0,
                 **clean_overrides())
    dark_u = float(scale_map(base).position(1.40))
    plain, c0, _ = eyepiece_view(base, 100.0)
    stray, _, _ = eyepiece_view(Scene(**{**base.__dict__, "stray_light": 0.05}), 100.0)
    col, row = int(round(c0 + dark_u * 100)), int(round(c0))
    assert stray[0, row, col] > plain[0, row, col] + 0.01
    bright_col = int(round(c0 + float(scale_map(base).position(1.70)) * 100))
    assert stray[0, row, bright_col] == pytest.approx(plain[0, row, bright_col], rel=0.06)
