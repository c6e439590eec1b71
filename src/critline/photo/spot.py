"""Spot (distance) readings of curved stones from photos.

On a cabochon the stone touches the prism through a tiny droplet; with the eye
well behind the eyepiece the droplet's image shows as a small oval on the
scale, dim where its scale values lie below the stone's index and bright
above (domain.md, "Practice").  The reading is where the spot turns from dark
to light, half dark and half light: two decimals, about +-0.01 (common
practice, no source).

Detection is automatic (no option needed): :func:`looks_like_spot_view`
decides from the field whether the photo shows a compact bright oval on an
otherwise dim, even field (a spot view) rather than a shadow edge across
the whole field (a flat facet).  It is conservative both ways: a field with a
large bright region, a bright region reaching the field's rim, a weak
contrast, or uneven brightness outside the oval is *not* a spot view.

Method
------
1. The field is resampled with the scale axis along the rows
   (:mod:`critline.photo.frame`); the axis direction is taken with the
   brightest compact region painted over, because on a dim field the spot's
   outline would outweigh the faint graduations.  The printed reticle is
   removed by a grey closing along the axis, the image taken to linear
   light, and the field's level is its median.
2. The spot is the largest bright connected region (above half-way from the
   field level to the brightest level); it must be compact, small, away from
   the field's rim, alone, on an even field, at least twice as bright as the
   field.  The whole oval (its dim part included) is that region grown down
   to a fifth of the way.
3. Along the axis through the oval's middle the table's Fresnel reflectance
   (Fresnel equations, :mod:`critline.optics`; 1 above the index) blurred by
   a Gaussian is fitted by least squares for both directions, every split
   row and a few blur widths, with the value axis locally linear (the
   graduation period); it must beat a constant clearly.  The dim side is the
   low-value side, which orients the scale for
   :func:`critline.photo.graduations.find_graduations`.
4. On the value axis given by the graduations the fit is repeated over a grid
   of indices near the split: that is the reading, where a spot centred there
   would be half dark, half light.  No reading (``no_edge``) when no split
   is seen (a wholly light or wholly dark spot) or it lies at the spot's very
   end; ``rejected`` when the graduations or their values are doubtful.
5. A series of photos of one stone (the head moving):
   :func:`read_spot_series` interpolates the spot-centre position at which
   the dark fraction is one half.

Hook for :func:`critline.photo.read_photo` (after loading and field finding)::

    from critline.photo.spot import read_spot_view

    photo = load_photo(path)
    fr = find_field(coarse, rc)               # FieldResult with a circle
    spot = read_spot_view(photo, fr.circle, inst, calibration, name)
    if spot is not None:                      # a spot view: its reading
        return spot
    ...                                       # else the flat-facet reading

``read_spot_view(photo, circle, instrument=None, calibration=None, name=None,
force=False) -> PhotoReading | None`` returns None when the photo is not a
spot view (``force=True``: read it as one anyway, or reject it with the
reason; for a ``--spot`` option).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import cv2
import numpy as np
from scipy.ndimage import gaussian_filter1d, label

from critline.instrument import DEFAULT, Instrument
from critline.optics import unpolarised_reflectance
from critline.photo.frame import FieldFrame, axis_angle, make_frame
from critline.photo.graduations import (
    GraduationsNotFound,
    find_column,
    find_graduations,
    normalised,
)
from critline.photo.load import LoadedPhoto, PhotoRejected, decode, srgb_to_linear
from critline.photo.percentile import percentile
from critline.readings import Edge, PhotoReading, Quality, rejected

#: Precision of a spot reading, +- (common practice, no source); reported as the uncertainty.
SPOT_PRECISION = 0.01
#: Field diameter (pixels) wanted in the working image.
WORK_DIAMETER = 900
#: Prism index assumed for the shape of the Fresnel rise (dense glass, about 1.86-1.89; from memory).
PRISM_INDEX = 1.88
#: Share of the spot's length the split must lie inside for a single-photo reading.
SPLIT_MARGIN = 0.08
#: Least identification margin of the graduation values (critline.photo.graduations) for a reading.
MIN_IDENTIFICATION = 6.0
#: Flag carried by every spot reading.
FLAG = "spot_reading"


@dataclass(frozen=True)
class SpotBlob:
    """The spot found in a field frame (rows along the axis, frame pixels).

    ``row_lo, row_hi``: extent of its bright part along the axis; ``col``:
    its centre column; ``half_width``: half its width across the axis;
    ``dim_side``: -1 if the dim part lies toward lower rows, +1 toward higher
    rows, 0 if no dim part is seen (wholly bright spot); ``contrast``: bright
    level / background (linear light); ``figures``: named measurements.
    """

    row_lo: float
    row_hi: float
    col: float
    half_width: float
    dim_side: int
    contrast: float
    background: float
    bright: float
    oval: tuple[float, float]
    figures: dict = field(default_factory=dict)


@dataclass(frozen=True)
class SpotDecision:
    """Whether a field frame is a spot view, the spot if so, and the reason either way."""

    is_spot: bool
    reason: str
    blob: SpotBlob | None = None
    figures: dict = field(default_factory=dict)


def _clean_linear(frame: FieldFrame) -> np.ndarray:
    """Linear-light luma with the thin reticle lines removed (grey closing along the axis)."""
    r = frame.radius
    k = int(max(3, round(0.035 * r))) | 1
    closed = cv2.morphologyEx(frame.grey, cv2.MORPH_CLOSE, cv2.getStructuringElement(cv2.MORPH_RECT, (1, k)))
    closed = cv2.GaussianBlur(closed, (0, 0), max(1.0, 0.006 * r))
    return srgb_to_linear(closed)


def might_be_spot_view(frame: FieldFrame) -> bool:
    """Cheap first test on any field frame: False when the field cannot be a spot view.

    A spot view is a dim field with one small bright region.  Two figures of
    :func:`looks_like_spot_view` that do not depend on the frame's axis or
    resolution rule most fields out at a fraction of the cost of the spot
    detector: the brightest part no brighter than the field's level, or a bright
    part far larger than a spot.  The margins are wider than the detector's own
    (peak 1.4 times the level against 2, bright share 0.16 against 0.08), so a
    field this rejects is one the detector would reject too.
    """
    r = frame.radius
    n = frame.grey.shape[0]
    ii, jj = np.ogrid[0:n, 0:n]
    inner = frame.inside & (((ii - frame.half) ** 2 + (jj - frame.half) ** 2) < (0.92 * r) ** 2)
    if inner.sum() < 500:
        return False
    grey = cv2.GaussianBlur(frame.grey, (0, 0), max(1.0, 0.006 * r))
    vals = srgb_to_linear(grey[inner])
    bg = _median(vals)
    top = float(percentile(vals, 99.99))
    if top < 1.4 * max(bg, 1e-4) or top < 0.01:
        return False
    bright = float(np.count_nonzero(vals > bg + 0.5 * (top - bg))) / float(np.pi * r * r)
    return bright <= 0.16


def _median(vals: np.ndarray) -> float:
    """``numpy.median`` of a 1-D array by one partition (the upper middle value as the minimum above it)."""
    n = vals.size
    k = (n - 1) // 2
    part = np.partition(vals, k)
    if n % 2:
        return float(part[k])
    return float(np.mean(np.array([part[k], part[k + 1:].min()], dtype=vals.dtype)))


def looks_like_spot_view(frame: FieldFrame) -> SpotDecision:
    """Decide whether a field frame shows a spot view (see the module notes).

    Returns
    -------
    SpotDecision
        ``is_spot`` with the reason and, if so, the :class:`SpotBlob`.
    """
    r = frame.radius
    n = frame.grey.shape[0]
    lin = _clean_linear(frame)
    ii, jj = np.mgrid[0:n, 0:n]
    rho = np.hypot(ii - frame.half, jj - frame.half)
    inner = frame.inside & (rho < 0.92 * r)
    if inner.sum() < 500:
        return SpotDecision(False, "field too small")
    vals = lin[inner]
    bg = float(np.median(vals))
    top = float(np.percentile(vals, 99.99))
    figs = {"background": bg, "top": top}
    if top < 2.0 * max(bg, 1e-4) or top < 0.02:
        return SpotDecision(False, "no compact bright region on a dim field", figures=figs)
    thr = bg + 0.5 * (top - bg)
    labels, count = label((lin > thr) & frame.inside)
    if count == 0:
        return SpotDecision(False, "no bright region", figures=figs)
    sizes = np.bincount(labels.ravel())
    sizes[0] = 0
    best = int(np.argmax(sizes))
    comp = labels == best
    area = float(sizes[best])
    field_area = float(np.pi * r * r)
    rows, cols = np.nonzero(comp)
    r_lo, r_hi = rows.min(), rows.max()
    c_lo, c_hi = cols.min(), cols.max()
    len_rows, len_cols = (r_hi - r_lo + 1) / r, (c_hi - c_lo + 1) / r
    reach = float(rho[comp].max()) / r
    fill = area / max((r_hi - r_lo + 1) * (c_hi - c_lo + 1), 1)
    # the rest of the field: bright pixels other than the spot, and evenness of the background
    others = float(((lin > thr) & frame.inside & ~comp).sum()) / field_area
    grown = cv2.dilate(comp.astype(np.uint8), np.ones((int(0.15 * r) | 1,) * 2, np.uint8)).astype(bool)
    rest = inner & ~grown
    spread = float(np.percentile(lin[rest], 95) - np.percentile(lin[rest], 5)) / max(top - bg, 1e-6) \
        if rest.sum() > 100 else 1.0
    figs.update(spot_area=area / field_area, spot_rows=len_rows, spot_cols=len_cols, spot_reach=reach,
                spot_fill=fill, other_bright=others, background_spread=spread)
    checks = [
        (area / field_area <= 0.08, "bright region too large for a spot"),
        (len_rows <= 0.6 and len_cols <= 0.6, "bright region too long for a spot"),
        (len_rows >= 0.025 and len_cols >= 0.025, "bright region too small for a spot"),
        (reach <= 0.93, "bright region reaches the field's rim"),
        (fill >= 0.45, "bright region not compact"),
        (others <= 0.002, "more than one bright region"),
        (spread <= 0.5, "field outside the bright region uneven"),
    ]
    for ok, why in checks:
        if not ok:
            return SpotDecision(False, why, figures=figs)
    # the whole oval: the bright region grown down to a quarter of the way from the field level
    # (the spot's dim part, its values below the index, is still lit by Fresnel reflection)
    grown_lab, _ = label((lin > bg + 0.2 * (top - bg)) & frame.inside)
    whole = grown_lab == np.bincount(grown_lab[comp]).argmax()
    w_rows, w_cols = np.nonzero(whole)
    if whole.sum() > 3 * area or w_rows.max() - w_rows.min() > 0.8 * r:
        return SpotDecision(False, "spot outline not closed", figures=figs)
    w_lo, w_hi = int(w_rows.min()), int(w_rows.max())
    col = 0.5 * (w_cols.min() + w_cols.max())
    half_w = 0.5 * (w_cols.max() - w_cols.min() + 1)
    band = slice(max(0, int(col - 0.3 * half_w)), min(n, int(col + 0.3 * half_w) + 1))
    prof = lin[:, band].mean(axis=1)
    span = w_hi - w_lo + 1
    if span < 8:
        return SpotDecision(False, "bright region too small for a spot", figures=figs)
    dim_side, split_row = 0, None
    if dim_side < 0:
        b_lo, b_hi = split_row, float(w_hi)
    elif dim_side > 0:
        b_lo, b_hi = float(w_lo), split_row
    else:
        b_lo, b_hi = float(w_lo), float(w_hi)
    bright = float(np.median(prof[int(b_lo):int(b_hi) + 1]))
    r0, a_ax = 0.5 * (w_lo + w_hi), 0.5 * span
    if a_ax > 0.4 * r:
        return SpotDecision(False, "spot too long", figures=figs)
    figs.update(oval_rows=2 * a_ax / r, bright=bright)
    blob = SpotBlob(b_lo, b_hi, float(col), float(half_w), dim_side, top / max(bg, 1e-6), bg, bright,
                    (float(r0), float(a_ax)), figs)
    return SpotDecision(True, "compact bright oval on a dim field", blob, figs)


def split_in_rows(prof, lo: int, hi: int, period: float):
    """Where along the rows the spot turns from dim to bright, and which way.

    Least-squares fit of ``a + b * fresnel_rise`` on the rows ``lo..hi`` (the
    oval's interior), with the value axis taken as locally linear (``period``
    rows per graduation of 0.01), for both directions and every split row and
    blur on a grid, against a constant (no split).

    Returns
    -------
    (side, row, improvement, contrast)
        ``side`` -1 when the dim part lies toward lower rows, +1 toward higher
        rows, 0 when no split fits clearly better than a constant;
        ``improvement`` = rms of the constant / rms of the split fit;
        ``contrast`` = b / (a + b), the dim part's depth below the bright part.
    """
    rows = np.arange(lo, hi + 1, dtype=float)
    y = np.asarray(prof[lo:hi + 1], float)
    if len(y) < 8 or period <= 0:
        return 0, None, 1.0, 0.0
    rms_const = float(np.std(y)) + 1e-9
    per_row = 0.01 / period
    best = (np.inf, 0, None, 0.0)
    ref = 1.6  # the Fresnel shoulder's shape changes little with the index
    reach = (hi - lo + 2) * per_row
    grid = np.linspace(ref - reach, ref + reach, 2001)
    for blur in (0.001, 0.003, 0.006):
        table = fresnel_rise(grid, ref, blur)
        for side in (-1, 1):
            for k in np.arange(lo + 2, hi - 1, 0.5):
                # side -1: values rise with the rows (dim part toward lower rows)
                x = np.interp(ref + (rows - k) * per_row * (-side), grid, table)
                design = np.stack([np.ones_like(x), x], axis=1)
                coef, *_ = np.linalg.lstsq(design, y, rcond=None)
                if coef[1] <= 0:
                    continue
                rms = float(np.sqrt(np.mean((design @ coef - y) ** 2)))
                if rms < best[0]:
                    best = (rms, side, float(k), float(coef[1] / max(coef[0] + coef[1], 1e-9)))
    rms, side, k, contrast = best
    if k is None:
        return 0, None, 1.0, 0.0
    return side, k, rms_const / max(rms, 1e-9), contrast


def _fit_ellipse(rows, cols):
    """Axis-aligned ellipse ``A r^2 + B c^2 + C r + D c = 1`` by linear least squares; (r0, c0, a, b)."""
    if len(rows) < 6:
        return None
    # about the points' mean (inside the oval), so that the form needs no constant term
    mr, mc = float(np.mean(rows)), float(np.mean(cols))
    x, y = rows - mr, cols - mc
    design = np.stack([x**2, y**2, x, y], axis=1)
    scale = np.abs(design).max(axis=0) + 1e-12
    coef, *_ = np.linalg.lstsq(design / scale, np.ones(len(rows)), rcond=None)
    A, B, C, D = coef / scale
    if A <= 0 or B <= 0:
        return None
    x0, y0 = -C / (2 * A), -D / (2 * B)
    f = 1 + C * C / (4 * A) + D * D / (4 * B)
    if f <= 0:
        return None
    return float(x0 + mr), float(y0 + mc), float(math.sqrt(f / A)), float(math.sqrt(f / B))


def _flip_blob(blob: SpotBlob, n: int) -> SpotBlob:
    return SpotBlob(n - 1 - blob.row_hi, n - 1 - blob.row_lo, n - 1 - blob.col, blob.half_width, -blob.dim_side,
                    blob.contrast, blob.background, blob.bright, (n - 1 - blob.oval[0], blob.oval[1]), blob.figures)


def fresnel_rise(values, index, blur, prism_index=PRISM_INDEX):
    """Normalised table reflectance along the value axis, blurred by a Gaussian of ``blur`` (value units).

    Fresnel equations (unpolarised, :func:`critline.optics.unpolarised_reflectance`); 1 at and
    above ``index`` (total reflection).
    """
    values = np.asarray(values, float)
    step = 0.0002
    grid = np.arange(values.min() - 5 * blur - 0.01, values.max() + 5 * blur + 0.01, step)
    refl = unpolarised_reflectance(np.minimum(grid, prism_index * 0.9999), index, prism_index)
    if blur > 0:
        refl = gaussian_filter1d(refl, blur / step, mode="nearest")
    return np.interp(values, grid, refl)


def fit_split(values, brightness, first_guess, reach=0.02):
    """Least-squares fit of ``a + b * fresnel_rise(values, n, blur)``; returns ``(n, rms, blur)``.

    Grid search over ``n`` within ``first_guess +- reach`` (0.0005 steps) and a
    few blur widths, the levels ``a, b`` solved linearly at each node.
    """
    v = np.asarray(values, float)
    y = np.asarray(brightness, float)
    best = (float(first_guess), np.inf, 0.0)
    for blur in (0.0005, 0.0015, 0.003, 0.005, 0.008):
        for n in np.arange(first_guess - reach, first_guess + reach + 1e-9, 0.0005):
            x = fresnel_rise(v, n, blur)
            design = np.stack([np.ones_like(x), x], axis=1)
            coef, *_ = np.linalg.lstsq(design, y, rcond=None)
            if coef[1] <= 0:
                continue
            rms = float(np.sqrt(np.mean((design @ coef - y) ** 2)))
            if rms < best[1]:
                best = (float(n), rms, blur)
    return best


def _column(frame: FieldFrame, inst: Instrument):
    """Relative darkness of the frame and the graduation column (as the flat reader finds it)."""
    dark = normalised(frame.grey, frame.inside, frame.radius)
    col_abs = find_column(normalised(frame.grey, frame.inside, frame.radius, relative=False),
                          frame.inside, frame.radius, inst.count)
    col_rel = find_column(dark, frame.inside, frame.radius, inst.count)
    return dark, (col_abs if col_abs.periodicity >= col_rel.periodicity else col_rel)


def _reduce_for(size: float, want: float) -> int:
    for r in (8, 4, 2):
        if size / r >= want:
            return r
    return 1


def spot_frame(photo: LoadedPhoto, circle) -> FieldFrame:
    """The field of ``photo`` resampled with the scale axis along the rows (working resolution)."""
    rw = _reduce_for(2 * circle.r, WORK_DIAMETER)
    rgb = decode(photo, rw)
    wcx, wcy, wr = (circle.cx - (rw - 1) / 2) / rw, (circle.cy - (rw - 1) / 2) / rw, circle.r / rw
    grey_w = (0.299 * rgb[..., 0] + 0.587 * rgb[..., 1] + 0.114 * rgb[..., 2]).astype(np.float32)
    axis = axis_angle(_paint_over_bright_blob(grey_w, wcx, wcy, wr), wcx, wcy, wr)
    return make_frame(rgb, wcx, wcy, wr, axis.angle, rw)


def _paint_over_bright_blob(grey: np.ndarray, cx: float, cy: float, r: float) -> np.ndarray:
    """``grey`` with its brightest compact region inside the field painted in the field's level.

    On a dim field the spot's outline has more gradient energy than the faint graduations and
    would set the axis direction; without it the graduations do.
    """
    h, w = grey.shape
    yy, xx = np.ogrid[0:h, 0:w]
    inside = ((xx - cx) ** 2 + (yy - cy) ** 2) < (0.95 * r) ** 2
    if inside.sum() < 100:
        return grey
    sm = cv2.GaussianBlur(grey, (0, 0), max(1.0, 0.01 * r))
    level = float(np.median(sm[inside]))
    top = float(np.percentile(sm[inside], 99.99))
    if top <= level:
        return grey
    lab, count = label((sm > level + 0.25 * (top - level)) & inside)
    if count == 0:
        return grey
    sizes = np.bincount(lab.ravel())
    sizes[0] = 0
    ys, xs = np.nonzero(lab == int(np.argmax(sizes)))
    extent = max(xs.max() - xs.min(), ys.max() - ys.min()) + 1
    if extent > 0.8 * r:
        return grey  # not a spot; leave the image as it is
    out = grey.copy()
    cv2.circle(out, (int(round(xs.mean())), int(round(ys.mean()))), int(0.8 * extent + 0.03 * r + 2), level, -1)
    return out


def read_spot_photo(path, instrument: Instrument | None = None, calibration=None,
                    force: bool = False) -> PhotoReading | None:
    """Load ``path``, find its field and read it as a spot view (None if it is not one).

    A convenience over :func:`read_spot_view` for scripts and tests; ``read_photo`` calls
    :func:`read_spot_view` itself after its own loading and field finding.  A photo that cannot
    be loaded or has no field comes back rejected with the reason when ``force``, else None.
    """
    from critline.photo.field import find_field
    from critline.photo.load import load_photo

    name = str(path)
    try:
        photo = load_photo(path)
    except PhotoRejected as exc:
        return rejected(name, "", str(exc)) if force else None
    short = min(photo.width, photo.height)
    reduce = next((r for r in (8, 4, 2) if short / r >= 300), 1)
    found = find_field(decode(photo, reduce, grey=True), reduce)
    if found.circle is None:
        return rejected(name, photo.sha256, found.reason or "no field found") if force else None
    return read_spot_view(photo, found.circle, instrument, calibration, name, force=force)


def read_spot_view(photo: LoadedPhoto, circle, instrument: Instrument | None = None, calibration=None,
                   name: str | None = None, force: bool = False) -> PhotoReading | None:
    """Read a spot view, or return None when the photo is not one (see the module's hook example).

    Parameters
    ----------
    photo : LoadedPhoto
        From :func:`critline.photo.load.load_photo`.
    circle : critline.photo.field.FieldCircle
        The field stop found by :func:`critline.photo.field.find_field` (full-size pixels).
    instrument, calibration :
        As for :func:`critline.photo.read_photo`.
    name : str
        The photo's name as given (default: ``"photo"``).
    force : bool
        Read as a spot view even if it does not look like one (rejected with
        the detector's reason if no spot is found).
    """
    inst = instrument or DEFAULT
    name = name or "photo"
    try:
        frame = spot_frame(photo, circle)
        decision = looks_like_spot_view(frame)
    except (cv2.error, ValueError, IndexError, ZeroDivisionError, MemoryError) as exc:
        return rejected(name, photo.sha256, f"spot view check failed ({type(exc).__name__})") if force else None
    if not decision.is_spot:
        return rejected(name, photo.sha256, f"no spot found: {decision.reason}") if force else None
    try:
        return read_spot(frame, decision.blob, inst, calibration, name, photo.sha256,
                         field_circle=(circle.cx, circle.cy, circle.r))
    except PhotoRejected as exc:
        return rejected(name, photo.sha256, str(exc))
    except (cv2.error, ValueError, IndexError, ZeroDivisionError, FloatingPointError,
            np.linalg.LinAlgError) as exc:
        return rejected(name, photo.sha256, f"spot view could not be analysed ({type(exc).__name__})")


def read_spot(frame: FieldFrame, blob: SpotBlob, instrument: Instrument | None = None, calibration=None,
              name: str = "photo", sha256: str = "", field_circle=None) -> PhotoReading:
    """Measure the spot's split on the graduated scale and read it (one photo).

    Status ``ok`` with one Edge of kind ``"spot"`` when the split lies inside
    the spot; ``no_edge`` when the spot is wholly light (or its dim part
    unseen) or the split lies at its very end, with the reason; the figures
    keep the spot's centre, length and dark fraction in scale units for
    :func:`read_spot_series`.  Raises :class:`PhotoRejected` when the
    graduations cannot be read.
    """
    inst = instrument or DEFAULT
    n = frame.grey.shape[0]
    try:
        dark, col = _column(frame, inst)
    except GraduationsNotFound as exc:
        raise PhotoRejected(f"spot view: {exc}") from None
    band = slice(max(0, int(blob.col - 0.3 * blob.half_width)), min(n, int(blob.col + 0.3 * blob.half_width) + 1))
    prof0 = _clean_linear(frame)[:, band].mean(axis=1)
    r0, a_ax = blob.oval
    edge = max(2, int(0.2 * a_ax))
    lo, hi = int(math.ceil(r0 - a_ax)) + edge, int(r0 + a_ax) - edge
    side, k, improvement, contrast = split_in_rows(prof0, lo, hi, col.period)
    # a split needs a totally reflected part well above the dim field (a wholly dark spot is
    # only a little brighter than the field, with no plateau)
    has_split = (side != 0 and improvement >= 2.0 and contrast >= 0.35 and lo + 1 < k < hi - 1
                 and blob.bright >= 4.0 * blob.background)
    try:
        grads, frame2 = find_graduations(frame, inst, dark, col, (side < 0) if has_split else None)
    except GraduationsNotFound as exc:
        raise PhotoRejected(f"spot view: {exc}") from None
    if abs(((frame2.angle - frame.angle) + np.pi) % (2 * np.pi) - np.pi) > 1.0:
        blob = _flip_blob(blob, n)
        r0 = n - 1 - r0
        lo, hi = n - 1 - hi, n - 1 - lo
        k = None if k is None else n - 1 - k
    margin = float(grads.figures.get("identification_margin", 0.0))
    if "identification_weak" in grads.flags or "pattern_weak" in grads.flags or margin < MIN_IDENTIFICATION:
        # a wrong graduation identity shifts a reading by whole graduations or tenths: no
        # reading rather than that (a spot view shows the scale dimly, away from the spot)
        raise PhotoRejected(f"spot view: graduation values uncertain (identification margin {margin:.1f})")
    flags = [FLAG, *grads.flags]
    figures = dict(blob.figures)
    figures.update({k_: v for k_, v in grads.figures.items() if isinstance(v, (int, float))})
    figures.update(split_improvement=float(improvement), split_contrast=float(contrast))
    band = slice(max(0, int(blob.col - 0.3 * blob.half_width)), min(n, int(blob.col + 0.3 * blob.half_width) + 1))
    prof = _clean_linear(frame2)[:, band].mean(axis=1)
    rows = np.arange(n, dtype=float)
    values = inst.first + inst.step * grads.index_of(rows)
    bright_lvl, bg = blob.bright, blob.background
    ok_v = np.isfinite(values)
    if not has_split or "direction_undetermined" in flags or ok_v.sum() < 10:
        return _no_split(name, sha256, blob, inst, values, rows, flags, figures, field_circle,
                         "no split seen in the spot (wholly light or wholly dark): move the head until "
                         "it is half dark", keep=True)
    # in frame2 values increase down the rows, so the dim part lies above the split
    split_guess = float(np.interp(k, rows[ok_v], values[ok_v]))
    sel = ok_v & (values >= split_guess - 0.015) & (rows >= lo) & (rows <= hi)
    if sel.sum() < 6:
        return _no_split(name, sha256, blob, inst, values, rows, flags, figures, field_circle,
                         "spot too small to measure its split", keep=True)
    ri_fit, rms, blur = fit_split(values[sel], prof[sel], split_guess)
    split_row = float(np.interp(ri_fit, values[ok_v], rows[ok_v]))
    frac = float(np.clip((split_row - (r0 - a_ax)) / max(2 * a_ax, 1e-6), 0, 1))
    scale_pos = (ri_fit - inst.first) / inst.step
    v_lo, v_c, v_hi = np.interp([r0 - a_ax, r0, r0 + a_ax], rows[ok_v], values[ok_v])
    figures.update(split_fit_rms=rms / max(bright_lvl - bg, 1e-6), split_blur=blur, dark_fraction=frac,
                   spot_centre_scale=float((v_c - inst.first) / inst.step),
                   spot_length_scale=float((v_hi - v_lo) / inst.step),
                   split_scale=float(scale_pos))
    if not SPLIT_MARGIN <= frac <= 1 - SPLIT_MARGIN:
        return _no_split(name, sha256, blob, inst, values, rows, flags, figures, field_circle,
                         "the split lies at the spot's very end: move the head until the spot is half dark",
                         keep=True)
    k_unc = float(grads.index_uncertainty(split_row))
    scale_unc = math.hypot(SPOT_PRECISION / inst.step, k_unc)
    eflags: tuple[str, ...] = ()
    if calibration is not None:
        ri, unc, eflags = calibration.scale_to_ri(scale_pos, scale_unc)
        unc = max(unc, SPOT_PRECISION)
    else:
        ri, unc = inst.value(scale_pos), scale_unc * inst.step
    liquid = inst.liquid_ri
    if liquid is not None and ri > liquid + 2 * SPOT_PRECISION:
        # the split of a spot cannot lie above the contact liquid's index (total reflection at
        # the liquid comes first): the graduation values must be wrong
        raise PhotoRejected(f"spot view: split read at {ri:.3f}, above the contact liquid ({liquid:.2f}); "
                            "graduation values doubtful")
    if liquid is not None and ri >= liquid - SPOT_PRECISION:
        flags.append("near_liquid")
    edge = Edge(ri=round(float(ri), 3), uncertainty=float(unc), kind="spot", scale_position=float(scale_pos),
                scale_uncertainty=float(scale_unc), contrast=float(np.clip(1 - bg / bright_lvl, 0, 1)),
                field_position=float((split_row - frame2.half) / frame2.radius), flags=tuple(eflags))
    return PhotoReading(photo=name, sha256=sha256, status="ok", reason=None, edges=(edge,), light="unknown",
                        mode="graduations", quality=Quality(tuple(dict.fromkeys(flags)), _clean(figures)),
                        profile=_profile(values, prof, sel, inst), field_circle=field_circle)


def _walk(prof, start, direction, level):
    """First row from ``start`` in ``direction`` where ``prof`` falls below ``level`` (sub-row)."""
    i = int(np.clip(start, 0, len(prof) - 1))
    while 0 <= i + direction < len(prof) and prof[i + direction] >= level:
        i += direction
    j = i + direction
    if not 0 <= j < len(prof):
        return float(i)
    a, b = prof[i], prof[j]
    t = (a - level) / (a - b) if a != b else 0.5
    return float(i + direction * np.clip(t, 0, 1))


def _profile(values, prof, sel, inst):
    ok = np.isfinite(values)
    lo, hi = np.flatnonzero(sel)[[0, -1]]
    pad = (hi - lo)
    keep = np.zeros_like(ok)
    keep[max(0, lo - pad):hi + pad + 1] = True
    keep &= ok
    top = float(prof[keep].max()) if keep.any() else 1.0
    return (tuple(float(x) for x in (values[keep] - inst.first) / inst.step),
            tuple(float(y) for y in prof[keep] / max(top, 1e-6)))


def _clean(figures: dict) -> dict:
    out = {}
    for k, v in figures.items():
        if isinstance(v, (bool, np.bool_)):
            out[k] = bool(v)
        elif isinstance(v, (int, float, np.integer, np.floating)):
            out[k] = float(v) if math.isfinite(float(v)) else None
    return out


def _no_split(name, sha256, blob, inst, values, rows, flags, figures, field_circle, reason, keep=False):
    ok = np.isfinite(values)
    if not keep and "direction_undetermined" not in flags and ok.sum() > 2:
        # wholly light spot: its centre and length still serve a series
        r0, a_ax = blob.oval
        v_lo, v_c, v_hi = np.interp([r0 - a_ax, r0, r0 + a_ax], rows[ok], values[ok])
        figures.update(dark_fraction=0.0, spot_centre_scale=float((v_c - inst.first) / inst.step),
                       spot_length_scale=float((v_hi - v_lo) / inst.step))
    return PhotoReading(photo=name, sha256=sha256, status="no_edge", reason=reason, edges=(), light="unknown",
                        mode="graduations", quality=Quality(tuple(dict.fromkeys(flags)), _clean(figures)),
                        field_circle=field_circle)


@dataclass(frozen=True)
class SpotSeriesReading:
    """A spot reading from a series of photos of one stone (the head moved between them).

    ``ri``/``uncertainty`` at 589.3 nm (None when no reading), ``method``
    (``'half_dark_fit'`` or ``'single_split'``), ``used``: names of
    the photos that counted, ``reason`` when there is no reading, ``flags``.
    """

    status: str
    ri: float | None
    uncertainty: float | None
    method: str | None
    used: tuple[str, ...]
    reason: str | None = None
    flags: tuple[str, ...] = ()
    figures: dict = field(default_factory=dict)

    def edge(self) -> Edge | None:
        """The reading as an Edge of kind ``"spot"`` (None without a reading)."""
        if self.ri is None:
            return None
        sp = self.figures.get("half_dark_scale", float("nan"))
        return Edge(ri=self.ri, uncertainty=float(self.uncertainty), kind="spot", scale_position=float(sp),
                    scale_uncertainty=float(self.figures.get("half_dark_scale_uncertainty", float("nan"))),
                    contrast=0.0)


def read_spot_series(readings: Sequence[PhotoReading], instrument: Instrument | None = None,
                     calibration=None) -> SpotSeriesReading:
    """Where the spot is half dark, from several spot photos of one stone.

    Each photo gives the spot's centre (scale units) and the dark fraction of
    its length; the centre at which the dark fraction is one half is found by
    a least-squares straight line through the photos showing a split (the
    dark fraction falls linearly as the spot moves up the scale), or, with one
    such photo (or photos too close together), from their centres and
    fractions.  Photos with a wholly light spot do not bound the answer here
    (a wholly dark spot is too faint to be found); without a split there is
    no reading.
    """
    inst = instrument or DEFAULT
    pts, names, light_only = [], [], []
    for r in readings:
        f = r.quality.figures if r.quality else {}
        c, frac = f.get("spot_centre_scale"), f.get("dark_fraction")
        if c is None or frac is None or r.status == "rejected" or FLAG not in r.quality.flags:
            continue
        if r.status == "ok":
            pts.append((float(c), float(frac), float(f.get("spot_length_scale") or 0.0)))
            names.append(r.photo)
        else:
            light_only.append((float(c), float(frac), r.photo))
    figures: dict = {}
    if len(pts) >= 2 and np.ptp([p[0] for p in pts]) > 0.2:
        c = np.array([p[0] for p in pts])
        fr = np.array([p[1] for p in pts])
        slope, icpt = np.polyfit(c, fr, 1)
        if slope < 0:
            half = (0.5 - icpt) / slope
            resid = fr - (slope * c + icpt)
            s_unc = float(np.sqrt(np.sum(resid**2) / max(len(c) - 2, 1)) / abs(slope)) if len(c) > 2 else 0.0
            method = "half_dark_fit"
        else:
            half, s_unc, method = None, None, None
    else:
        half = s_unc = method = None
    if half is None and pts:
        # the spot's centre plus the offset of its split from the middle
        est = [c + (fr - 0.5) * length for c, fr, length in pts]
        half, s_unc, method = float(np.mean(est)), float(np.std(est)) if len(est) > 1 else 0.0, "single_split"
    if half is None:
        return SpotSeriesReading("no_edge", None, None, None, tuple(p for *_, p in light_only),
                                 reason="no photo of the series shows the spot's split", flags=(FLAG,))
    scale_unc = math.hypot(SPOT_PRECISION / inst.step, s_unc or 0.0)
    figures.update(half_dark_scale=float(half), half_dark_scale_uncertainty=scale_unc, photos=len(pts))
    if calibration is not None:
        ri, unc, eflags = calibration.scale_to_ri(half, scale_unc)
        unc = max(unc, SPOT_PRECISION)
    else:
        ri, unc, eflags = inst.value(half), scale_unc * inst.step, ()
    return SpotSeriesReading("ok", round(float(ri), 3), float(unc), method, tuple(names),
                             flags=(FLAG, *eflags), figures=figures)
