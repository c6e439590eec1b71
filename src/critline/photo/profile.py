"""Stage 4: the brightness profile along the scale axis, beside the graduations.

Method
------
Columns of the field frame away from the graduations, their labels and the
field's rim are taken; the shadow edge is made straight at the graduation
column first (its row is measured in blocks of columns and a straight line
fitted across them, which absorbs a small error of the axis angle and the
perspective tilt), then each row's brightness is the median across the
columns (robust to dust specks and labels), in linear light.  The
per-sample noise is the scaled median absolute deviation across the columns
divided by the square root of their number (times 1.2533, the efficiency of
the median for Gaussian noise).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np

from critline.photo.frame import FieldFrame
from critline.photo.load import srgb_to_linear
from critline.photo.vignetting import crescent_transmission


@dataclass(frozen=True)
class Profile:
    """Brightness along the axis (frame rows).

    Attributes
    ----------
    rows : ndarray
        Frame row of each sample.
    brightness : ndarray
        Linear-light luma, median across the columns used.
    noise : ndarray
        Standard uncertainty of each sample.
    rgb : ndarray (3, n)
        Linear channel profiles (medians).
    columns : int
        Number of columns used.
    tilt : float
        Slope of the edge across the columns (rows per column) that was removed.
    figures : dict
    """

    rows: np.ndarray
    brightness: np.ndarray
    noise: np.ndarray
    rgb: np.ndarray
    columns: int
    tilt: float
    figures: dict = field(default_factory=dict)
    #: median profiles of 8 blocks of columns (rows as ``rows``), to tell a straight shadow edge
    #: from a curved vignetting boundary
    blocks: np.ndarray | None = None
    #: share of each row's columns whose brightness was divided by a vignetting crescent's
    #: transmission below 0.9 (None without a crescent)
    vignetted: np.ndarray | None = None


#: linear light of each 8-bit stored value (as :func:`srgb_to_linear` gives it for ``k / 255``)
_LINEAR_U8 = srgb_to_linear(np.arange(256, dtype=np.float32) * np.float32(1.0 / 255.0))


def _luminance(lin: np.ndarray) -> np.ndarray:
    """Relative luminance of linear sRGB pixels (ITU-R BT.709 weights), float32."""
    return (0.2126 * lin[..., 0] + 0.7152 * lin[..., 1] + 0.0722 * lin[..., 2]).astype(np.float32)


def nan_median_rows(a: np.ndarray) -> np.ndarray:
    """Median of each row ignoring NaN (sort-based; NaN sort last).  All-NaN rows give NaN."""
    a = np.array(a, dtype=a.dtype, order="C")  # the sort's own copy, laid out row by row
    a.sort(axis=1)
    count = np.isfinite(a).sum(axis=1)
    lo = np.clip((count - 1) // 2, 0, a.shape[1] - 1)
    hi = np.clip(count // 2, 0, a.shape[1] - 1)
    rows = np.arange(a.shape[0])
    med = 0.5 * (a[rows, lo] + a[rows, hi])
    return np.where(count > 0, med, np.nan)


def _smooth_gradient(prof: np.ndarray, sigma: float) -> np.ndarray:
    sm = cv2.GaussianBlur(prof.astype(np.float32).reshape(-1, 1), (1, 0), sigmaX=0, sigmaY=sigma).ravel()
    return np.gradient(sm)


def _fill(prof: np.ndarray) -> np.ndarray:
    good = np.isfinite(prof)
    if good.sum() < 2:
        return np.zeros_like(prof)
    idx = np.flatnonzero(good)
    return np.interp(np.arange(len(prof)), idx, prof[idx])


def _theil_sen(y: np.ndarray, x: np.ndarray) -> tuple[float, float]:
    """Theil-Sen line through points: the median of the pairwise slopes (Sen 1968), and the
    intercept ``median(y) - slope * median(x)`` (as ``scipy.stats.theilslopes`` gives them,
    without its confidence interval)."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    dx = x[:, None] - x
    dy = y[:, None] - y
    slope = np.median(dy[dx > 0] / dx[dx > 0])
    return slope, np.median(y) - slope * np.median(x)


def _edge_tilt(lum: np.ndarray, cols: np.ndarray, ok: np.ndarray, period: float,
               interior: np.ndarray | None = None) -> tuple[float, float]:
    """Slope (rows per column) of the main brightness step across the columns.

    The gradient of each block of columns' median profile is aligned with
    the gradient of the median profile of all columns, in a window around the
    strongest step (cross-correlation, parabolic sub-pixel peak); a robust
    straight line (Theil-Sen) through the block shifts against the block
    positions gives the slope.  Zero when no clear step is seen.  Also
    returns the standard uncertainty (rows) of the step's row at the
    reference column from the scatter of the blocks about that line.
    """
    sig = max(1.0, period / 2)
    masked = np.where(ok, lum, np.nan)
    with np.errstate(all="ignore"):
        ref = nan_median_rows(masked)
    valid = np.isfinite(ref)
    if valid.sum() < 40:
        return 0.0, 0.0
    ref = _fill(ref)
    d_ref = _smooth_gradient(ref, sig)
    d_ref[~valid] = 0
    vi = np.flatnonzero(valid)
    margin = int(3 * sig)
    d_ref[: vi.min() + margin] = 0
    d_ref[vi.max() - margin:] = 0
    if interior is not None:  # the field stop's rim (falloff, crescents) is not the shadow edge
        d_ref[~interior] = 0
    i0 = int(np.argmax(np.abs(d_ref)))
    if d_ref[i0] == 0:
        return 0.0, 0.0
    half_w = int(max(10, 4 * period))
    max_shift = int(max(4, 3 * period))
    lo, hi = i0 - half_w, i0 + half_w + 1
    if lo - max_shift < 0 or hi + max_shift > len(ref):
        return 0.0, 0.0
    tmpl = d_ref[lo:hi]
    tmpl = tmpl - tmpl.mean()
    # blocks among the columns that see the whole window: near the field's rim the chord is
    # short, and blocks cut by the stop would leave too few to measure a slope
    seen = np.flatnonzero(ok[lo:hi].mean(axis=0) >= 0.95)
    if seen.size >= 15:
        blocks = np.array_split(seen, min(10, seen.size // 3))
    else:
        blocks = np.array_split(np.arange(len(cols)), 10)
    # a block's profile is needed only in the window and its shifts: its rows there, widened by
    # the smoothing's reach (and the gradient's step) and out to a row with data on each side
    # (gaps are filled from there), give the same values there as the whole column would
    reach = int(np.ceil(4 * sig)) + 2  # OpenCV's float kernel: 2 * round(4 sigma + 1) // 2 + 1
    need_lo, need_hi = max(0, lo - max_shift - reach), min(len(ref), hi + max_shift + reach)
    shifts, where = [], []
    for b in blocks:
        if len(b) < 3:
            continue
        sub = masked.take(b, axis=1)
        seen_rows = np.isfinite(sub).any(axis=1)
        before = np.flatnonzero(seen_rows[:need_lo + 1])
        after = np.flatnonzero(seen_rows[need_hi - 1:])
        r0 = int(before[-1]) if before.size else 0
        r1 = need_hi + int(after[0]) if after.size else len(ref)
        with np.errstate(all="ignore"):
            pb = nan_median_rows(sub[r0:r1])  # rows r0 .. r1 - 1
        if np.isfinite(pb[lo - r0:hi - r0]).mean() < 0.95:
            continue
        db = _smooth_gradient(_fill(pb), sig)
        # tmpl has zero mean, so the segment's own mean does not change the correlation
        cc = np.correlate(db[lo - max_shift - r0:hi + max_shift - r0], tmpl, mode="valid")
        j = int(np.argmax(cc))
        if not (0 < j < len(cc) - 1):
            continue
        seg = db[lo + j - max_shift - r0:hi + j - max_shift - r0]
        corr = cc[j] / (np.linalg.norm(tmpl) * np.linalg.norm(seg - seg.mean()) + 1e-12)
        if corr < 0.7:
            continue
        den = cc[j - 1] - 2 * cc[j] + cc[j + 1]
        off = 0.5 * (cc[j - 1] - cc[j + 1]) / den if den < 0 else 0.0
        shifts.append(j - max_shift + float(np.clip(off, -1, 1)))
        where.append(float(np.mean(cols[b])))
    if len(shifts) < 4:
        return 0.0, 0.0
    sh, wh = np.array(shifts), np.array(where)
    slope, intercept = _theil_sen(sh, wh)
    resid = sh - (intercept + slope * wh)
    scatter = 1.4826 * float(np.median(np.abs(resid))) / np.sqrt(len(sh))
    return float(np.clip(slope, -0.2, 0.2)), scatter


def brightness_profile(frame: FieldFrame, v_lo: int, v_hi: int, exclude: int, period: float,
                       max_columns: int = 240, crescent=None) -> Profile:
    """Median brightness per frame row, beside the graduation band.

    Parameters
    ----------
    frame : FieldFrame
    v_lo, v_hi : int
        Graduation band (frame columns).
    exclude : int
        Columns excluded on each side of the band (long graduations, labels).
    period : float
        Graduation spacing in rows (sets smoothing scales).
    max_columns : int
        Columns are subsampled evenly to at most this many.
    crescent : critline.photo.vignetting.Crescent, optional
        A vignetting crescent: its dimming is divided out (flat-field correction,
        :func:`critline.photo.vignetting.crescent_transmission`) and its darkest part left out.
    """
    n = frame.grey.shape[0]
    half = frame.half
    v = np.arange(n) - half
    rows = np.arange(n) - half
    chord = np.sqrt(np.clip(frame.radius ** 2 - rows.astype(float) ** 2, 0, None))
    band = (np.arange(n) >= v_lo - exclude) & (np.arange(n) <= v_hi + exclude)
    cand = np.flatnonzero(~band & (np.abs(v) < 0.9 * frame.radius))
    if len(cand) < 8:  # band fills the field: use its outskirts anyway
        cand = np.flatnonzero(np.abs(v) < 0.9 * frame.radius)
    if len(cand) > max_columns:
        cand = cand[np.linspace(0, len(cand) - 1, max_columns).astype(int)]
    # ``take`` keeps the columns' rows contiguous (``a[:, cand]`` lays the picked columns out
    # column-major, and every row median below then strides across the whole array)
    if frame.stored is not None:  # a table look-up of the stored integers: the same values
        lin = np.take(_LINEAR_U8, frame.stored.take(cand, axis=1))  # (n, m, 3)
    else:
        lin = srgb_to_linear(frame.rgb.take(cand, axis=1))
    lum = _luminance(lin)
    ok = frame.inside.take(cand, axis=1) & (np.abs(v[cand])[None, :] < 0.9 * chord[:, None])
    if crescent is not None:
        trans = crescent_transmission(lum, np.arange(n, dtype=float), cand.astype(float), crescent,
                                      frame.radius, ok)
        ok &= np.isfinite(trans)
        dimmed = ok & (trans < 0.9)
        lin = lin / np.where(ok, trans, 1.0)[..., None]
        lum = _luminance(lin)
    v_ref = (v_lo + v_hi) / 2 - half
    tilt, edge_scatter = _edge_tilt(lum, v[cand], ok, period, np.abs(rows) < 0.85 * frame.radius)
    if tilt != 0.0:
        shift = tilt * (v[cand] - v_ref)  # rows to add so the edge sits where it does at v_ref
        grid_r = (np.arange(n)[:, None] + shift[None, :]).astype(np.float32)
        grid_c = np.broadcast_to(np.arange(len(cand), dtype=np.float32)[None, :], grid_r.shape).copy()
        lin = cv2.remap(np.ascontiguousarray(lin), grid_c, grid_r, cv2.INTER_LINEAR,
                        borderMode=cv2.BORDER_CONSTANT, borderValue=(np.nan, np.nan, np.nan))
        okf = cv2.remap(ok.astype(np.float32), grid_c, grid_r, cv2.INTER_NEAREST, borderValue=0)
        ok = (okf > 0.5) & np.isfinite(lin[..., 0])
        lum = _luminance(lin)
    count = ok.sum(axis=1)
    use = count >= max(3, int(0.15 * len(cand)))
    masked = np.where(ok, lum, np.nan)
    sel = np.flatnonzero(use)
    med = np.full(n, np.nan, np.float32)
    mad = np.full(n, np.nan, np.float32)
    rgb = np.full((3, n), np.nan, np.float32)
    if len(sel):
        sub = masked[sel]
        med[sel] = nan_median_rows(sub)
        mad[sel] = nan_median_rows(np.abs(sub - med[sel, None]))
        for c in range(3):
            rgb[c, sel] = nan_median_rows(np.where(ok[sel], lin[sel, :, c], np.nan))
    noise = 1.2533 * 1.4826 * mad / np.sqrt(np.maximum(count, 1))
    noise = np.maximum(noise, 1e-4)
    blocks = np.stack([nan_median_rows(sub[:, b]) for b in np.array_split(np.arange(sub.shape[1]), 8)
                       if len(b)]) if len(sel) else None
    vignetted = None
    if crescent is not None:
        vignetted = (dimmed.sum(axis=1) / np.maximum(ok.sum(axis=1), 1))[sel]
    return Profile(sel.astype(float), med[sel], noise[sel], rgb[:, sel], int(len(cand)), tilt,
                   {"profile_columns": int(len(cand)), "edge_tilt": tilt, "edge_row_scatter": edge_scatter},
                   blocks, vignetted)
