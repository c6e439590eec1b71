"""The scale axis's direction (critline.photo.frame.axis_angle) on plain drawn eyepiece views.

The drawings (tests/photo/drawing.py) are independent of critline.synth; their axis direction is
known exactly.  The tolerances are our own (not from an outside source): the doubled-angle mean of
Scharr gradients came within 0.4 degree on these drawings at every rotation tried; the earlier
Sobel-and-histogram-window estimate was up to 1.8 degrees off on the same images and moved by
0.4 degree when a handful of pixels changed by one grey level.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from critline.photo.frame import axis_angle
from tests.photo.drawing import draw_eyepiece


def _grey(angle_deg, **kw):
    img, truth = draw_eyepiece(size=(500, 500), radius=230, angle_deg=angle_deg, **kw)
    c = truth["field"]
    return cv2.cvtColor(img, cv2.COLOR_RGB2GRAY), (c["cx"], c["cy"], c["r"])


def _axial_error_deg(angle_rad, truth_deg):
    """Difference of two axis directions, degrees in [-90, 90) (an axis is the same turned by 180)."""
    return (np.degrees(angle_rad) - truth_deg + 90.0) % 180.0 - 90.0


@pytest.mark.parametrize("seed", [3, 11])
def test_axis_recovered_at_every_rotation(seed):
    # rotations 11.25 degrees apart from 2 degrees on: the pixel grid's diagonals and axes, and
    # between them, where a derivative kernel's anisotropy shows most
    angles = np.arange(0.0, 180.0, 11.25) + 2.0
    errors = []
    for a in angles:
        grey, (cx, cy, r) = _grey(float(a), seed=seed, noise=0.02)
        errors.append(_axial_error_deg(axis_angle(grey, cx, cy, r).angle, float(a)))
    errors = np.array(errors)
    assert np.max(np.abs(errors)) < 0.5, np.round(errors, 2)
    # no leaning toward the pixel axes: the 4-fold pattern an anisotropic gradient kernel leaves
    t = np.radians(angles)
    pattern = np.c_[np.sin(4 * t), np.cos(4 * t), np.ones_like(t)]
    coef = np.linalg.lstsq(pattern, errors, rcond=None)[0]
    assert np.hypot(coef[0], coef[1]) < 0.25, coef


@pytest.mark.parametrize("noise, ink", [(0.03, 0.4), (0.05, 0.25)])
def test_axis_moves_smoothly_with_the_image(noise, ink):
    # faint graduations in a noisy field; changing five pixels by one grey level must move the
    # estimate by a like tiny amount, never by a histogram bin
    worst = 0.0
    for a in np.arange(0.0, 180.0, 22.5) + 7.0:
        grey, (cx, cy, r) = _grey(float(a), seed=5, noise=noise, ink=ink)
        start = axis_angle(grey, cx, cy, r).angle
        rng = np.random.default_rng(1)
        for _ in range(8):
            touched = grey.copy()
            ys, xs = rng.integers(150, 350, 5), rng.integers(150, 350, 5)
            touched[ys, xs] = np.where(touched[ys, xs] < 255, touched[ys, xs] + 1, touched[ys, xs] - 1)
            moved = abs(_axial_error_deg(axis_angle(touched, cx, cy, r).angle, np.degrees(start)))
            worst = max(worst, moved)
    assert worst < 0.02, worst


def test_flat_field_gives_no_direction():
    grey = np.full((300, 300), 128, np.uint8)
    est = axis_angle(grey, 150.0, 150.0, 120.0)
    assert est.angle == 0.0 and est.coherence == 0.0
