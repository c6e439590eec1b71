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


def _edge_tilt(lum: np.ndarray, cols: np.ndarray, ok: np.ndarray, v_ref: float, period: float) -> float:
    """Slope (rows per column) of the strongest brightness step across column blocks."""
    nb = 8
    blocks = np.array_split(np.arange(len(cols)), nb)
    rows_found, v_found, strength = [], [], []
    sig = max(1.0, period / 2)
    for b in blocks:
        if len(b) < 3:
            continue
        sub = np.where(ok[:, b], lum[:, b], np.nan)
        good = np.isfinite(sub).sum(axis=1) >= max(2, len(b) // 2)
        if good.sum() < 20:
            continue
        prof = np.nanmedian(np.where(good[:, None], sub, 0.0), axis=1).astype(np.float32)
        prof[~good] = np.nan
        idx = np.flatnonzero(good)
        prof = np.interp(np.arange(len(prof)), idx, prof[idx]).astype(np.float32)
        sm = cv2.GaussianBlur(prof.reshape(-1, 1), (1, 0), sigmaX=0, sigmaY=sig).ravel()
        d = np.gradient(sm)
        d[~good] = 0
        d[: idx.min() + int(3 * sig)] = 0
        d[idx.max() - int(3 * sig):] = 0
        i = int(np.argmax(np.abs(d)))
        if 0 < i < len(d) - 1 and d[i] != 0:
            a, c = d[i - 1], d[i + 1]
            den = a - 2 * d[i] + c
            off = 0.5 * (a - c) / den if den != 0 else 0.0
            rows_found.append(i + float(np.clip(off, -1, 1)))
            v_found.append(float(np.mean(cols[b])))
            strength.append(abs(d[i]))
    if len(rows_found) < 4:
        return 0.0
    r, v, s = np.array(rows_found), np.array(v_found), np.array(strength)
    if np.median(s) <= 0:
        return 0.0
    # the same step in every block: rows agree within a few spacings
    med = np.median(r)
    keep = np.abs(r - med) < 3 * period
    if keep.sum() < 4:
        return 0.0
    slope, _ = np.polyfit(v[keep], r[keep], 1)
    return float(np.clip(slope, -0.2, 0.2))


def brightness_profile(frame: FieldFrame, v_lo: int, v_hi: int, exclude: int, period: float,
                       max_columns: int = 240) -> Profile:
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
    lin = srgb_to_linear(frame.rgb[:, cand])  # (n, m, 3)
    lum = (0.2126 * lin[..., 0] + 0.7152 * lin[..., 1] + 0.0722 * lin[..., 2]).astype(np.float32)
    ok = frame.inside[:, cand] & (np.abs(v[cand])[None, :] < 0.9 * chord[:, None])
    v_ref = (v_lo + v_hi) / 2 - half
    tilt = _edge_tilt(lum, v[cand], ok, v_ref, period)
    if tilt != 0.0:
        shift = tilt * (v[cand] - v_ref)  # rows to add so the edge sits where it does at v_ref
        grid_r = (np.arange(n)[:, None] + shift[None, :]).astype(np.float32)
        grid_c = np.broadcast_to(np.arange(len(cand), dtype=np.float32)[None, :], grid_r.shape).copy()
        lin = cv2.remap(np.ascontiguousarray(lin), grid_c, grid_r, cv2.INTER_LINEAR,
                        borderMode=cv2.BORDER_CONSTANT, borderValue=(np.nan, np.nan, np.nan))
        okf = cv2.remap(ok.astype(np.float32), grid_c, grid_r, cv2.INTER_NEAREST, borderValue=0)
        ok = (okf > 0.5) & np.isfinite(lin[..., 0])
        lum = (0.2126 * lin[..., 0] + 0.7152 * lin[..., 1] + 0.0722 * lin[..., 2]).astype(np.float32)
    count = ok.sum(axis=1)
    use = count >= max(3, int(0.15 * len(cand)))
    masked = np.where(ok, lum, np.nan)
    sel = np.flatnonzero(use)
    med = np.full(n, np.nan, np.float32)
    mad = np.full(n, np.nan, np.float32)
    rgb = np.full((3, n), np.nan, np.float32)
    if len(sel):
        sub = masked[sel]
        med[sel] = np.nanmedian(sub, axis=1)
        mad[sel] = np.nanmedian(np.abs(sub - med[sel, None]), axis=1)
        for c in range(3):
            rgb[c, sel] = np.nanmedian(np.where(ok[sel], lin[sel, :, c], np.nan), axis=1)
    noise = 1.2533 * 1.4826 * mad / np.sqrt(np.maximum(count, 1))
    noise = np.maximum(noise, 1e-4)
    return Profile(sel.astype(float), med[sel], noise[sel], rgb[:, sel], int(len(cand)), tilt,
                   {"profile_columns": int(len(cand)), "edge_tilt": tilt})
