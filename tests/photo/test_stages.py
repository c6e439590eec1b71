"""Stages 2-4 alone on plain drawn eyepiece views (tests/photo/drawing.py, independent of the synthesizer)."""

from __future__ import annotations

import numpy as np
import pytest

from critline.instrument import DEFAULT
from critline.photo.field import find_field
from critline.photo.frame import axis_angle, make_frame
from critline.photo.graduations import find_column, find_graduations, normalised
from critline.photo.profile import brightness_profile
from tests.photo.drawing import draw_eyepiece


def _float(img):
    return img.astype(np.float32) / 255.0


def _grey(img):
    f = _float(img)
    return (0.299 * f[..., 0] + 0.587 * f[..., 1] + 0.114 * f[..., 2]).astype(np.float32)


@pytest.mark.parametrize("centre, radius", [((480, 360), 300.0), ((300, 330), 200.0), ((860, 300), 280.0)])
def test_field_circle_found(centre, radius):
    img, truth = draw_eyepiece(size=(720, 960), centre=centre, radius=radius, angle_deg=25, seed=3)
    result = find_field(_grey(img))
    c = result.circle
    assert c is not None, result.reason
    assert abs(c.cx - centre[0]) < 0.02 * radius and abs(c.cy - centre[1]) < 0.02 * radius
    assert abs(c.r - radius) < 0.03 * radius
    # the third case runs off the frame's right side
    assert c.clipped == (centre[0] + radius > 960)


def test_blank_frames_rejected():
    for level in (0, 128, 255):
        assert find_field(np.full((300, 400), level / 255, np.float32)).circle is None
    rng = np.random.default_rng(0)
    noise = rng.random((300, 400)).astype(np.float32)
    assert find_field(noise).circle is None


@pytest.mark.parametrize("angle", [0.0, 37.0, 133.0, 200.0, 290.0])
def test_axis_and_graduations_identified(angle):
    img, truth = draw_eyepiece(size=(720, 960), angle_deg=angle, edges=(1.62,), seed=5)
    grey = _grey(img)
    circle = find_field(grey).circle
    axis = axis_angle(grey, circle.cx, circle.cy, circle.r)
    # the axis orientation (mod 180 degrees) within half a degree
    diff = (np.rad2deg(axis.angle) - angle + 90) % 180 - 90
    assert abs(diff) < 0.5
    frame = make_frame(_float(img), circle.cx, circle.cy, circle.r, axis.angle, 1)
    dark = normalised(frame.grey, frame.inside, frame.radius)
    col = find_column(dark, frame.inside, frame.radius, DEFAULT.count)
    grads, frame = find_graduations(frame, DEFAULT, dark, col, None if False else _direction(frame))
    # every truth graduation maps back to its own index within 0.05 graduation, where it crosses
    # the graduation column found (two points on each drawn line, intersected with that column)
    a = np.array([np.cos(np.deg2rad(angle)), np.sin(np.deg2rad(angle))])
    b = np.array([-a[1], a[0]])
    base = np.array([truth["field"]["cx"], truth["field"]["cy"]])[None, :] + truth["graduation_positions"][:, None] * a
    r0, c0 = frame.from_photo(base[:, 0], base[:, 1])
    r1, c1 = frame.from_photo(base[:, 0] + 100 * b[0], base[:, 1] + 100 * b[1])
    j = (grads.column.v_lo + grads.column.v_hi) / 2
    rows = r0 + (r1 - r0) * (j - c0) / (c1 - c0)
    k = grads.index_of(rows)
    ok = np.isfinite(k)
    assert ok.sum() >= 45
    assert np.max(np.abs(k[ok] - np.arange(51)[ok])) < 0.05
    assert grads.figures["graduations_found"] >= 45


def _direction(frame):
    """Values increase toward the bright side of the drawn shadow."""
    def decide(lo, hi):
        rows = np.arange(frame.grey.shape[0])
        lum = np.where(frame.inside, frame.grey, np.nan)
        prof = np.nanmean(lum, axis=1)
        sel = (rows >= lo) & (rows <= hi) & np.isfinite(prof)
        half = (lo + hi) / 2
        return bool(np.nanmean(prof[sel & (rows > half)]) > np.nanmean(prof[sel & (rows < half)]))
    return decide


def test_profile_beside_graduations_ignores_dust():
    img, truth = draw_eyepiece(size=(600, 800), angle_deg=0.0, edges=(1.50,), seed=2, noise=0.0)
    # dust specks inside the field, away from the graduations
    img = img.copy()
    for x, y in ((300, 420), (520, 200), (610, 380)):
        img[y - 4:y + 5, x - 4:x + 5] = 0
    grey = _grey(img)
    circle = find_field(grey).circle
    frame = make_frame(_float(img), circle.cx, circle.cy, circle.r, 0.0, 1)
    dark = normalised(frame.grey, frame.inside, frame.radius)
    col = find_column(dark, frame.inside, frame.radius, DEFAULT.count)
    prof = brightness_profile(frame, col.v_lo, col.v_hi, int(0.35 * frame.radius), col.period)
    # far above the edge the profile is the bright level everywhere (no dip from dust)
    bright = prof.brightness[prof.rows > frame.half + 0.3 * frame.radius]
    assert bright.min() > 0.97 * np.median(bright)
    assert np.all(prof.noise > 0)
    assert prof.rgb.shape == (3, len(prof.rows))
