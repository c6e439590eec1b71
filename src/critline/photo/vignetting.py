"""A vignetting crescent inside the field: where the phone's pupil cuts the eyepiece's light.

When the phone's lens is off the eyepiece's axis, its pupil clips the eyepiece's exit pupil and
part of the field goes dark: the lit part of the field is the inside of a second, displaced
circle (the pupil's image, out of focus, so its boundary is a soft ramp), and the dark crescent
lies between that circle and the field stop.  Its boundary is curved; a shadow edge is straight.
Left in the brightness profile, the crescent's boundary reads as a blurred stone edge (often at
the scale's ends), dims the real edge in part of the columns, and can turn the scale's direction
(the dark side is taken as the low-index side).

Method
------
Boundary points are the strongest smoothed-luminance gradients inside the field (away from the
stop's rim).  Each votes for
the centre of a circle whose inside is brighter than its outside, at each trial radius, along
its gradient (circle Hough transform with gradient direction, Ballard 1981); the best vote is
refined on the points near that circle whose gradient points to its centre (geometric least
squares, scikit-image's CircleModel).  A circle much like the field stop itself, too small (dust)
or too large (a straight edge), is not a crescent.  The circle is kept when its points span
enough arc and the field beyond it is clearly darker than inside it, row by row.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np
from skimage.measure import CircleModel

from critline.photo.frame import FieldFrame

#: Radius range of the lit circle, in field-stop radii (smaller is a dust speck, larger fits a
#: straight shadow edge).
LIT_RADIUS_RANGE = (0.5, 2.0)
#: Smallest arc of the lit circle's boundary that must be seen, in field radii.
MIN_ARC = 0.6
#: The crescent must be at most this bright relative to the lit side next to its boundary.
MAX_DARK_RATIO = 0.75
#: Cosine between a boundary point's gradient and the direction to the circle's centre.
MIN_ALIGNMENT = 0.8
#: Largest share of the field a crescent may cover: beyond it the "lit circle" is the bright part
#: of a high-index or over-the-limit view (its shadow edge and the stop's rim), not the phone's
#: pupil (on tuning seeds such a circle covered 91 % of the field and turned the scale around).
MAX_SHARE = 0.5


@dataclass(frozen=True)
class Crescent:
    """The lit circle (frame pixels) and what the crescent hides.

    cx, cy, r : the lit circle; the crescent is the field outside it.
    arc : boundary arc seen (field radii).
    dark_ratio : brightness just beyond the boundary over just inside it.
    share : fraction of the field's area in the crescent.
    """

    cx: float
    cy: float
    r: float
    arc: float
    dark_ratio: float
    share: float


#: Trial radii whose votes are counted together (see :func:`_vote`).
_RADII_AT_ONCE = 8


def _vote(pts, gdir, weight, half: float, rad: float):
    """Centre and radius of the circle whose inside is brighter, by gradient-direction voting.

    Each boundary point votes, for every trial radius R, for the centre R along its gradient (the
    circle Hough transform with the gradient's direction, Ballard 1981).  The points of one arc
    vote into one place; a straight edge spreads its votes along a line.  A circle like the field
    stop itself is not counted.
    """
    lo_r, hi_r = LIT_RADIUS_RANGE
    bin_px = max(1.0, 0.03 * rad)
    origin = half - 3.0 * rad
    nbin = int(np.ceil(6.0 * rad / bin_px)) + 1
    radii = np.arange(lo_r, hi_r + 1e-9, 0.05) * rad
    # (row bin, column bin, radius) counts, the radii as an image's channels (each bin sums its
    # votes in the same order whatever the layout)
    centres = pts[None, :, :] + radii[:, None, None] * gdir[None, :, :]
    ij = np.floor((centres - origin) / bin_px).astype(np.int64)
    # one unsigned comparison per coordinate keeps the votes inside the grid (negatives wrap high)
    keep = (ij[..., 0].astype(np.uint64) < nbin) & (ij[..., 1].astype(np.uint64) < nbin)
    nr = len(radii)
    acc = np.empty((nbin, nbin, nr), np.float32)
    # counted a few radii at a time: the double-precision counts of all radii would be the
    # reader's largest array (10 MB)
    for k0 in range(0, nr, _RADII_AT_ONCE):
        k1 = min(nr, k0 + _RADII_AT_ONCE)
        sel = keep[k0:k1]
        k = np.broadcast_to(np.arange(k1 - k0)[:, None], sel.shape)[sel]
        flat = (ij[k0:k1, :, 1][sel] * nbin + ij[k0:k1, :, 0][sel]) * (k1 - k0) + k
        w = np.broadcast_to(weight[None, :], sel.shape)[sel]
        acc[..., k0:k1] = np.bincount(flat, weights=w, minlength=(k1 - k0) * nbin * nbin).reshape(nbin, nbin, -1)
    # every trial radius smoothed in one call
    cv2.GaussianBlur(acc, (0, 0), 1.0, dst=acc)
    ic = int((half - origin) / bin_px)
    ks = int(round(0.1 * rad / bin_px))
    # the stop's own circle (its ramp inside 0.88 radii is faint, but not nothing)
    like_stop = np.abs(radii - rad) < 0.1 * rad
    acc[max(0, ic - ks):ic + ks + 1, max(0, ic - ks):ic + ks + 1, like_stop] = 0
    peak = cv2.reduce(acc.reshape(-1, len(radii)), 0, cv2.REDUCE_MAX).ravel()  # each radius's highest vote
    n = int(np.argmax(peak))  # the first radius reaching the highest vote, as a scan would keep
    if not peak[n] > 0:
        return None, None
    i, j = np.unravel_index(int(np.argmax(acc[..., n])), (nbin, nbin))
    return np.array([origin + (j + 0.5) * bin_px, origin + (i + 0.5) * bin_px]), float(radii[n])


def find_crescent(frame: FieldFrame, seed: int = 0) -> Crescent | None:
    """The vignetting crescent of a field frame, or None when the field shows none.

    Parameters
    ----------
    frame : FieldFrame
        The field resampled around its stop (:func:`critline.photo.frame.make_frame`).
    seed : int
        Seed of the subsampling of boundary points (the result is deterministic for a frame).
    """
    # the boundary is a broad ramp: about 100 pixels across the radius are plenty (an integer
    # shrink keeps OpenCV's fast area averaging)
    shrink = max(1, int(frame.radius // 100))
    grey = np.asarray(frame.grey, np.float32)
    inside = frame.inside
    if shrink > 1:
        size = (grey.shape[1] // shrink, grey.shape[0] // shrink)
        grey = cv2.resize(grey[:size[1] * shrink, :size[0] * shrink], size, interpolation=cv2.INTER_AREA)
        inside = cv2.resize(inside[:size[1] * shrink, :size[0] * shrink].view(np.uint8) * np.uint8(255), size,
                            interpolation=cv2.INTER_AREA) > 250
    rad = float(frame.radius) / shrink
    half = (float(frame.half) + 0.5) / shrink - 0.5
    if rad < 20:
        return None
    # a boundary ramp is broad: smooth over a few hundredths of the radius, then gradients
    sm = cv2.GaussianBlur(grey, (0, 0), max(1.5, 0.02 * rad))
    gx = cv2.Sobel(sm, cv2.CV_32F, 1, 0, ksize=3) / 8
    gy = cv2.Sobel(sm, cv2.CV_32F, 0, 1, ksize=3) / 8
    mag = np.hypot(gx, gy)
    n0, n1 = grey.shape
    yy, xx = np.mgrid[:n0, :n1].astype(np.float32)
    dist = np.hypot(xx - half, yy - half)
    interior = (dist < 0.88 * rad) & inside
    if interior.sum() < 100:
        return None
    top = float(np.percentile(sm[interior], 95))
    if top <= 0:
        return None
    # the strongest gradients, at least 0.3 % of the field's brightness per pixel
    thr = max(float(np.percentile(mag[interior], 90)), 0.003 * top)
    cand = np.flatnonzero((interior & (mag >= thr)).ravel())
    if cand.size < 30:
        return None
    rng = np.random.default_rng(seed)
    if cand.size > 3000:
        cand = rng.choice(cand, 3000, replace=False)
    pts = np.stack([xx.ravel()[cand], yy.ravel()[cand]], axis=1)
    gdir = np.stack([gx.ravel()[cand], gy.ravel()[cand]], axis=1)
    weight = mag.ravel()[cand]
    gdir /= np.maximum(np.linalg.norm(gdir, axis=1, keepdims=True), 1e-12)
    c, r = _vote(pts, gdir, weight, half, rad)
    if c is None:
        return None
    tol = max(1.5, 0.02 * rad)
    # the points near the voted circle whose gradient points to its centre
    to_c = c[None, :] - pts
    d = np.linalg.norm(to_c, axis=1)
    align = np.einsum("ij,ij->i", gdir, to_c) / np.maximum(d, 1e-9)
    sel = (np.abs(d - r) < tol) & (align >= MIN_ALIGNMENT)
    if sel.sum() < 20:
        return None
    x, y = pts[sel, 0], pts[sel, 1]
    cx, cy = float(c[0]), float(c[1])
    # refined by geometric least squares (scikit-image's CircleModel) when that stays near the
    # vote (its bins are 0.03 radii; a short arc can pull a free fit far off)
    model = CircleModel.from_estimate(np.stack([x, y], axis=1))
    if model:
        (fx, fy), fr = (float(v) for v in model.center), float(model.radius)
        if math.hypot(fx - cx, fy - cy) < 0.1 * rad and abs(fr - r) < 0.1 * rad:
            cx, cy, r = fx, fy, fr
    # the arc the support spans (angular extent about the lit circle's centre)
    ang = np.sort(np.arctan2(y - cy, x - cx))
    gaps = np.diff(np.concatenate([ang, ang[:1] + 2 * np.pi]))
    span = 2 * np.pi - float(gaps.max())
    arc = span * r / rad
    if arc < MIN_ARC:
        return None
    # beyond the boundary (outside the lit circle) the field must be clearly darker
    dc = np.hypot(xx - cx, yy - cy)
    ramp = max(0.1 * rad, 3 * tol)
    inner_band = inside & (dist < 0.95 * rad) & (dc < r - ramp) & (dc > r - 2 * ramp)
    outer_band = inside & (dist < 0.95 * rad) & (dc > r + ramp) & (dc < r + 2 * ramp)
    if inner_band.sum() < 50 or outer_band.sum() < 50:
        return None
    # compared along the same rows only: the shadow edge makes rows differ by themselves
    rows_both = np.flatnonzero(inner_band.any(axis=1) & outer_band.any(axis=1))
    if rows_both.size < 5:
        return None
    inner = (sm * inner_band).sum(axis=1)[rows_both] / inner_band.sum(axis=1)[rows_both]
    outer = (sm * outer_band).sum(axis=1)[rows_both] / outer_band.sum(axis=1)[rows_both]
    ratio = float(np.median(outer / np.maximum(inner, 1e-6)))
    if not ratio <= MAX_DARK_RATIO:
        return None
    in_field = inside & (dist < rad)
    share = float(np.mean(dc[in_field] > r))
    if share > MAX_SHARE:
        return None
    # back to frame pixels (pixel centres: x_frame = (x + 0.5) * shrink - 0.5)
    return Crescent(float((cx + 0.5) * shrink - 0.5), float((cy + 0.5) * shrink - 0.5), r * shrink,
                    float(arc), ratio, share)


#: Inside the lit circle by more than this share of the field radius, the crescent's ramp no
#: longer dims the field (the circle is fitted to the ramp's middle).
LIT_MARGIN = 0.1
#: Bins of depth into the crescent (field radii) for its transmission curve.
DEPTH_BIN = 0.02
#: Where the crescent passes less than this share of the light, its pixels are left out rather
#: than divided up (their noise would be multiplied).
MIN_TRANSMISSION = 0.3


def crescent_transmission(lum: np.ndarray, rows: np.ndarray, cols: np.ndarray, crescent: Crescent,
                          radius: float, ok: np.ndarray) -> np.ndarray:
    """The crescent's transmission at each pixel of a profile's columns (flat-field correction).

    The crescent dims the field by a factor that depends only on the depth into it (the distance
    beyond the lit circle's ramp), while the shadow changes the brightness row by row.  So in
    each row the crescent's pixels are compared with the row's lit pixels, and the median ratio
    at each depth gives the transmission curve (made non-increasing with depth).  Dividing the
    pixels by it takes the crescent out and leaves the shadow edge, which runs on through it.

    Parameters
    ----------
    lum : ndarray (rows, columns)
        Linear luminance of the profile's pixels.
    rows, cols : ndarray
        Frame row of each row and frame column of each column of ``lum``.
    crescent : Crescent
    radius : float
        Field radius (frame pixels).
    ok : ndarray of bool
        Pixels in the field.

    Returns
    -------
    ndarray
        Transmission (1 in the lit part), NaN where it is below :data:`MIN_TRANSMISSION` or not
        known (no row with both lit and crescent pixels bright enough at that depth).
    """
    depth = (np.hypot(cols[None, :] - crescent.cx, rows[:, None] - crescent.cy) - crescent.r) / radius
    depth = depth + LIT_MARGIN  # 0 where the ramp starts to dim; positive into the crescent
    lit = ok & (depth <= 0)
    dim = ok & (depth > 0)
    trans = np.ones_like(lum, dtype=np.float32)
    if not dim.any():
        return trans
    with np.errstate(all="ignore"):
        lit_vals = np.where(lit, lum, np.nan)
        count = lit.sum(axis=1)
        ref = np.full(lum.shape[0], np.nan)
        has = count >= 3
        if has.any():
            from critline.photo.profile import nan_median_rows  # numpy's nanmedian by one sort

            ref[has] = nan_median_rows(lit_vals[has])
    top = float(np.nanpercentile(ref, 95)) if np.isfinite(ref).any() else np.nan
    # rows bright enough to measure a ratio: the shadow's dark part would give noise
    bright = np.isfinite(ref) & (ref > 0.3 * top) if np.isfinite(top) else np.zeros_like(has)
    use = dim & bright[:, None]
    nbins = int(np.ceil(depth[dim].max() / DEPTH_BIN)) + 1
    curve = np.full(nbins, np.nan)
    if use.any():
        k = np.minimum((depth[use] / DEPTH_BIN).astype(int), nbins - 1)
        ratio = (lum / np.where(np.isfinite(ref), ref, np.inf)[:, None])[use]
        for b in np.unique(k):
            sel = ratio[k == b]
            if sel.size >= 10:
                curve[b] = np.median(sel)
    # known depths: non-increasing with depth, at most 1, linear between bin centres (a step-wise
    # curve would put steps into the profile); unknown beyond the last known depth
    known = np.flatnonzero(np.isfinite(curve))
    if known.size == 0 or known[0] > 2:
        trans[dim] = np.nan
        return trans
    centres = np.concatenate([[0.0], (known + 0.5) * DEPTH_BIN])
    values = np.minimum.accumulate(np.clip(np.concatenate([[1.0], curve[known]]), 0, 1))
    t = np.interp(depth[dim], centres, values, right=np.nan)
    t = np.where(np.isfinite(t) & (t >= MIN_TRANSMISSION), t, np.nan)
    trans[dim] = t
    return trans
