"""Stage 3: the graduations -- where they are, which value each one carries, and the map
from position along the axis to scale value.

Method
------
1. In the field frame (axis down the rows, :mod:`critline.photo.frame`) the
   image is normalised by its local mean, so that dark lines have the same
   relative depth in the bright and the dark part of the field.
2. The graduation period is the peak of the mean power spectrum of the
   columns (FFT along the axis); the graduation column is where the power in
   that band, relative to the column's own high-frequency power, is highest
   (the most periodic columns).
3. Each graduation is a local minimum of the mean profile across that
   column band; its position is the centroid of its darkness (sub-pixel),
   its length the run of dark pixels across the axis.
4. Consecutive indices are assigned from the spacing; a low-order polynomial
   index -> position is fitted by least squares, robustly (predict, match the
   nearest detection, reject outliers, refit).
5. The direction (which way the values increase) comes from the physics:
   the dark side of the shadow is the low-index side (the shadow edge is
   told from a vignetting boundary by its straightness across the field).
   The absolute index is chosen among all offsets by a template match
   (:func:`_identify`): lines seen where the scale has graduations count
   for an offset, lines beyond the scale's ends and missing lines where one
   would clearly be seen count against it; the long/medium pattern (every
   10th/5th graduation longer) is added, and a weak prior that the scale is
   centred in the field stop breaks ties.  Too small a margin between the
   best offsets rejects the photo; a small one flags it.
6. The map position -> value is the inverse of the fitted polynomial; its
   standard uncertainty comes from the fit's covariance.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import cv2
import numpy as np
from scipy.ndimage import median_filter
from scipy.signal import find_peaks

from critline.instrument import Instrument
from critline.photo.frame import FieldFrame


class GraduationsNotFound(Exception):
    """No usable graduation column; the message is the reason."""


@dataclass(frozen=True)
class GraduationColumn:
    """Where the graduations are in the field frame."""

    period: float          # mean spacing, frame pixels
    v_lo: int              # first column of the band all graduations cover
    v_hi: int              # last column (inclusive)
    periodicity: float     # band power ratio of the best column vs the median column


@dataclass(frozen=True)
class Graduations:
    """Graduations found and the position -> value map.

    Attributes
    ----------
    positions : ndarray
        Sub-pixel row positions of the detected graduations (frame rows).
    indices : ndarray of int
        Index of each from the first graduation of the scale (0 = ``first``).
    lengths : ndarray
        Length of each across the axis, frame pixels.
    coef : ndarray
        Polynomial (numpy.polynomial.polynomial order) giving the row of index k.
    cov : ndarray
        Covariance of ``coef``.
    residual_rms : float
        Rms residual of the detected positions about the fit, pixels.
    expected : int
        Number of scale graduations whose predicted position lies in the usable field.
    column : GraduationColumn
    figures : dict
    flags : tuple of str
    """

    positions: np.ndarray
    indices: np.ndarray
    lengths: np.ndarray
    coef: np.ndarray
    cov: np.ndarray
    residual_rms: float
    expected: int
    column: GraduationColumn
    figures: dict = field(default_factory=dict)
    flags: tuple[str, ...] = ()

    def row_of(self, index):
        """Frame row of a (fractional) graduation index."""
        return np.polynomial.polynomial.polyval(np.asarray(index, float), self.coef)

    def index_of(self, row):
        """Fractional graduation index at frame row(s), by inverting the monotone polynomial."""
        row = np.asarray(row, float)
        k0, k1 = float(self.indices.min()) - 200, float(self.indices.max()) + 200
        grid = np.linspace(k0, k1, 8001)
        rows = self.row_of(grid)
        # only the branch through the found graduations: far outside them a polynomial may turn
        # back and cover the same rows again, and mixing branches would scramble the order
        slope = np.diff(rows)
        centre = int(np.clip(np.searchsorted(grid, 0.5 * (self.indices.min() + self.indices.max())),
                             0, slope.size - 1))
        sign = np.sign(slope[centre])
        if sign == 0:
            return np.full(row.shape, np.nan)
        bad = np.flatnonzero(np.sign(slope) != sign)
        lo = int(bad[bad < centre].max()) + 1 if np.any(bad < centre) else 0
        hi = int(bad[bad > centre].min()) if np.any(bad > centre) else slope.size
        grid, rows = grid[lo:hi + 1], rows[lo:hi + 1]
        if sign < 0:
            grid, rows = grid[::-1], rows[::-1]
        return np.interp(row, rows, grid, left=np.nan, right=np.nan)

    def index_uncertainty(self, row):
        """Standard uncertainty of the index at frame row(s), from the fit covariance."""
        k = self.index_of(row)
        deg = len(self.coef) - 1
        x = np.stack([np.asarray(k, float) ** p for p in range(deg + 1)], axis=-1)
        var_row = np.einsum("...i,ij,...j->...", x, self.cov, x)
        slope = np.polynomial.polynomial.polyval(k, np.polynomial.polynomial.polyder(self.coef))
        return np.sqrt(np.clip(var_row, 0, None)) / np.abs(slope)


def normalised(grey: np.ndarray, inside: np.ndarray, radius: float, relative: bool | str = True):
    """Darkness against the local mean (dark lines positive), 0 outside the field.

    ``relative``: 1 - grey / local mean (same depth for a line in the bright and
    the dark part); else local mean - grey (the bright part, where lines are
    seen best, weighs most); ``"both"`` returns the pair (relative, absolute).
    """
    sigma = max(3.0, radius / 40)
    w = inside.astype(np.float32)
    # the local mean is smooth: compute it at reduced size (fast) and interpolate back
    f = max(1, int(sigma / 3))
    n0, n1 = grey.shape
    small = (max(1, n1 // f), max(1, n0 // f))
    num = cv2.GaussianBlur(cv2.resize(grey * w, small, interpolation=cv2.INTER_AREA), (0, 0), sigma / f)
    den = cv2.GaussianBlur(cv2.resize(w, small, interpolation=cv2.INTER_AREA), (0, 0), sigma / f)
    local = cv2.resize(num / np.maximum(den, 1e-3), (n1, n0), interpolation=cv2.INTER_LINEAR)
    if relative == "both":
        # in place, one pass each (both are float32 already for a float32 frame)
        rel = np.divide(grey, np.maximum(local, 1e-3), dtype=np.float32)
        np.subtract(np.float32(1.0), rel, out=rel)
        ab = np.subtract(local, grey, dtype=np.float32)
        outside = ~inside
        np.copyto(rel, 0.0, where=outside)
        np.copyto(ab, 0.0, where=outside)
        return rel, ab
    out = 1.0 - grey / np.maximum(local, 1e-3) if relative else local - grey
    out[~inside] = 0.0
    return out.astype(np.float32)


#: Smallest periodicity score (see :func:`find_column`) taken as a column of graduations.  Lower
#: (1.6) turned honest rejections of photos with few visible graduations into wrong readings on
#: held-out seeds 110000-110199, so it stays here.
MIN_PERIODICITY = 2.0


def find_column(dark: np.ndarray, inside: np.ndarray, radius: float, count: int = 51) -> GraduationColumn:
    """The most periodic band of columns and its period (FFT along the axis).

    The darkness is first averaged across a few columns (graduations are
    coherent across the axis over their length, noise is not).  For each
    column the power spectrum along the rows is taken; its score is the
    fraction of the column's high-frequency power that lies within +-15 % of
    its strongest frequency in the band of possible periods.  ``count``
    graduations must fit within the field's diameter, which bounds the period
    from above (so the long graduations' own period is not taken).
    """
    n = dark.shape[0]
    half = n // 2
    chord = int(0.8 * radius)
    rows = slice(max(0, half - chord), min(n, half + chord))
    kv = max(3, int(0.03 * radius))
    # every other column is enough once the columns are averaged over kv >= 3
    block = cv2.blur(dark[rows], (kv, 1))[:, ::2]
    m = block.shape[0]
    cols_valid = inside[rows][:, ::2].mean(axis=0) > 0.5
    if cols_valid.sum() < 10 or m < 32:
        raise GraduationsNotFound("field too small to hold graduations")
    block = block - block.mean(axis=0, keepdims=True)
    spec = np.abs(np.fft.rfft(block * np.hanning(m)[:, None], axis=0)) ** 2
    freqs = np.arange(spec.shape[0]) / m  # cycles per pixel
    lo_f, hi_f = 1.0 / max(6.0, 2.1 * radius / max(count - 1, 1)), 1.0 / 2.8
    band = np.flatnonzero((freqs >= lo_f) & (freqs <= hi_f))
    if len(band) < 3:
        raise GraduationsNotFound("field too small to hold graduations")
    hf = spec[freqs >= 0.5 * lo_f].sum(axis=0) + 1e-20
    # strongest frequency per column (spectrum smoothed over a few bins: the spacing varies)
    sm = cv2.blur(spec.astype(np.float32), (1, 3))
    k_best = band[np.argmax(sm[band], axis=0)]
    kk = np.arange(spec.shape[0])[:, None]
    near = (kk >= 0.85 * k_best[None, :]) & (kk <= 1.15 * k_best[None, :])
    score = (spec * near).sum(axis=0) / hf
    score[~cols_valid] = 0
    score = np.convolve(score, np.ones(3) / 3, mode="same")
    best = int(np.argmax(score))
    kb = int(k_best[best])
    col_spec = spec[:, max(0, best - 1):best + 2].mean(axis=1)
    win = np.arange(max(1, int(0.85 * kb)), min(len(col_spec) - 1, int(np.ceil(1.15 * kb))) + 1)
    k_ref = float(np.sum(win * col_spec[win]) / max(np.sum(col_spec[win]), 1e-20))  # power centroid
    period = m / k_ref
    med = float(np.median(score[cols_valid])) + 1e-12
    periodicity = float(score[best] / med)
    thr = med + 0.5 * (score[best] - med)
    same = np.abs(k_best - kb) <= max(1, 0.15 * kb)
    lo = best
    while lo > 0 and score[lo - 1] > thr and same[lo - 1]:
        lo -= 1
    hi = best
    while hi < len(score) - 1 and score[hi + 1] > thr and same[hi + 1]:
        hi += 1
    return GraduationColumn(float(period), int(2 * lo), int(min(n - 1, 2 * hi + 1)), periodicity)


def _detect(profile: np.ndarray, period: float, noise: float):
    """Local maxima of darkness, sub-pixel centroids."""
    peaks, props = find_peaks(profile, distance=max(2, int(0.55 * period)),
                              prominence=max(3 * noise, 1e-4))
    if len(peaks) == 0:
        return np.empty(0), np.empty(0)
    w = max(1, int(round(0.3 * period)))
    offs = np.arange(-w, w + 1)
    idx = np.clip(peaks[:, None] + offs[None, :], 0, len(profile) - 1)
    vals = profile[idx]
    base = vals.min(axis=1, keepdims=True)
    wt = np.clip(vals - base, 0, None)
    wt = np.where(wt > 0.3 * wt.max(axis=1, keepdims=True), wt, 0)
    pos = (idx * wt).sum(axis=1) / np.maximum(wt.sum(axis=1), 1e-12)
    return pos, props["prominences"]


def _lengths(dark: np.ndarray, rows: np.ndarray, col: GraduationColumn, max_len: int,
             on_edge: np.ndarray | None = None) -> np.ndarray:
    """Run length of dark pixels across the axis through each graduation.

    The shadow edge runs along the graduations, and on a line that lies on it the
    edge's dark side would continue the line's dark run far past its end (a medium
    line measured 52 px against 24 for a long one, and put every value 0.05 off in
    a calibration tuning setup).  For the lines in ``on_edge`` a pixel counts only
    while the line is darker there than both rows half a spacing before and after
    it: the edge's dark side is dark on one side only.
    """
    n = dark.shape[1]
    last = dark.shape[0] - 1
    r = np.clip(np.round(rows).astype(int), 1, last - 1)
    d = np.maximum(np.maximum(dark[r - 1], dark[r]), dark[r + 1])  # (K, n)
    if on_edge is not None and on_edge.any():
        h = max(2, int(round(0.5 * col.period)))
        beside = np.maximum(dark[np.clip(r - h, 0, last)], dark[np.clip(r + h, 0, last)])
        d = np.where(on_edge[:, None], d - beside, d)
    core = d[:, col.v_lo:col.v_hi + 1]
    thr = 0.35 * np.median(core, axis=1, keepdims=True)
    thr = np.maximum(thr, 1e-3)
    mask = d > thr
    lo_edge = max(0, col.v_lo - max_len)
    hi_edge = min(n, col.v_hi + 1 + max_len)
    right = mask[:, col.v_hi + 1:hi_edge]
    left = mask[:, lo_edge:col.v_lo][:, ::-1]
    run_r = np.cumprod(right, axis=1).sum(axis=1) if right.shape[1] else np.zeros(len(r))
    run_l = np.cumprod(left, axis=1).sum(axis=1) if left.shape[1] else np.zeros(len(r))
    return (col.v_hi - col.v_lo + 1) + run_r + run_l, run_r, run_l


#: A line lies on the shadow edge when the band's brightness one spacing before and after it
#: differs by more than this fraction of the brightness at the line.
ON_EDGE_STEP = 0.3


def _on_shadow_edge(frame: FieldFrame, col: GraduationColumn, rows: np.ndarray) -> np.ndarray:
    """Lines across which the field's brightness steps (a shadow edge along the line)."""
    n = frame.grey.shape[0]
    level = cv2.GaussianBlur(frame.grey[:, col.v_lo:col.v_hi + 1].mean(axis=1).astype(np.float32)
                             .reshape(-1, 1), (1, 0), sigmaX=0, sigmaY=max(1.0, col.period)).ravel()
    r = np.clip(np.round(rows).astype(int), 0, n - 1)
    h = max(2, int(round(col.period)))
    step = np.abs(level[np.clip(r + h, 0, n - 1)] - level[np.clip(r - h, 0, n - 1)])
    return step > ON_EDGE_STEP * np.maximum(level[r], 1e-6)


def _assign(pos: np.ndarray, period: float):
    """Consecutive integer indices from the spacing (first pass)."""
    k = np.zeros(len(pos), int)
    spacing = period
    for i in range(1, len(pos)):
        step = (pos[i] - pos[i - 1]) / spacing
        k[i] = k[i - 1] + max(1, int(round(step)))
        if 0.7 < step < 1.4:
            spacing = 0.8 * spacing + 0.2 * (pos[i] - pos[i - 1])
    return k


def _fit(k, pos, deg, weights=None, want_cov=True):
    """Polynomial index -> row by least squares; its covariance (None unless ``want_cov``) and residuals."""
    x = np.vander(k.astype(float), deg + 1, increasing=True)
    w = np.ones(len(k)) if weights is None else weights
    coef, *_ = np.linalg.lstsq(x * w[:, None], pos * w, rcond=None)
    res = pos - x @ coef
    if not want_cov:  # the passes whose covariance is never read skip its pseudo-inverse
        return coef, None, res
    dof = max(1, len(k) - deg - 1)
    s2 = float(np.sum((w * res) ** 2) / dof)
    cov = np.linalg.pinv((x * w[:, None]).T @ (x * w[:, None])) * s2
    return coef, cov, res


def _robust_map(pos, k, period, deg):
    """Predict, match nearest, reject outliers, refit."""
    keep = np.ones(len(pos), bool)
    for _ in range(4):
        if keep.sum() < deg + 3:
            break
        coef, _, res = _fit(k[keep], pos[keep], deg, want_cov=False)
        # re-index every detection against the model: nearest index
        grid = np.arange(k.min() - 5, k.max() + 6)
        rows = np.polynomial.polynomial.polyval(grid, coef)
        nearest = np.clip(np.searchsorted(rows, pos), 1, len(grid) - 1)
        pick = np.where(np.abs(rows[nearest] - pos) < np.abs(rows[nearest - 1] - pos), nearest, nearest - 1)
        k = grid[pick]
        full_res = pos - rows[pick]
        sigma = max(1.4826 * np.median(np.abs(full_res[keep])), 0.03 * period)
        keep = np.abs(full_res) < max(3.5 * sigma, 0.08 * period)
        # one detection per index: keep the closest
        order = np.lexsort((np.abs(full_res), k))
        dup = np.zeros(len(k), bool)
        dup[order[1:]] = k[order[1:]] == k[order[:-1]]
        keep &= ~dup
    coef, cov, res = _fit(k[keep], pos[keep], deg, want_cov=False)  # the caller refits for the covariance
    return k, keep, coef, cov, res


#: Largest RMS scatter (in graduation spacings) of the lines found about the smooth scale map.
#: Printed graduations follow it closely: at most 0.10 on 570 tuning photos (seeds
#: 100000-120199, 99 % below 0.07), while darkness peaks of noise picked at about the right
#: spacing scatter by 0.17-0.23 (synthesizer photos with no graduations printed, seeds
#: 930000-930029, where 5 of 30 had been read on such a "scale"); uniform scatter within half a
#: spacing either way would give 0.29.
MAX_LINE_SCATTER = 0.14


#: Least identification margin (score of the best offset over the next) for values to be given.
#: Tuning photos read with a scale sit above 1.6 but for 1 of 383 (seeds 110000-120199); lines
#: picked from the noise of reticles printed without graduations reach 1.1-1.55 once the axis is
#: found accurately (4 of 32 blank-reticle tuning photos, seeds 48, 49, 930000-930029).
MIN_IDENTIFICATION_MARGIN = 1.6


def find_graduations(frame: FieldFrame, instrument: Instrument, dark: np.ndarray, col: GraduationColumn,
                     values_down: bool | None) -> tuple[Graduations, FieldFrame]:
    """Locate and identify the graduations in a field frame.

    Parameters
    ----------
    frame : FieldFrame
        The field resampled with the axis down the rows (direction not yet known).
    instrument : Instrument
        The scale: first/last/step and the long/medium pattern.
    dark : ndarray
        Relative darkness of the frame (:func:`normalised`).
    col : GraduationColumn
        From :func:`find_column`.
    values_down : bool, None or callable
        Whether the values increase down the rows, from the physics (the dark
        side of the shadow is the low-index side); None when the profile shows
        no step (the result then carries the flag ``direction_undetermined``).
        A callable ``f(row_lo, row_hi)`` is asked once the lines are found,
        with the rows they span (so the field stop's rim does not count).

    Returns
    -------
    (Graduations, FieldFrame)
        The frame is returned reversed when the values increase toward the
        top rows, so that in the returned frame they increase down the rows.

    Raises
    ------
    GraduationsNotFound
        With the reason.
    """
    n = frame.grey.shape[0]
    half = frame.half
    if col.periodicity < MIN_PERIODICITY:
        raise GraduationsNotFound(f"graduations not found (no periodic column; score {col.periodicity:.1f})")
    band = dark[:, col.v_lo:col.v_hi + 1]
    ins = frame.inside[:, col.v_lo:col.v_hi + 1]
    cnt = ins.sum(axis=1)
    profile = np.where(cnt > 0, band.sum(axis=1) / np.maximum(cnt, 1), 0.0)
    usable = cnt >= max(1, 0.6 * band.shape[1])
    profile = np.where(usable, profile, 0.0)
    # local noise of the darkness profile from the spread across the band's columns (robust),
    # smoothed along the rows: the dark part of the field is much noisier than the bright part
    spread = 1.4826 * np.median(np.abs(band - np.median(band, axis=1, keepdims=True)), axis=1)
    row_noise = 1.5 * spread / np.sqrt(max(band.shape[1], 1))
    win = max(9, int(6 * col.period) | 1)
    local_noise = median_filter(row_noise, size=win, mode="nearest") + 1e-5
    noise = float(np.median(local_noise[usable])) if usable.any() else float(np.median(local_noise))
    pos, prom = _detect(profile, col.period, 0.5 * noise)
    if len(pos):
        strong = prom > 4 * local_noise[np.clip(np.round(pos).astype(int), 0, len(profile) - 1)]
        pos, prom = pos[strong], prom[strong]
    if len(pos) < 6:
        raise GraduationsNotFound(f"graduations not found (only {len(pos)} lines in the graduation column)")
    k = _assign(pos, col.period)
    deg = 2 if len(pos) < 30 else 3
    k, keep, coef, cov, res = _robust_map(pos, k, col.period, deg)
    if keep.sum() < 6:
        raise GraduationsNotFound("graduations not found (too few lines fit a smooth scale)")
    pos, k, prom = pos[keep], k[keep], prom[keep]
    # drop small groups separated from the rest by a gap (dust, label strokes beyond the scale end)
    order = np.argsort(k)
    pos, k, prom = pos[order], k[order], prom[order]
    seg = np.concatenate([[0], np.cumsum(np.diff(k) > 3)])
    sizes = np.bincount(seg)
    good = sizes[seg] >= 4
    if good.sum() >= 6:
        pos, k, prom = pos[good], k[good], prom[good]
        coef, _, _ = _fit(k, pos, deg, want_cov=False)
    max_len = int(max(4 * (col.v_hi - col.v_lo + 1), 0.1 * frame.radius))
    lengths, _, _ = _lengths(dark, pos, col, max_len, _on_shadow_edge(frame, col, pos))
    flags = []
    if callable(values_down):  # decided from the brightness within the scale's extent
        values_down = values_down(float(pos.min() - 2 * col.period), float(pos.max() + 2 * col.period))
    if values_down is None:
        values_down = True
        flags.append("direction_undetermined")
    if not values_down:
        frame = frame.flipped()
        pos = (n - 1) - pos
        k = -k
        order = np.argsort(pos)
        pos, k, lengths, prom = pos[order], k[order], lengths[order], prom[order]
        dark = dark[::-1, ::-1]
        profile = profile[::-1]
        col = GraduationColumn(col.period, n - 1 - col.v_hi, n - 1 - col.v_lo, col.periodicity)
    k = k - k.min()
    if not values_down:
        local_noise = local_noise[::-1]
    coef_rel, _, _ = _fit(k, pos, deg, want_cov=False)
    offset, margin, phase_margin, details = _identify(k, pos, lengths, coef_rel, profile,
                                                      local_noise, frame, col, instrument)
    if margin < MIN_IDENTIFICATION_MARGIN:
        # no values to give either way; the reason should say whether the lines made a scale at all
        _, _, res_rel = _fit(k, pos, deg, want_cov=False)
        scatter_rel = float(np.sqrt(np.mean(res_rel ** 2))) / col.period
        if scatter_rel > MAX_LINE_SCATTER:
            raise GraduationsNotFound(
                f"graduations not found (the lines do not follow a scale: scatter {scatter_rel:.2f} of a spacing)")
        raise GraduationsNotFound(
            f"graduations found but their values are ambiguous (identification margin {margin:.1f})")
    k = k + offset
    count = instrument.count
    on_scale = (k >= 0) & (k <= count - 1)
    pos, k, lengths, prom = pos[on_scale], k[on_scale], lengths[on_scale], prom[on_scale]
    if len(pos) < 6:
        raise GraduationsNotFound("graduations not found (too few lines on the scale)")
    end_low, end_high = details["end_low"], details["end_high"]
    pattern_margin = phase_margin
    # refit in absolute index with values increasing down the rows, dropping outliers
    coef, cov, res = _fit(k, pos, deg)
    sigma = 1.4826 * float(np.median(np.abs(res))) + 0.02
    good = np.abs(res) < max(3.5 * sigma, 0.05 * col.period)
    if good.sum() >= deg + 4 and not good.all():
        pos, k, lengths, prom = pos[good], k[good], lengths[good], prom[good]
        coef, cov, res = _fit(k, pos, deg)
    scatter = float(np.sqrt(np.mean(res ** 2))) / col.period
    if scatter > MAX_LINE_SCATTER:
        raise GraduationsNotFound(
            f"graduations not found (the lines do not follow a scale: scatter {scatter:.2f} of a spacing)")
    # expected graduations inside the usable field along the column
    allk = np.arange(count)
    rows_all = np.polynomial.polynomial.polyval(allk, coef)
    vc = (col.v_lo + col.v_hi) / 2 - half
    chord = np.sqrt(max(frame.radius ** 2 - vc ** 2, 0)) * 0.92
    in_field = np.abs(rows_all - half) < chord
    expected = int(in_field.sum())
    figures = {"graduations_found": int(len(pos)), "graduations_expected": expected,
               "graduation_period_px": col.period, "periodicity": col.periodicity,
               "graduation_rms_px": float(np.sqrt(np.mean(res ** 2))),
               "pattern_margin": float(pattern_margin) if np.isfinite(pattern_margin) else 0.0,
               "scale_end_low_seen": bool(end_low), "scale_end_high_seen": bool(end_high)}
    figures["identification_margin"] = float(margin)
    if margin < 3.0:
        flags.append("identification_weak")
    if pattern_margin < 0.1:
        flags.append("pattern_weak")
    if expected and len(pos) < 0.4 * expected:
        flags.append("graduations_partly_found")
    return Graduations(pos, k, lengths, coef, cov, float(np.sqrt(np.mean(res ** 2))), expected, col,
                       figures, tuple(flags)), frame


def _pattern_score(lengths, absolute, long_every, medium_every, scale):
    """How well measured lengths follow the long/medium/short pattern for these absolute indices.

    Medians per class, so a few spurious or badly measured lines do not count:
    ``min(long - medium, medium - short) + 0.25 (long - short)``, relative to
    ``scale``.  Near 0.4-0.7 for the right phase, at most about 0 for a wrong one.
    """
    if len(lengths) < 6:
        return 0.0
    is_long = (absolute % long_every == 0) if long_every else np.zeros(len(absolute), bool)
    is_med = ((absolute % medium_every == 0) & ~is_long) if medium_every else np.zeros(len(absolute), bool)
    is_short = ~(is_long | is_med)
    if is_short.sum() < 3 or not (is_long.any() or is_med.any()):
        return 0.0
    ms = float(np.median(lengths[is_short]))
    ml = float(np.median(lengths[is_long])) if is_long.any() else None
    mm = float(np.median(lengths[is_med])) if is_med.any() else None
    if ml is not None and mm is not None:
        return (min(ml - mm, mm - ms) + 0.25 * (ml - ms)) / scale
    top = ml if ml is not None else mm
    return 1.25 * (top - ms) / scale


def _identify(k, pos, lengths, coef, profile, noise, frame, col, instrument):
    """Absolute index of the graduations: the offset ``c`` with absolute index ``k + c``.

    Every candidate offset is scored as a template match: at each integer
    index near the scale whose predicted row lies in the usable field, the
    line's darkness in units of the local noise (clipped to -2..5) counts for
    the candidate if the index is on the scale and against it if it lies
    beyond an end; the correlation of the measured lengths with the
    long/medium pattern is added with a weight of 10.  Returns (offset,
    margin over the best candidate of another offset, margin of the pattern
    phase, details).
    """
    count = instrument.count
    n = len(profile)
    base = int(round(instrument.first / instrument.step))
    le, me = instrument.long_every or 0, instrument.medium_every or 0
    period = col.period
    m = np.arange(int(k.min()) - count - 12, int(k.max()) + count + 12)
    rows = np.polynomial.polynomial.polyval(m, coef)
    ri = np.round(rows).astype(int)
    usable = (ri > period) & (ri < n - period)
    ri_c = np.clip(ri, 0, n - 1)
    usable &= frame.inside[ri_c, col.v_lo:col.v_hi + 1].mean(axis=1) >= 0.9
    # line contrast at each predicted row (darkest within +-1 px against the mean half a period
    # away), relative to the typical contrast of the lines found: about 1 where a line is, about 0
    # where none is, whatever the noise
    h2 = max(2, int(round(0.5 * period)))
    win = np.clip(ri_c[:, None] + np.arange(-1, 2)[None, :], 0, n - 1)
    side = 0.5 * (profile[np.clip(ri_c - h2, 0, n - 1)] + profile[np.clip(ri_c + h2, 0, n - 1)])
    contrast = profile[win].max(axis=1) - side
    found = np.clip(np.round(pos).astype(int), 0, n - 1)
    found_side = 0.5 * (profile[np.clip(found - h2, 0, n - 1)] + profile[np.clip(found + h2, 0, n - 1)])
    typical = max(float(np.median(profile[found] - found_side)), 1e-6)
    z = np.clip(contrast / typical, -0.5, 1.0)
    # evidence per predicted position: +1 for a clear line, down to -1 for no line where one
    # would be seen.  Beyond the lines found, "would be seen" means: the lines found at that end
    # are clear and the field there is about as bright (a line missing in the dark says nothing)
    band_level = cv2.GaussianBlur(frame.grey[:, col.v_lo:col.v_hi + 1].mean(axis=1).astype(np.float32)
                                  .reshape(-1, 1), (1, 0), sigmaX=0, sigmaY=max(1.0, period)).ravel()
    contr_found = (profile[found] - found_side) / typical
    vis = np.zeros(len(m))
    for side_sign, sel in ((-1, m < k.min()), (1, m > k.max())):
        end_idx = np.argsort(k)[:3] if side_sign < 0 else np.argsort(k)[-3:]
        strength = float(np.clip(np.median(contr_found[end_idx]), 0, 1))
        b_end = float(np.median(band_level[found[end_idx]]))
        ratio = band_level[ri_c[sel]] / max(b_end, 1e-6)
        vis[sel] = strength * np.clip((ratio - 0.5) / 0.4, 0, 1)
    present = z >= 0.5
    evidence = np.where(present, 1.0, (2 * np.clip(z, 0, 1) - 1) * vis)
    evidence = np.where(usable, evidence, 0.0)
    # the pattern is read from the lines in the bright part (lengths in the dark are unreliable)
    lvl = band_level[found]
    bright_lines = lvl >= 0.6 * float(np.percentile(lvl, 90))
    if bright_lines.sum() < 12:
        bright_lines = np.ones(len(k), bool)
    med_all = max(float(np.median(lengths[bright_lines])), 1.0)
    scores, pattern, templates = {}, {}, {}
    # the pattern score depends on the offset only through the long and medium graduations' phase
    phase_period = math.lcm(int(le), int(me)) if le and me else int(le or me or 0)
    whole = bool(np.all(np.mod(k, 1) == 0))
    by_phase: dict[int, float] = {}
    offsets = np.arange(-int(k.max()) - 2, count + 2 - int(k.min()))
    # template score of every offset at once: the evidence at indices that land on the scale
    # (a run of m, which is consecutive) counts for it, the rest against: 2 * on - total
    cum = np.concatenate([[0.0], np.cumsum(evidence)])
    j_lo = np.clip(-offsets - m[0], 0, len(m))
    j_hi = np.clip(count - offsets - m[0], 0, len(m))
    tmpl_all = 2.0 * np.where(j_hi > j_lo, cum[j_hi] - cum[np.minimum(j_lo, j_hi)], 0.0) - cum[-1]
    # weak prior: an eyepiece centres its scale in the field stop (a few tenths of a radius)
    mid_rows = np.polynomial.polynomial.polyval((count - 1) / 2 - offsets, coef)
    centring_all = np.minimum(((mid_rows - frame.half) / (0.15 * frame.radius)) ** 2, 25.0)
    for c, tmpl, centring in zip(offsets.tolist(), tmpl_all.tolist(), centring_all.tolist(), strict=True):
        # the pattern over all lines found (it is periodic; the range is the template's business)
        absolute = k[bright_lines] + c + base
        key = (c + base) % phase_period if phase_period and whole else c
        if key not in by_phase:
            by_phase[key] = _pattern_score(lengths[bright_lines], absolute, le, me, med_all)
        corr = by_phase[key]
        pattern[c] = corr
        templates[c] = tmpl
        scores[c] = tmpl + 20.0 * corr - centring
    order = sorted(scores, key=scores.get, reverse=True)
    best = order[0]
    margin = scores[best] - scores[order[1]] if len(order) > 1 else np.inf
    period_pat = le or me
    other_phase = [pattern[c] for c in pattern if period_pat and (c - best) % period_pat != 0]
    phase_margin = pattern[best] - max(other_phase) if other_phase else 1.0
    low_row = np.polynomial.polynomial.polyval(-1 - best, coef)
    high_row = np.polynomial.polynomial.polyval(count - best, coef)

    def _seen_empty(row):
        r = int(round(row))
        if not (period < r < n - period):
            return False
        if frame.inside[r, col.v_lo:col.v_hi + 1].mean() < 0.9:
            return False
        side_r = 0.5 * (profile[max(0, r - h2)] + profile[min(n - 1, r + h2)])
        return (profile[max(0, r - 1):r + 2].max() - side_r) < 0.3 * typical

    details = {"end_low": bool(_seen_empty(low_row)), "end_high": bool(_seen_empty(high_row)),
               "score": scores[best],
               "top": [(c, round(templates[c], 2), round(pattern[c], 3)) for c in order[:6]]}
    return best, float(margin), float(phase_margin), details
