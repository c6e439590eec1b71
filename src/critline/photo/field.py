"""Stage 2: the circular field stop of the eyepiece.

Method
------
At reduced resolution the smoothed luminance is thresholded at a few levels
between the dark surround and the field (Otsu's threshold, and lower levels
so that the shadow's dark half still counts as field), the largest region is
kept and its boundary points -- those not on the frame border -- are fitted
with a circle by RANSAC (Fischler and Bolles 1981; vectorised over the trials,
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
from skimage.measure import CircleModel


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


def _circles_from_triples(p1, p2, p3):
    """Circumcircles of point triples (vectorised); radius inf for collinear triples."""
    ax, ay = p1[:, 0], p1[:, 1]
    bx, by = p2[:, 0], p2[:, 1]
    cx, cy = p3[:, 0], p3[:, 1]
    d = 2 * (ax * (by - cy) + bx * (cy - ay) + cx * (ay - by))
    a2, b2, c2 = ax * ax + ay * ay, bx * bx + by * by, cx * cx + cy * cy
    with np.errstate(divide="ignore", invalid="ignore"):
        ux = (a2 * (by - cy) + b2 * (cy - ay) + c2 * (ay - by)) / d
        uy = (a2 * (cx - bx) + b2 * (ax - cx) + c2 * (bx - ax)) / d
    r = np.hypot(ax - ux, ay - uy)
    r[~np.isfinite(r)] = np.inf
    return ux, uy, r


def ransac_circle(points: np.ndarray, tol: float, r_range: tuple[float, float], trials: int = 400,
                  seed: int = 0):
    """RANSAC circle fit (Fischler and Bolles 1981), vectorised over the trials.

    Minimal samples of three points give circumcircles; the one with most
    points within ``tol`` wins and is refined by a least-squares circle fit
    (``skimage.measure.CircleModel``) on its inliers.

    Returns
    -------
    (cx, cy, r, inlier mask) or None
    """
    n = len(points)
    if n < 10:
        return None
    rng = np.random.default_rng(seed)
    idx = rng.integers(0, n, size=(trials, 3))
    cx, cy, r = _circles_from_triples(points[idx[:, 0]], points[idx[:, 1]], points[idx[:, 2]])
    ok = np.isfinite(r) & (r >= r_range[0]) & (r <= r_range[1])
    if not ok.any():
        return None
    cx, cy, r = cx[ok], cy[ok], r[ok]
    best_count, best = -1, None
    for start in range(0, len(r), 100):  # chunks keep the distance matrix small
        sl = slice(start, start + 100)
        d = np.abs(np.hypot(points[None, :, 0] - cx[sl, None], points[None, :, 1] - cy[sl, None]) - r[sl, None])
        counts = (d < tol).sum(axis=1)
        j = int(np.argmax(counts))
        if counts[j] > best_count:
            best_count, best = int(counts[j]), (cx[sl][j], cy[sl][j], r[sl][j])
    inl = np.abs(np.hypot(points[:, 0] - best[0], points[:, 1] - best[1]) - best[2]) < tol
    if inl.sum() < 10:
        return None
    model = CircleModel.from_estimate(points[inl])
    if model:
        c = model.center
        cand = (float(c[0]), float(c[1]), float(model.radius))
        inl2 = np.abs(np.hypot(points[:, 0] - cand[0], points[:, 1] - cand[1]) - cand[2]) < tol
        if inl2.sum() >= inl.sum():
            return cand[0], cand[1], cand[2], inl2
    return float(best[0]), float(best[1]), float(best[2]), inl


def _in_frame_fraction(cx, cy, r, w, h, n=360):
    t = np.linspace(0, 2 * np.pi, n, endpoint=False)
    x, y = cx + r * np.cos(t), cy + r * np.sin(t)
    return float(np.mean((x >= 0) & (x < w) & (y >= 0) & (y < h))), t, x, y


def _score_circle(cx, cy, r, gx, gy, thr, tol):
    """Fraction of the in-frame circumference where a strong, radially pointing gradient lies
    within ``tol`` of the circle."""
    h, w = gx.shape
    frac, t, _, _ = _in_frame_fraction(cx, cy, r, w, h)
    radii = r + np.arange(-np.ceil(tol), np.ceil(tol) + 1)
    ct, st = np.cos(t), np.sin(t)
    xs = np.rint(cx + radii[:, None] * ct[None, :]).astype(int)
    ys = np.rint(cy + radii[:, None] * st[None, :]).astype(int)
    inside = (xs >= 2) & (xs < w - 2) & (ys >= 2) & (ys < h - 2)
    xs, ys = np.clip(xs, 0, w - 1), np.clip(ys, 0, h - 1)
    gxs, gys = gx[ys, xs], gy[ys, xs]
    radial = gxs * ct[None, :] + gys * st[None, :]
    mag = np.hypot(gxs, gys) + 1e-12
    hit = inside & (np.abs(radial) > thr) & (np.abs(radial) > 0.7 * mag)
    seen = inside.any(axis=0)
    if seen.sum() < 20:
        return 0.0, frac
    return float(hit.any(axis=0)[seen].mean()), frac


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
    gx = cv2.Sobel(g, cv2.CV_32F, 1, 0, ksize=3) / 8
    gy = cv2.Sobel(g, cv2.CV_32F, 0, 1, ksize=3) / 8
    mag = np.hypot(gx, gy)
    thr = max(0.15 * float(np.percentile(mag, 99.5)), 0.002)
    point_sets = []
    for level in levels:
        pts = _boundary_points(g > level)
        if len(pts) >= 30:
            point_sets.append((level, pts))
    # edge points of strong gradient (the field stop where the shadow's dark half meets the surround)
    u8 = np.clip((g - lo) / max(hi - lo, 1e-6) * 255, 0, 255).astype(np.uint8)
    edges = cv2.Canny(u8, 20, 50, L2gradient=True)
    ey, ex = np.nonzero(edges[2:-2, 2:-2])
    if len(ex) >= 30:
        point_sets.append((-1.0, np.stack([ex + 2, ey + 2], axis=1).astype(np.float64)))
    candidates = []
    for level, pts in point_sets:
        if len(pts) > 1500:  # thin out evenly, keeps RANSAC fast
            pts = pts[:: len(pts) // 1500 + 1]
        fit = ransac_circle(pts, tol, (0.09 * short, 0.62 * short), trials=400, seed=seed)
        if fit is None:
            continue
        cx, cy, r, _ = fit
        support, frac = _score_circle(cx, cy, r, gx, gy, thr, tol)
        candidates.append((support, frac, cx, cy, r, level))
    if not candidates:
        return FieldResult(None, "no circular field stop found (not an eyepiece view?)")
    # best-outlined circle first; a candidate that fails the checks (e.g. a vignetting
    # crescent's arc) gives way to the next
    candidates.sort(key=lambda c: -c[0])
    first_reason = None
    yy, xx = np.mgrid[0:h, 0:w]
    for support, frac, cx, cy, r, level in candidates:
        reason, circle = _check(g, xx, yy, lo, support, frac, cx, cy, r, level, reduce)
        if circle is not None:
            return FieldResult(circle)
        first_reason = first_reason or reason
    return FieldResult(None, first_reason)


def _check(g, xx, yy, lo, support, frac, cx, cy, r, level, reduce):
    """(reason, None) when the circle is not a field stop, else (None, FieldCircle)."""
    d = np.hypot(xx - cx, yy - cy)
    inside_v = g[d < 0.9 * r]
    outside_v = g[(d > 1.08 * r) & (d < 1.35 * r)]
    if inside_v.size < 50:
        return "no circular field stop found (not an eyepiece view?)", None
    field_level = float(np.percentile(inside_v, 98))
    surround = float(np.percentile(outside_v, 50)) if outside_v.size > 50 else float(lo)
    contrast = (field_level - surround) / max(field_level, 1e-6)
    circle = FieldCircle(cx * reduce + (reduce - 1) / 2, cy * reduce + (reduce - 1) / 2, r * reduce,
                         support, frac, contrast,
                         {"field_level": field_level, "surround_level": surround, "threshold": level})
    if support < 0.3:
        return f"no circular field stop found (best circle only {support:.0%} outlined)", None
    if contrast < 0.5:
        return f"no dark surround around a bright field (contrast {contrast:.2f})", None
    # where the field is bright the surround must be dark right across the stop
    outside_frac = float(np.mean(outside_v > surround + 0.5 * (field_level - surround))) if outside_v.size else 0
    if outside_frac > 0.15:
        return "bright areas outside the candidate field stop (not an eyepiece view?)", None
    return None, circle
