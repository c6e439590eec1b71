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

from critline.photo.load import srgb_to_linear
from critline.photo.percentile import percentile


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
    # the labels alone and their areas counted: several times faster than OpenCV's statistics
    n, labels = cv2.connectedComponents(mask, connectivity=8)
    if n < 2:
        return np.empty((0, 2))
    if n == 2:
        region = mask  # one region: the mask itself
    else:
        big = 1 + int(np.argmax(np.bincount(labels.ravel(), minlength=n)[1:]))
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


#: RANSAC trials scored together (a block's (trials, points) arrays of about 64 x 1500 doubles
#: stay in cache: 1.7 times faster than all 400 at once)
_TRIAL_BLOCK = 64


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
    # |distance - r| < tol as a band of squared distances |p|^2 - 2 p.c + |c|^2, the bounds carrying
    # |c|^2 over: twice as fast as the distances themselves, and the same counts but for points
    # within rounding of a band's edge (outer products, not a matrix product: a threaded BLAS
    # call costs more than it saves at this size)
    # (the trials are taken in blocks whose arrays stay in the processor's cache)
    px, py = points[:, 0], points[:, 1]
    p2 = px * px + py * py
    m2x, m2y = -2.0 * cx, -2.0 * cy
    cc = cx * cx + cy * cy
    lo2 = np.where(r > tol, (r - tol) ** 2, -np.inf) - cc
    hi2 = (r + tol) ** 2 - cc
    counts = np.empty(len(cx), np.int64)
    for s in range(0, len(cx), _TRIAL_BLOCK):
        e = s + _TRIAL_BLOCK
        cross = np.multiply.outer(m2x[s:e], px)
        cross += np.multiply.outer(m2y[s:e], py)
        cross += p2[None, :]
        counts[s:e] = np.count_nonzero((cross > lo2[s:e, None]) & (cross < hi2[s:e, None]), axis=1)
    j = int(np.argmax(counts))
    best = (cx[j], cy[j], r[j])
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
    lo, hi = percentile(g, 2, wide=True), percentile(g, 99.5, wide=True)
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
    thr = max(0.15 * float(percentile(mag, 99.5)), 0.002)
    candidates = []
    seen: dict[bytes, tuple] = {}
    checked: dict[int, tuple] = {}
    grid = []

    def check(i):
        """_check of candidate i, once."""
        if i not in checked:
            if not grid:
                grid.extend(np.ogrid[0:h, 0:w][::-1])  # xx (a row), yy (a column)
            support, frac, cx, cy, r, level = candidates[i]
            checked[i] = _check(g, grid[0], grid[1], lo, support, frac, cx, cy, r, level, reduce)
        return checked[i]

    for level, pts in _point_sets(g, levels, lo, hi):
        if len(pts) > 1500:  # thin out evenly, keeps RANSAC fast
            pts = pts[:: len(pts) // 1500 + 1]
        key = pts.tobytes()
        if key in seen:  # neighbouring levels often outline the same region: the same fit again
            support, frac, cx, cy, r = seen[key]
        else:
            fit = ransac_circle(pts, tol, (0.09 * short, 0.62 * short), trials=400, seed=seed)
            if fit is None:
                continue
            cx, cy, r, _ = fit
            support, frac = _score_circle(cx, cy, r, gx, gy, thr, tol)
            seen[key] = (support, frac, cx, cy, r)
        candidates.append((support, frac, cx, cy, r, level))
        if support >= 1.0:
            # fully outlined: no later candidate can rank before it (the sort below is stable), so
            # the first such circle that passes the checks is the answer; the other point sets
            # need not be traced
            _, circle = check(len(candidates) - 1)
            if circle is not None:
                return FieldResult(circle)
    if not candidates:
        return FieldResult(None, "no circular field stop found (not an eyepiece view?)")
    # best-outlined circle first; a candidate that fails the checks (e.g. a vignetting
    # crescent's arc) gives way to the next
    order = sorted(range(len(candidates)), key=lambda i: -candidates[i][0])
    first_reason = None
    for i in order:
        reason, circle = check(i)
        if circle is not None:
            return FieldResult(circle)
        first_reason = first_reason or reason
    return FieldResult(None, first_reason)


def _point_sets(g, levels, lo, hi):
    """Boundary point sets of the field, in order: the largest region above each level, then
    the edge points of strong gradient (the field stop where the shadow's dark half meets the
    surround); each is traced only when asked for."""
    for level in levels:
        pts = _boundary_points(g > level)
        if len(pts) >= 30:
            yield level, pts
    u8 = np.clip((g - lo) / max(hi - lo, 1e-6) * 255, 0, 255).astype(np.uint8)
    edges = cv2.Canny(u8, 20, 50, L2gradient=True)
    ey, ex = np.nonzero(edges[2:-2, 2:-2])
    if len(ex) >= 30:
        yield -1.0, np.stack([ex + 2, ey + 2], axis=1).astype(np.float64)


def _check(g, xx, yy, lo, support, frac, cx, cy, r, level, reduce):
    """(reason, None) when the circle is not a field stop, else (None, FieldCircle)."""
    d2 = (xx - cx) ** 2 + (yy - cy) ** 2  # squared distances: no square root per pixel
    inside_v = g[d2 < (0.9 * r) ** 2]
    outside_v = g[(d2 > (1.08 * r) ** 2) & (d2 < (1.35 * r) ** 2)]
    if inside_v.size < 50:
        return "no circular field stop found (not an eyepiece view?)", None
    field_level = float(percentile(inside_v, 98))
    surround = float(percentile(outside_v, 50)) if outside_v.size > 50 else float(lo)
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


#: widest field-stop edge accepted by :func:`refine_stop` (RMS width of the brightness drop, in
#: stop radii).  A soft stop (transition 0.06 radii wide) blurred by defocus measures about 0.016;
#: a vignetting crescent's ramp (0.15 radii wide) 0.03 to 0.04 (sized on the synthesizer's
#: envelope, tuning seeds).
MAX_STOP_WIDTH = 0.026


@dataclass(frozen=True)
class StopOutline:
    """The field stop refined at working resolution (working-image pixels).

    Attributes
    ----------
    cx, cy, r : float
        Centre and radius of the circle through the stop's edge (its half-brightness line).
    rays : int
        Number of radial profiles whose edge took part in the final fit.
    n_rays : int
        Number of radial profiles drawn (evenly around the circle).
    rms : float
        RMS distance of those edge points from the circle (pixels).
    cov : tuple of tuples (3 x 3)
        Covariance of ``(cx, cy, r)`` (pixels squared) from the fit's own scatter: large when
        the stop shows only short arcs (a crescent or the shadow's dark half hiding the rest).
    """

    cx: float
    cy: float
    r: float
    rays: int
    rms: float
    cov: tuple[tuple[float, ...], ...] = ((0.0, 0.0, 0.0), (0.0, 0.0, 0.0), (0.0, 0.0, 0.0))
    n_rays: int = 360


def _circle_lsq(x, y, w):
    """Weighted algebraic circle fit (Kasa 1976): minimises sum w (x^2 + y^2 + D x + E y + F)^2."""
    a = np.stack([x, y, np.ones_like(x)], axis=1) * w[:, None]
    b = -(x * x + y * y) * w
    (d, e, f), *_ = np.linalg.lstsq(a, b, rcond=None)
    cx, cy = -d / 2, -e / 2
    return float(cx), float(cy), float(np.sqrt(max(cx * cx + cy * cy - f, 1e-9)))


def _circle_cov(x, y, w, fit) -> np.ndarray:
    """Covariance of ``(cx, cy, r)`` of :func:`_circle_lsq`: the linear least-squares covariance
    ``s**2 (A^T A)^-1`` of ``(D, E, F)`` with ``s**2`` the residual variance, carried to the
    centre and radius through the Jacobian of ``cx = -D/2, cy = -E/2, r = sqrt(cx^2 + cy^2 - F)``."""
    cx, cy, r = fit
    a = np.stack([x, y, np.ones_like(x)], axis=1) * w[:, None]
    b = -(x * x + y * y) * w
    p = np.array([-2 * cx, -2 * cy, cx * cx + cy * cy - r * r])
    dof = max(len(x) - 3, 1)
    s2 = float(np.sum((a @ p - b) ** 2)) / dof
    try:
        cov_p = s2 * np.linalg.inv(a.T @ a)
    except np.linalg.LinAlgError:
        return np.full((3, 3), np.inf)
    jac = np.array([[-0.5, 0.0, 0.0], [0.0, -0.5, 0.0], [-cx / (2 * r), -cy / (2 * r), -1 / (2 * r)]])
    return jac @ cov_p @ jac.T


def refine_stop(rgb: np.ndarray, cx: float, cy: float, r: float, n_rays: int = 360) -> StopOutline | None:
    """Sub-pixel outline of the field stop near a first circle, by radial profiles.

    Method
    ------
    Along ``n_rays`` rays from the first centre the working image is sampled
    (bilinear, ``cv2.remap``) from 0.8 to 1.2 radii and turned into linear
    light (the sRGB curve undone), where the stop's transmission edge is
    symmetric about the stop (a soft stop, defocus and motion blur spread it
    evenly both ways).  On each ray the edge is the centroid of the outward
    brightness drop (the negative radial derivative) within a window around
    its steepest point: for a symmetric transition that is its centre, the
    half-brightness point, unbiased by the stop's softness, the blur or the
    shadow's brightness on that side (unlike a threshold, which moves the
    boundary out on a dim side and in on a bright one).  Rays leaving the
    frame are dropped; the circle is fitted to the edge points by weighted
    least squares (Kasa 1976; weight = the drop's size, so the dark half of
    the field counts by its contrast), rejecting points beyond 3 robust
    standard deviations (MAD) and refitting, so a vignetting crescent's
    boundary or the shadow edge meeting the stop does not pull it.

    Parameters
    ----------
    rgb : ndarray (H, W, 3) or (H, W)
        Working image, stored values (float32 0..1, uint8 or uint16).
    cx, cy, r : float
        First circle (working pixels), e.g. from :func:`find_field`.

    Returns
    -------
    StopOutline or None
        None when too few rays show the stop (the first circle then stands).

    References
    ----------
    Kasa, I. (1976) A circle fitting procedure and its error analysis. IEEE Trans. Instrum. Meas. 25, 8-10.
    """
    h, w = rgb.shape[:2]
    scale = {np.dtype(np.uint8): 255.0, np.dtype(np.uint16): 65535.0}.get(rgb.dtype, 1.0)
    step = 0.25
    rad = r * np.arange(0.8, 1.2, step / max(r, 1.0), dtype=np.float64)
    t = np.linspace(0, 2 * np.pi, n_rays, endpoint=False)
    ct, st = np.cos(t), np.sin(t)
    mx = (cx + rad[None, :] * ct[:, None]).astype(np.float32)
    my = (cy + rad[None, :] * st[:, None]).astype(np.float32)
    inside = (mx >= 0) & (mx <= w - 1) & (my >= 0) & (my <= h - 1)
    full = inside.all(axis=1)
    if full.sum() < 30:
        return None
    samp = cv2.remap(rgb, mx, my, interpolation=cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    samp = samp.astype(np.float32)
    samp /= np.float32(scale)  # in place: one pass
    if samp.ndim == 3:
        samp = cv2.cvtColor(samp, cv2.COLOR_RGB2GRAY)  # Rec. 601 luma (0.299, 0.587, 0.114)
    lin = srgb_to_linear(samp)
    # smooth along the ray (about one working pixel) and a little across rays (noise)
    lin = cv2.GaussianBlur(lin, (0, 0), sigmaX=1.0 / step, sigmaY=0.7)
    drop = -np.gradient(lin, axis=1)
    # window around the steepest drop: wide enough for a soft, blurred stop
    half_win = int(max(0.07 * r, 4.0) / step)
    k = np.argmax(np.where(full[:, None], drop, -np.inf), axis=1)
    idx = k[:, None] + np.arange(-half_win, half_win + 1)[None, :]
    valid = full & (k - half_win >= 0) & (k + half_win < len(rad))
    idx = np.clip(idx, 0, len(rad) - 1)
    d = np.take_along_axis(drop, idx, axis=1)
    lv = np.take_along_axis(lin, idx, axis=1)
    size = lv[:, 0] - lv[:, -1]  # brightness drop across the window
    dpos = np.clip(d, 0, None)
    with np.errstate(invalid="ignore", divide="ignore"):
        cen = (dpos * np.take(rad, idx)).sum(axis=1) / dpos.sum(axis=1)
    # a real stop edge: a clear drop, to a dark outside (the surround), and sharp: the edge of a
    # vignetting crescent (the phone's pupil clipping the eyepiece's exit pupil) is a broad
    # ramp, several times wider than a soft, defocused stop, and is left out
    outside = lin[np.arange(len(k)), np.clip(k + half_win, 0, len(rad) - 1)]
    with np.errstate(invalid="ignore", divide="ignore"):
        width = np.sqrt((dpos * (np.take(rad, idx) - cen[:, None]) ** 2).sum(axis=1) / dpos.sum(axis=1))
    ok = (valid & np.isfinite(cen) & (size > 0.02) & (outside < 0.5 * lv[:, 0])
          & (width < MAX_STOP_WIDTH * r))
    if ok.sum() < 30:
        return None
    x, y = cx + cen[ok] * ct[ok], cy + cen[ok] * st[ok]
    wt = np.sqrt(size[ok])
    keep = np.ones(len(x), bool)
    fit = (cx, cy, r)
    for _ in range(4):
        if keep.sum() < 20:
            return None
        fit = _circle_lsq(x[keep], y[keep], wt[keep])
        res = np.hypot(x - fit[0], y - fit[1]) - fit[2]
        mad = float(np.median(np.abs(res[keep] - np.median(res[keep])))) * 1.4826
        new = np.abs(res) < max(3 * mad, 0.5)
        if (new == keep).all():
            break
        keep = new
    res = np.hypot(x[keep] - fit[0], y[keep] - fit[1]) - fit[2]
    if abs(fit[2] / r - 1) > 0.1 or np.hypot(fit[0] - cx, fit[1] - cy) > 0.1 * r:
        return None
    cov = _circle_cov(x[keep], y[keep], wt[keep], fit)
    return StopOutline(fit[0], fit[1], fit[2], int(keep.sum()), float(np.sqrt(np.mean(res**2))),
                       tuple(tuple(float(v) for v in row) for row in cov), int(n_rays))
