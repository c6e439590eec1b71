"""Stage 2: the circular field stop of the eyepiece.

Method
------
At reduced resolution the smoothed luminance is thresholded at a few levels
between the dark surround and the field (Otsu's threshold, and lower levels
so that the shadow's dark half still counts as field), the largest region is
kept and its boundary points -- those not on the frame border -- are fitted
with a circle by RANSAC (Fischler and Bolles 1981; ``skimage.measure.ransac``
with ``skimage.measure.CircleModel``).  A clipped side, a vignetting crescent
or the straight shadow boundary are outliers to the circle and do not pull
the fit.  The best-supported circle is then checked: enough of its in-frame
circumference must be seen as a boundary, and the surround must be dark
compared with the field.  Anything else is not an eyepiece view.

References
----------
Otsu, N. (1979) A threshold selection method from gray-level histograms.
IEEE Trans. SMC 9(1), 62-66.
Fischler, M. A. and Bolles, R. C. (1981) Random sample consensus.
Comm. ACM 24(6), 381-395.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np
from skimage.filters import threshold_otsu
from skimage.measure import CircleModel, ransac


@dataclass(frozen=True)
class FieldCircle:
    """The field stop, in pixels of the full-size (EXIF-oriented) photo.

    Attributes
    ----------
    cx, cy, r : float
        Centre and radius.
    support : float
        Fraction of the in-frame circumference seen as a field-stop boundary.
    inside_frame : float
        Fraction of the circumference inside the photo frame (1: not clipped).
    contrast : float
        (field brightness - surround brightness) / field brightness.
    figures : dict
        Other named figures.
    """

    cx: float
    cy: float
    r: float
    support: float
    inside_frame: float
    contrast: float
    figures: dict = field(default_factory=dict)

    @property
    def clipped(self) -> bool:
        return self.inside_frame < 0.97


@dataclass(frozen=True)
class FieldResult:
    circle: FieldCircle | None
    reason: str | None = None


def _boundary_points(mask: np.ndarray) -> np.ndarray:
    """(x, y) boundary points of the largest region, frame-border points removed."""
    mask = mask.astype(np.uint8)
    n, labels, stats, _ = cv2.connectedComponentsWithStats(mask, connectivity=8)
    if n < 2:
        return np.empty((0, 2))
    big = 1 + int(np.argmax(stats[1:, cv2.CC_STAT_AREA]))
    region = (labels == big).astype(np.uint8)
    contours, _ = cv2.findContours(region, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
    if not contours:
        return np.empty((0, 2))
    pts = np.concatenate([c.reshape(-1, 2) for c in contours]).astype(np.float64)
    h, w = mask.shape
    keep = (pts[:, 0] > 1) & (pts[:, 0] < w - 2) & (pts[:, 1] > 1) & (pts[:, 1] < h - 2)
    return pts[keep]


def _in_frame_fraction(cx, cy, r, w, h, n=360):
    t = np.linspace(0, 2 * np.pi, n, endpoint=False)
    x, y = cx + r * np.cos(t), cy + r * np.sin(t)
    return float(np.mean((x >= 0) & (x < w) & (y >= 0) & (y < h))), t, x, y


def _score_circle(cx, cy, r, pts, w, h, tol):
    """Fraction of the in-frame circumference with a boundary point within tol."""
    frac, t, x, y = _in_frame_fraction(cx, cy, r, w, h)
    inside = (x >= 2) & (x < w - 2) & (y >= 2) & (y < h - 2)
    if inside.sum() < 20 or len(pts) == 0:
        return 0.0, frac
    d = np.hypot(pts[:, 0] - cx, pts[:, 1] - cy)
    near = np.abs(d - r) < tol
    ang = np.arctan2(pts[near, 1] - cy, pts[near, 0] - cx) % (2 * np.pi)
    bins = np.zeros(len(t), bool)
    bins[(ang / (2 * np.pi) * len(t)).astype(int) % len(t)] = True
    return float(bins[inside].mean()), frac


def find_field(grey: np.ndarray, reduce: int = 1, seed: int = 0) -> FieldResult:
    """Find the field stop in a reduced-resolution grey image.

    Parameters
    ----------
    grey : ndarray, float32
        Luma (as stored, 0..1) of the photo at 1/``reduce`` size, about 250-600 px on the short side.
    reduce : int
        Reduction factor of ``grey``; the result is in full-size pixels.
    seed : int
        Seed of the RANSAC sampler (results are deterministic).

    Returns
    -------
    FieldResult
        ``circle`` None and a ``reason`` when no field stop is found.
    """
    h, w = grey.shape
    short = min(h, w)
    g = cv2.GaussianBlur(grey.astype(np.float32), (0, 0), max(1.0, short / 300))
    lo, hi = np.percentile(g, [2, 99.5])
    if hi - lo < 0.04:
        return FieldResult(None, "blank frame: no contrast")
    try:
        otsu = float(threshold_otsu(g))
    except ValueError:
        return FieldResult(None, "blank frame: no contrast")
    levels = sorted({otsu, lo + 0.5 * (otsu - lo), lo + 0.25 * (otsu - lo), lo + 0.12 * (hi - lo)})
    tol = max(1.5, short / 200)
    best = None
    for level in levels:
        mask = g > level
        pts = _boundary_points(mask)
        if len(pts) < 30:
            continue
        if len(pts) > 3000:  # thin out evenly, keeps RANSAC fast
            pts = pts[:: len(pts) // 3000 + 1]
        model, inliers = ransac(pts, CircleModel, min_samples=3, residual_threshold=tol,
                                max_trials=300, rng=seed)
        if model is None or inliers is None or inliers.sum() < 20:
            continue
        refined = CircleModel.from_estimate(pts[inliers])
        if refined:
            model = refined
        cx, cy = (float(v) for v in model.center)
        r = float(model.radius)
        if not (0.09 * short <= r <= 0.62 * short):
            continue
        support, frac = _score_circle(cx, cy, r, pts, w, h, tol)
        if best is None or support > best[0]:
            best = (support, frac, cx, cy, r, level)
    if best is None:
        return FieldResult(None, "no circular field stop found (not an eyepiece view?)")
    support, frac, cx, cy, r, level = best
    yy, xx = np.mgrid[0:h, 0:w]
    d = np.hypot(xx - cx, yy - cy)
    inside_v = g[d < 0.9 * r]
    outside_v = g[(d > 1.08 * r) & (d < 1.35 * r)]
    if inside_v.size < 50:
        return FieldResult(None, "no circular field stop found (not an eyepiece view?)")
    field_level = float(np.percentile(inside_v, 90))
    surround = float(np.percentile(outside_v, 50)) if outside_v.size > 50 else float(lo)
    contrast = (field_level - surround) / max(field_level, 1e-6)
    # where the field is bright the surround must be dark right across the stop
    circle = FieldCircle(cx * reduce + (reduce - 1) / 2, cy * reduce + (reduce - 1) / 2, r * reduce,
                         support, frac, contrast,
                         {"field_level": field_level, "surround_level": surround, "threshold": level})
    if support < 0.4:
        return FieldResult(None, f"no circular field stop found (best circle only {support:.0%} outlined)")
    if contrast < 0.6:
        return FieldResult(None, f"no dark surround around a bright field (contrast {contrast:.2f})")
    outside_frac = float(np.mean(outside_v > surround + 0.5 * (field_level - surround))) if outside_v.size else 0
    if outside_frac > 0.15:
        return FieldResult(None, "bright areas outside the candidate field stop (not an eyepiece view?)")
    return FieldResult(circle)
