"""The field search's fast paths give what their plain definitions give.

References: RANSAC's consensus count (Fischler and Bolles 1981) taken literally, point by point,
with the distance from each trial circle; the least-squares normal equations scaled to a unit
diagonal written out with explicit matrices (common practice).
"""

from __future__ import annotations

import numpy as np
from skimage.measure import CircleModel

import critline.photo.field as field
from critline.photo.edgemodel import _scaled_normal
from critline.photo.field import _circles_from_triples, find_field, ransac_circle
from tests.photo.drawing import draw_eyepiece


def _plain_ransac_pick(points, tol, r_range, trials=400, seed=0):
    """The trial circle with most points within tol, by distances one trial at a time."""
    rng = np.random.default_rng(seed)
    idx = rng.integers(0, len(points), size=(trials, 3))
    cx, cy, r = _circles_from_triples(points[idx[:, 0]], points[idx[:, 1]], points[idx[:, 2]])
    best, best_count = None, -1
    for x, y, rr in zip(cx, cy, r, strict=True):
        if not (np.isfinite(rr) and r_range[0] <= rr <= r_range[1]):
            continue
        count = int(np.sum(np.abs(np.hypot(points[:, 0] - x, points[:, 1] - y) - rr) < tol))
        if count > best_count:
            best, best_count = (x, y, rr), count
    return best


def test_ransac_consensus_matches_the_plain_count():
    rng = np.random.default_rng(11)
    for case in range(6):
        t = rng.uniform(0, 2 * np.pi, 500)
        ring = np.stack([200 + 120 * np.cos(t), 150 + 120 * np.sin(t)], axis=1) + rng.normal(0, 0.8, (500, 2))
        clutter = rng.uniform(0, 400, (int(rng.integers(0, 400)), 2))
        pts = np.rint(np.concatenate([ring, clutter]))
        fit = ransac_circle(pts, 1.5, (30, 250), seed=case)
        pick = _plain_ransac_pick(pts, 1.5, (30, 250), seed=case)
        # the plain pick, refined as ransac_circle refines its pick (least squares on its inliers,
        # kept when it holds at least as many), gives the same circle
        inl = np.abs(np.hypot(pts[:, 0] - pick[0], pts[:, 1] - pick[1]) - pick[2]) < 1.5
        model = CircleModel.from_estimate(pts[inl])
        ref = (float(pick[0]), float(pick[1]), float(pick[2]))
        if model:
            cand = (float(model.center[0]), float(model.center[1]), float(model.radius))
            inl2 = np.abs(np.hypot(pts[:, 0] - cand[0], pts[:, 1] - cand[1]) - cand[2]) < 1.5
            if inl2.sum() >= inl.sum():
                ref = cand
        assert fit is not None
        assert fit[:3] == ref
        assert abs(fit[0] - 200) < 1.0 and abs(fit[1] - 150) < 1.0 and abs(fit[2] - 120) < 1.0


def _grey(img):
    f = img.astype(np.float32) / 255.0
    return (0.299 * f[..., 0] + 0.587 * f[..., 1] + 0.114 * f[..., 2]).astype(np.float32)


def test_a_fully_outlined_circle_ends_the_search_with_the_same_answer(monkeypatch):
    img, _ = draw_eyepiece(size=(360, 480), centre=(240, 180), radius=140.0, angle_deg=25, seed=5)
    grey = _grey(img)
    fast = find_field(grey).circle
    assert fast is not None and fast.support == 1.0
    # every point set traced and fitted (support never counted as full): the same circle wins
    real_score = field._score_circle
    traced = []

    def never_full(*args):
        support, frac = real_score(*args)
        traced.append(support)
        return min(support, 0.999999), frac

    monkeypatch.setattr(field, "_score_circle", never_full)
    slow = find_field(grey).circle
    assert len(traced) > 1
    assert (slow.cx, slow.cy, slow.r) == (fast.cx, fast.cy, fast.r)


def test_scaled_normal_equations():
    rng = np.random.default_rng(3)
    a = rng.normal(size=(80, 7)) * rng.uniform(0.01, 100, 7)
    normal, scale = _scaled_normal(a)
    full = a.T @ a
    ref_scale = np.sqrt(np.diag(full))
    ref = full / np.outer(ref_scale, ref_scale) + 1e-12 * np.eye(7)
    assert np.array_equal(scale, ref_scale)
    assert np.array_equal(normal, ref)
