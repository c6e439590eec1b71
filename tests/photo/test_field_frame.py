"""The field stop refined at working resolution and the field position measured on it (the frame
the field-frame fallback reads in), on plain drawn eyepiece views (tests/photo/drawing.py)."""

from __future__ import annotations

import numpy as np
import pytest
from PIL import Image

from critline.photo.field import find_field, refine_stop
from critline.photo.frame import make_frame
from critline.photo.reading import FIELD_POSITION_SIGMA, read_photo
from tests.photo.drawing import draw_eyepiece


def _grey(img):
    f = img.astype(np.float32) / 255.0
    return (0.299 * f[..., 0] + 0.587 * f[..., 1] + 0.114 * f[..., 2]).astype(np.float32)


def _edge_u(truth, n):
    """Drawn edge's distance from the field centre along the axis, in field radii."""
    a, b, mid = truth["map"]
    return (a * (n - mid) + b * (n - mid) ** 2) / truth["field"]["r"]


@pytest.mark.parametrize("shift, scale", [((0.03, -0.02), 0.96), ((-0.04, 0.0), 1.04), ((0.0, 0.05), 1.0)])
def test_refined_stop_recovers_the_drawn_circle(shift, scale):
    img, truth = draw_eyepiece(size=(720, 960), angle_deg=20.0, edges=(1.62,), seed=7)
    cx, cy, r = truth["field"]["cx"], truth["field"]["cy"], truth["field"]["r"]
    out = refine_stop(img, cx + shift[0] * r, cy + shift[1] * r, scale * r)
    assert out is not None
    # the drawing's stop has a one-pixel ramp centred 0.5 px inside ``radius`` (drawing.py:
    # clip(radius - r + 0.5)); a tenth of a pixel on each is common practice for sub-pixel edges
    assert abs(out.cx - cx) < 0.3 and abs(out.cy - cy) < 0.3
    assert abs(out.r - r) < 0.8


def test_field_position_of_the_edge_unbiased_by_the_dark_half():
    # the coarse search fits thresholded boundaries; on the shadow's dim half they sit inside the
    # stop, which pulled the centre toward the bright half by a few hundredths of a radius
    n = 1.58
    img, truth = draw_eyepiece(size=(720, 960), angle_deg=0.0, edges=(n,), seed=2, ink=0.0)
    circle = find_field(_grey(img)).circle
    frame = make_frame(img, circle.cx, circle.cy, circle.r, 0.0, 1)
    assert frame.stop is not None
    # photo point on the drawn edge (its row in the frame) -> field position
    u_true = _edge_u(truth, n)
    x = truth["field"]["cx"] + u_true * truth["field"]["r"]
    row, _ = frame.from_photo(x, truth["field"]["cy"])
    assert abs(float(frame.field_position(row)) - u_true) < 0.003  # about one pixel in 300


def _field_position_of(img, x, y, angle):
    circle = find_field(_grey(img)).circle
    frame = make_frame(img, circle.cx, circle.cy, circle.r, angle, 1)
    row, _ = frame.from_photo(x, y)
    return float(frame.field_position(row)), frame


def test_field_position_invariant_to_zoom_shift_and_rotation():
    n = 1.66
    got = []
    for size, centre, radius, angle in [((720, 960), (480, 360), 300.0, 0.0),
                                        ((720, 960), (330, 400), 190.0, 123.0),
                                        ((900, 700), (380, 470), 260.0, 251.0)]:
        img, truth = draw_eyepiece(size=size, centre=centre, radius=radius, angle_deg=angle, edges=(n,), seed=9)
        u = _edge_u(truth, n)
        th = np.deg2rad(angle)
        x, y = centre[0] + u * radius * np.cos(th), centre[1] + u * radius * np.sin(th)
        f, frame = _field_position_of(img, x, y, th)
        got.append(f)
        assert abs(f - u) < 0.004
    assert np.ptp(got) < 0.005


def test_field_position_follows_a_flipped_frame():
    img, truth = draw_eyepiece(size=(720, 960), angle_deg=40.0, edges=(1.55,), seed=1)
    circle = find_field(_grey(img)).circle
    frame = make_frame(img, circle.cx, circle.cy, circle.r, np.deg2rad(40.0), 1)
    flipped = frame.flipped()
    x, y = 600.0, 420.0
    r1, _ = frame.from_photo(x, y)
    r2, _ = flipped.from_photo(x, y)
    assert flipped.stop == frame.stop
    assert float(frame.field_position(r1)) == pytest.approx(-float(flipped.field_position(r2)), abs=1e-9)


def test_crescent_ramp_does_not_pull_the_stop():
    # an off-axis phone clips the exit pupil: a broad dark crescent inside the stop on one side
    img, truth = draw_eyepiece(size=(720, 960), angle_deg=10.0, edges=(1.50,), seed=3, ink=0.0)
    cx, cy, r = truth["field"]["cx"], truth["field"]["cy"], truth["field"]["r"]
    yy, xx = np.mgrid[0:720, 0:960].astype(np.float64)
    d = np.hypot(xx - (cx - 0.3 * r), yy - cy) / r  # lit disk moved 0.3 radii to the left
    lit = np.clip((1 - d) / 0.15 + 0.5, 0, 1)
    lit = lit * lit * (3 - 2 * lit)
    f = (img.astype(np.float64) / 255.0) ** 2.2 * (0.06 + 0.94 * lit)[..., None]
    img2 = (np.clip(f, 0, 1) ** (1 / 2.2) * 255 + 0.5).astype(np.uint8)
    out = refine_stop(img2, cx + 0.02 * r, cy - 0.02 * r, 1.02 * r)
    assert out is not None
    # within 1 % of the radius (a crescent-side fit would be several per cent off)
    assert np.hypot(out.cx - cx, out.cy - cy) < 0.01 * r and abs(out.r - r) < 0.01 * r


class _Calibration:
    """Stand-in calibration with a field-frame map built from the drawing's own geometry, and a
    scale map giving the nominal value (so the test sees which path answered)."""

    id = "drawn-geometry"
    field_map = True

    def __init__(self, truth):
        self.a, self.b, self.mid = truth["map"]
        self.radius = truth["field"]["r"]

    def _value(self, f):
        u = f * self.radius
        return self.mid + (-self.a + np.sqrt(self.a * self.a + 4 * self.b * u)) / (2 * self.b)

    def field_to_ri(self, f, f_unc):
        slope = (self._value(f + 1e-4) - self._value(f - 1e-4)) / 2e-4
        return float(self._value(f)), float(abs(slope) * f_unc), ("field_frame",)

    def scale_to_ri(self, position, unc):
        return 1.30 + 0.01 * position, 0.01 * unc, ()


def test_fallback_only_without_graduations_and_marked(tmp_path):
    n = 1.62
    for ink, mode in ((0.75, "graduations"), (0.0, "field_frame")):
        img, truth = draw_eyepiece(size=(720, 960), angle_deg=30.0, edges=(n,), seed=4, ink=ink)
        p = tmp_path / f"ink{ink}.png"
        Image.fromarray(img).save(p)
        cal = _Calibration(truth)
        r = read_photo(p, calibration=cal)
        assert r.mode == mode and r.status == "ok", r.reason
        flags = r.quality.flags
        stone = [e for e in r.edges if e.kind == "stone"]
        assert stone and abs(stone[0].ri - n) < max(2 * stone[0].uncertainty, 0.002)
        if mode == "field_frame":
            assert "field_frame" in flags and "lower_precision" in flags
            # the field position's own uncertainty (perspective, outline) is in the stated one
            f = stone[0].field_position
            slope = (cal._value(f + 0.01) - cal._value(f - 0.01)) / 0.02
            assert stone[0].uncertainty >= 0.99 * slope * FIELD_POSITION_SIGMA
            assert abs(stone[0].field_position - _edge_u(truth, n)) < 0.005
        else:
            assert "lower_precision" not in flags and "field_frame" not in flags
            assert abs(stone[0].field_position - _edge_u(truth, n)) < 0.005
