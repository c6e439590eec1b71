"""The vignetting crescent: found where the phone's pupil dims part of the field, not invented where
only a straight shadow edge crosses it, and left out of the brightness profile so that its curved
boundary is not read as a stone edge.

Photos come from the synthesizer (tuning seeds), whose crescent is the field outside a circle of the
stop's radius displaced by ``crescent`` stop radii toward ``crescent_angle_deg`` (see
critline.synth.render.field_maps), so the lit circle's true place is known.
"""

from __future__ import annotations

import json
import math

import cv2
import numpy as np
import pytest

from critline.photo import read_photo
from critline.photo.field import find_field
from critline.photo.frame import axis_angle, make_frame
from critline.photo.load import load_photo
from critline.photo.reading import _base_image, _coarse_grey, _working_rgb
from critline.photo.vignetting import (
    LIT_MARGIN,
    MIN_TRANSMISSION,
    Crescent,
    crescent_transmission,
    find_crescent,
)


def _photo(tmp_path, seed, **overrides):
    from critline.synth import random_scene, write_photo

    scene = random_scene(seed, light="sodium", megapixels=1.0, field_diameter=0.8, defocus=0.0, motion=0.0,
                         field_cx=0.5, field_cy=0.5, polariser="both", exposure=0.8, **overrides)
    path = tmp_path / f"v{seed}.jpg"
    write_photo(path, scene, seed)
    return path, json.loads(path.with_suffix(".json").read_text())


def _frame(path):
    photo = load_photo(path)
    base, rb = _base_image(photo)
    coarse, rc = _coarse_grey(photo, base, rb)
    circle = find_field(coarse, rc).circle
    work = _working_rgb(photo, circle, base, rb)
    rw, (ox, oy) = work.reduce, work.origin
    wcx, wcy, wr = (circle.cx - (rw - 1) / 2) / rw, (circle.cy - (rw - 1) / 2) / rw, circle.r / rw
    axis = axis_angle(cv2.cvtColor(work.rgb, cv2.COLOR_RGB2GRAY), wcx - ox, wcy - oy, wr)
    return make_frame(work.rgb, wcx, wcy, wr, axis.angle, rw, origin=work.origin, shape=work.shape)


@pytest.mark.parametrize("angle", [30.0, 160.0, 250.0])
def test_crescent_found_where_the_pupil_dims_the_field(tmp_path, angle):
    path, truth = _photo(tmp_path, 31, crescent=0.4, crescent_angle_deg=angle, stone_ris=(1.544,))
    frame = _frame(path)
    found = find_crescent(frame)
    assert found is not None
    # the lit circle: about the stop's radius (the steepest part of the boundary's ramp lies a
    # little inside it where the rim's own falloff adds), its centre off the stop's centre
    off = math.hypot(found.cx - frame.half, found.cy - frame.half) / frame.radius
    assert 0.75 < found.r / frame.radius < 1.15, found
    assert 0.2 < off < 0.6, found
    # dark beyond it: the synthesizer leaves 6 % of the light in the crescent's depth
    assert found.dark_ratio < 0.5
    # the crescent's share of the field: two unit circles 0.4 apart overlap on 75 % of each
    # (lens area 2 acos(d/2) - (d/2) sqrt(4 - d^2), over pi)
    d = 0.4
    lens = (2 * math.acos(d / 2) - (d / 2) * math.sqrt(4 - d * d)) / math.pi
    assert abs(found.share - (1 - lens)) < 0.1, found


@pytest.mark.parametrize("stones", [(1.544,), (1.544, 1.553), ()])
def test_no_crescent_from_straight_edges(tmp_path, stones):
    path, _ = _photo(tmp_path, 32, crescent=0.0, stone_ris=stones)
    assert find_crescent(_frame(path)) is None


def test_crescent_boundary_is_not_read_as_a_stone_edge(tmp_path):
    # no stone in contact: the field is bright but for the crescent at the scale's low end, whose
    # boundary a brightness profile across the whole field shows as a blurred rise
    path, truth = _photo(tmp_path, 33, crescent=0.45, crescent_angle_deg=0.0, axis_angle_deg=0.0,
                         stone_ris=())
    assert truth["status"] == "no_edge"
    r = read_photo(path)
    assert r.status == "no_edge", (r.edges, r.quality.flags)
    assert not [e for e in r.edges if e.kind == "stone"]


def test_edge_read_beside_a_crescent(tmp_path):
    # the lit circle displaced toward the scale's low end: the crescent lies across the bright
    # part of the field, beyond the edge
    path, truth = _photo(tmp_path, 34, crescent=0.4, crescent_angle_deg=200.0, axis_angle_deg=0.0,
                         stone_ris=(1.6,))
    r = read_photo(path)
    true_ri = [e["ri"] for e in truth["edges"] if e["kind"] == "stone"][0]
    stones = [e for e in r.edges if e.kind == "stone"]
    assert r.status == "ok" and len(stones) == 1
    # the truth is the onset of total reflection (Snell's law) on the synthesizer's scale
    assert abs(stones[0].ri - true_ri) <= max(2 * stones[0].uncertainty, 0.001)
    assert np.isfinite(r.quality.figures.get("crescent_share", np.nan))


def test_transmission_curve_recovered_and_divided_out():
    # a field with a shadow edge across the rows, dimmed by a crescent whose transmission falls
    # with depth (a smoothstep ramp to 6 %, like a defocused pupil's edge): dividing by the
    # estimated curve gives back the undimmed field where enough light passes
    n, radius = 400, 200.0
    rows = np.arange(n, dtype=float)
    cols = np.arange(n, dtype=float)
    shadow = np.where(rows < 150, 0.05, 0.9)[:, None] * np.ones((1, n))
    cres = Crescent(cx=260.0, cy=200.0, r=200.0, arc=2.0, dark_ratio=0.1, share=0.2)
    depth = (np.hypot(cols[None, :] - cres.cx, rows[:, None] - cres.cy) - cres.r) / radius + LIT_MARGIN
    x = np.clip(depth / 0.2, 0, 1)
    true_t = 1 - 0.94 * x * x * (3 - 2 * x)
    ok = np.hypot(cols[None, :] - 200, rows[:, None] - 200) < 0.9 * radius
    rng = np.random.default_rng(1)
    lum = shadow * true_t * (1 + 0.01 * rng.standard_normal((n, n)))
    t = crescent_transmission(lum, rows, cols, cres, radius, ok)
    known = ok & np.isfinite(t)
    assert np.all(np.isnan(t[ok & (true_t < 0.8 * MIN_TRANSMISSION)]))
    # where the light passes, the curve is within 3 % of the truth and the shadow edge comes back
    assert np.max(np.abs(t[known] - true_t[known])) < 0.03
    flat = lum / np.where(known, t, 1.0)
    bright_rows = slice(200, 300)
    assert np.allclose(np.nanmedian(np.where(known, flat, np.nan)[bright_rows], axis=1), 0.9, atol=0.02)


def test_overlay_marks_the_crescent(tmp_path):
    # the evidence shows where the crescent's dimming was divided out (the lit circle's arc)
    from PIL import Image

    from critline.photo.overlay import _BLUE

    path, _ = _photo(tmp_path, 34, crescent=0.4, crescent_angle_deg=200.0, axis_angle_deg=0.0,
                     stone_ris=(1.6,))
    out = tmp_path / "marked"
    out.mkdir()
    read_photo(path, overlay_dir=out)
    marked = np.asarray(Image.open(next(out.iterdir())).convert("RGB")).astype(int)
    blue_rgb = np.array(_BLUE[::-1])  # the overlay draws in OpenCV's BGR order
    close = np.abs(marked - blue_rgb).sum(axis=2) < 60
    assert close.sum() > 100
