"""Stage 6: compose the stages into one reading of one photo (:func:`read_photo`).

photo file -> load -> field circle -> axis and field frame -> graduation column
-> brightness profile -> direction (dark side = low index) -> graduations and
their values -> shadow edges on the value axis -> RI (nominal or calibrated)
-> quality flags -> :class:`critline.readings.PhotoReading`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import cv2
import numpy as np

from critline.instrument import DEFAULT, Instrument
from critline.photo.edges import LIQUID_DRIFT, analyse_profile
from critline.photo.field import find_field
from critline.photo.frame import AxisEstimate, axis_angle, make_frame
from critline.photo.graduations import (
    MIN_PERIODICITY,
    GraduationsNotFound,
    find_column,
    find_graduations,
    normalised,
)
from critline.photo.load import (
    LoadedPhoto,
    PhotoRejected,
    decode,
    load_photo,
    srgb_to_linear,
    to_float,
)
from critline.photo.profile import Profile, brightness_profile
from critline.photo.vignetting import find_crescent
from critline.photo.whitelight import calibration_light_refusal, prism_glass
from critline.photo.whitelight import reading_summary as white_light_summary
from critline.readings import Edge, PhotoReading, Quality, rejected

#: Field diameter (pixels) wanted in the working image; decoding is reduced while it stays above.
WORK_DIAMETER = 560
#: Largest field diameter (pixels) of the working image: larger fields are shrunk to it.
WORK_DIAMETER_MAX = 800.0
#: Short side (pixels) wanted for finding the field.
COARSE_SHORT = 300
#: Field diameter (pixels) below which the working image is decoded afresh at a smaller reduction
#: instead of shrunk from the photo's one decode (see :func:`_base_reduction`).
MIN_WORK_DIAMETER = 360
#: Smallest field diameter (pixels) the one decode keeps for the smallest field of the envelope;
#: such a field, below :data:`MIN_WORK_DIAMETER`, gets the second decode.
BASE_MIN_DIAMETER = 280

#: Systematic geometry term (graduation units) added in quadrature: perspective and resampling
#: effects the fitted figures do not see (sized on the tuning seeds, below 10000).
GEOMETRY_FLOOR = 0.03
#: Edge blur (sigma, scale value units for a 0.01 step) above which a reading is flagged blurred.
BLURRED_WIDTH = 0.004
#: Stone-edge contrast below which a reading is flagged low_contrast.
LOW_CONTRAST = 0.1

#: Flags that mean the reading is degraded (the bench counts these); the others are informative.
DEGRADING = ("blurred", "low_contrast", "graduations_partly_found", "white_light", "low_resolution",
             "identification_weak", "clipped_highlights", "map_extrapolated", "channel_clipped")
#: Flags of the 1-D edge analysis replaced by the reader's own definition.
_OWN_FLAGS = ("blurred",)


def _reduce_for(size: float, want: float) -> int:
    for r in (8, 4, 2):
        if size / r >= want:
            return r
    return 1


def _base_reduction(width: int, height: int) -> int:
    """Reduction of the one decode a photo gets, from its size alone.

    Decoding a JPEG costs about the same at any reduction (entropy decoding is
    most of it), so a photo is decoded once, as small as keeps the smallest
    field the envelope allows (25 % of the short side) at
    :data:`BASE_MIN_DIAMETER` pixels, and the coarse and working images are
    shrunk from it.
    """
    return _reduce_for(0.25 * min(width, height), BASE_MIN_DIAMETER)


def _best_column(dark, dark_abs, frame, inst: Instrument):
    """The more periodic of the graduation columns found on absolute and relative darkness.

    Absolute darkness favours the bright part (best signal to noise), relative darkness counts
    the lines in the dark part as much.  None when the field cannot hold graduations.
    """
    try:
        col_abs = find_column(dark_abs, frame.inside, frame.radius, inst.count)
        col_rel = find_column(dark, frame.inside, frame.radius, inst.count)
    except GraduationsNotFound:
        return None
    return col_abs if col_abs.periodicity >= col_rel.periodicity else col_rel


def _base_image(photo: LoadedPhoto) -> tuple[np.ndarray, int]:
    """The photo's one decode (stored RGB integers) and its reduction."""
    rb = _base_reduction(photo.width, photo.height)
    return decode(photo, rb, raw=True), rb


def _coarse_grey(photo: LoadedPhoto, base: np.ndarray, rb: int) -> tuple[np.ndarray, int]:
    """Grey image for finding the field (float 0..1, about :data:`COARSE_SHORT` on the short side)."""
    rc = max(_reduce_for(min(photo.width, photo.height), COARSE_SHORT), rb)
    return to_float(_shrink(cv2.cvtColor(base, cv2.COLOR_RGB2GRAY), rc // rb)), rc


@dataclass(frozen=True)
class _Working:
    """The working image's part around the field (see :func:`_working_rgb`)."""

    #: stored integers (uint8 or uint16), RGB
    rgb: np.ndarray
    #: reduction against the photo (a float when shrunk by a fractional factor)
    reduce: float
    #: working-image point ``(x, y)`` of ``rgb``'s pixel (0, 0)
    origin: tuple[float, float]
    #: the whole working image's shape (rows, columns)
    shape: tuple[int, int]


def _working_rgb(photo: LoadedPhoto, circle, base: np.ndarray, rb: int) -> _Working:
    """Working image around the field, its reduction and where it lies in the whole working image.

    The field is shrunk to :data:`WORK_DIAMETER_MAX` across when larger, kept as decoded down to
    :data:`MIN_WORK_DIAMETER`, and below that decoded again at a reduction that keeps it at least
    :data:`WORK_DIAMETER` across where the photo allows.  Only the part of the image the later
    stages look at is kept (:func:`_field_box`); its points map back to the photo as any working
    point does (``x_full = (x + 0.5) * rw - 0.5``, ``x`` counted from the whole image's corner).
    """
    across = 2 * circle.r / rb  # field diameter in the decoded image
    if across > WORK_DIAMETER_MAX:
        # area averaging by a fractional factor: cv2.resize given fx keeps that exact scale, so
        # pixel centres map back as for an integer reduction, from the crop's corner on: pixel i
        # of the shrunk crop covers decoded pixels [x0 + i f, x0 + (i + 1) f), working x0 / f + i
        f = across / WORK_DIAMETER_MAX
        x0, y0, x1, y1 = _field_box(circle, rb, base.shape)
        # the crop's corner moved out to where the shrunk pixels' grid (nearly) meets the whole
        # image's: the same area averages as shrinking the whole image, at a fraction of the cost
        x0, y0 = _on_grid(x0, f), _on_grid(y0, f)
        crop = cv2.resize(base[y0:y1, x0:x1], None, fx=1.0 / f, fy=1.0 / f, interpolation=cv2.INTER_AREA)
        shape = (int(round(base.shape[0] / f)), int(round(base.shape[1] / f)))
        return _Working(crop, rb * f, (x0 / f, y0 / f), shape)
    img, rw = base, rb
    if across < MIN_WORK_DIAMETER and rb > 1:
        rw = _reduce_for(2 * circle.r, WORK_DIAMETER)
        img = decode(photo, rw, raw=True)  # a small field: worth a second, larger decode
    x0, y0, x1, y1 = _field_box(circle, rw, img.shape)
    return _Working(img[y0:y1, x0:x1], rw, (float(x0), float(y0)), img.shape[:2])


#: Half-width of the part of the photo kept around the field, in field radii: the field stop's
#: refinement samples out to 1.2 radii (:func:`critline.photo.field.refine_stop`); the field
#: frame's square corners beyond it are outside the stop and read as beyond the photo.
FIELD_BOX = 1.2


def _on_grid(start: int, f: float, reach: int = 48) -> int:
    """The integer at most ``start`` (and ``reach`` below it, not below 0) nearest to a multiple of ``f``."""
    cand = np.arange(max(0, start - reach), start + 1)
    q = cand / f
    return int(cand[np.argmin(np.abs(q - np.round(q)))])


def _field_box(circle, reduce: float, shape) -> tuple[int, int, int, int]:
    """Pixel box ``(x0, y0, x1, y1)`` of an image at 1/``reduce`` size holding the field's
    neighbourhood (:data:`FIELD_BOX` radii and a few pixels for interpolation), within the image."""
    cx, cy, r = (circle.cx - (reduce - 1) / 2) / reduce, (circle.cy - (reduce - 1) / 2) / reduce, circle.r / reduce
    m = FIELD_BOX * r + 4
    h, w = shape[:2]
    return (max(0, int(np.floor(cx - m))), max(0, int(np.floor(cy - m))),
            min(w, int(np.ceil(cx + m)) + 1), min(h, int(np.ceil(cy + m)) + 1))


def _shrink(arr: np.ndarray, factor: int) -> np.ndarray:
    """``arr`` reduced by an integer factor by area averaging (the last partial block dropped)."""
    if factor <= 1:
        return arr
    h, w = arr.shape[0] // factor * factor, arr.shape[1] // factor * factor
    return cv2.resize(arr[:h, :w], (w // factor, h // factor), interpolation=cv2.INTER_AREA)


def _analyse(values, brightness, noise, liquid_ri, rgb, prism_index=1.88, glass=None):
    """Stage 5: the edges helper's 1-D analysis of the profile (critline.photo.edges)."""
    return analyse_profile(values, brightness, noise, liquid_ri=liquid_ri, prism_index=prism_index, rgb=rgb,
                           glass=glass)


@dataclass(frozen=True)
class _NoEdges:
    """Analysis result standing for "no stone edge" when the profile's features cannot be placed."""

    light: str = "unknown"
    flags: tuple = ()
    edges: tuple = ()
    status: str = "no_edge"
    figures: dict = field(default_factory=dict)


#: Periodicity a column must reach on the axis turned by a right angle to be taken instead.
TURNED_AXIS_PERIODICITY = 3.0

#: Over the limit with the liquid's edge beyond the profile: the scale's brightest part
#: (90th percentile of row means) at most this fraction of the field's level beyond the liquid's zone.
DARK_SCALE_RATIO = 0.5


def _bright_only_beyond(frame, grads, inst: Instrument) -> dict | None:
    """Whole-field evidence of over the limit when the profile ends before the liquid's edge.

    Over the limit the field is dark up to the contact liquid's edge; when that edge lies
    where the profile beside the graduations no longer reaches (the scale's end near the
    field stop), the profile shows a dark field and no step.  The mean linear brightness of
    each frame row across the whole field, placed on the scale by the graduation map
    (extrapolated a few graduations further than the profile is), tells the two apart: over
    the limit the scale below the liquid's zone is dark next to the field beyond it.

    Returns the figures (``scale_level``, ``beyond_level``) when the field is over the
    limit by this test, else None.
    """
    lin = srgb_to_linear(frame.grey)
    inside = frame.inside
    counts = inside.sum(axis=1)
    rows = np.flatnonzero(counts >= max(0.2 * frame.radius, 5))
    if rows.size < 20:
        return None
    means = (lin * inside).sum(axis=1)[rows] / counts[rows]
    values = inst.first + inst.step * grads.index_of(rows.astype(float))
    ok = np.isfinite(values) & (values <= inst.last + 10 * inst.step)
    values, means = values[ok], means[ok]
    liquid = inst.liquid_ri if inst.liquid_ri is not None else 1.79
    zone_lo = liquid - LIQUID_DRIFT[0]
    scale = means[(values >= inst.first) & (values <= zone_lo - inst.step)]
    beyond = means[values >= zone_lo]
    if scale.size < 20 or beyond.size < 3:
        return None
    scale_level, beyond_level = float(np.percentile(scale, 90)), float(np.percentile(beyond, 90))
    if not scale_level <= DARK_SCALE_RATIO * beyond_level:
        return None
    # where the field turns bright: the rise to half-way must lie in the liquid's zone, not
    # below it (a stone's edge the profile missed)
    order = np.argsort(values)
    values, means = values[order], means[order]
    top = int(np.argmax(means))
    dim = np.flatnonzero(means[:top] < 0.5 * (scale_level + beyond_level))
    onset = float(values[dim[-1] + 1]) if dim.size else float(values[0])
    if onset < zone_lo - 0.5 * inst.step:
        return None
    return {"scale_level": scale_level, "beyond_level": beyond_level, "bright_from": onset}


#: An edge whose rows are seen, in this share of the profile's columns or more, through a
#: vignetting crescent's divided-out dimming is read from the plain profile instead: the
#: transmission curve is estimated, and at such edges it moved readings by up to 0.004 and made
#: false edges of the crescent's ramp (tuning seeds 100000-100199, 110000-110199, 120000-120199).
VIGNETTED_EDGE_SHARE = 0.4


def _oriented(prof: Profile, flip: bool, n: int) -> Profile:
    """The profile with its rows in the frame whose values increase down the rows."""
    if not flip:
        return prof
    return Profile((n - 1) - prof.rows[::-1], prof.brightness[::-1], prof.noise[::-1], prof.rgb[:, ::-1],
                   prof.columns, prof.tilt, prof.figures,
                   None if prof.blocks is None else prof.blocks[:, ::-1],
                   None if prof.vignetted is None else prof.vignetted[::-1])


def _edge_analysis(prof: Profile, grads, inst: Instrument, glass):
    """Edges of a profile on the graduation map: (analysis, values, brightness, rows used)."""
    idx = grads.index_of(prof.rows)
    # the map is trusted a few graduations beyond the scale's ends, not further
    ok = np.isfinite(idx) & np.isfinite(prof.brightness) & (idx > -5) & (idx < inst.count - 1 + 4)
    if ok.sum() < 20:
        raise PhotoRejected("brightness profile too short")
    bright, noise, rgb_p = prof.brightness[ok], prof.noise[ok], prof.rgb[:, ok]
    values = inst.first + inst.step * idx[ok]
    try:
        analysis = _analyse(values, bright, noise, inst.liquid_ri, rgb_p, glass=glass)
    except (ValueError, FloatingPointError, np.linalg.LinAlgError, RuntimeError):
        # once more on a window ending one graduation above the scale (the fit is more
        # fragile far beyond it)
        keep = values <= inst.last + inst.step
        values, bright, noise, rgb_p = values[keep], bright[keep], noise[keep], rgb_p[:, keep]
        ok = ok.copy()
        ok[np.flatnonzero(ok)[~keep]] = False
        try:
            analysis = _analyse(values, bright, noise, inst.liquid_ri, rgb_p, glass=glass)
        except (ValueError, FloatingPointError, np.linalg.LinAlgError, RuntimeError) as exc:
            raise PhotoRejected(f"edge analysis failed ({type(exc).__name__}: {exc})") from None
    return analysis, values, bright, ok


def _vignetted_share(analysis, prof: Profile, values, ok, period: float) -> float:
    """Largest share of columns seen through a crescent's divided-out dimming at a stone edge."""
    if prof.vignetted is None:
        return 0.0
    share = 0.0
    for e in analysis.edges:
        if e.kind != "stone":
            continue
        row = float(np.interp(e.value, values, prof.rows[ok]))
        near = np.abs(prof.rows - row) <= max(3.0, 2 * period)
        if near.any():
            share = max(share, float(prof.vignetted[near].max()))
    return share


def _dominant_step(profile: Profile, period: float, half: int, radius: float, lo=None, hi=None, reach=0.85):
    """Sign and relative size of the main brightness step along the rows (within lo..hi).

    Candidates are the strongest rise and the strongest fall of the smoothed
    profile inside 0.85 of the field radius.  A shadow edge runs straight
    across the whole field; a vignetting crescent's boundary is curved and
    partial: each candidate is weighted by the share of column blocks that
    show the same step at the same row (within two graduation spacings).
    """
    rows, b = profile.rows, profile.brightness
    if len(rows) < 20:
        return None, 0.0
    sig = max(1.5, 1.5 * period)
    grid = np.arange(rows.min(), rows.max() + 1)
    bi = np.interp(grid, rows, b).astype(np.float32)
    sm = cv2.GaussianBlur(bi.reshape(-1, 1), (1, 0), sigmaX=0, sigmaY=sig).ravel()
    d = np.gradient(sm)
    inner = np.abs(grid - half) < reach * radius
    if lo is not None:
        inner &= (grid >= lo) & (grid <= hi)
    d = np.where(inner, d, 0)
    # steps are measured against the brightest part of the whole field (not only the window):
    # a gentle gradient in an all-dark window must not look like a shadow edge
    body = np.abs(grid - half) < 0.95 * radius
    top = float(np.nanpercentile(bi[body], 95)) if body.any() else float(np.max(bi))
    if top <= 0:
        return None, 0.0
    best = None
    for i in (int(np.argmax(d)), int(np.argmin(d))):
        if d[i] == 0:
            continue
        w = int(min(3 * sig, i, len(sm) - 1 - i))
        if w < 1:
            continue
        rel = (sm[i + w] - sm[i - w]) / top
        agree = _block_agreement(profile, grid[i], np.sign(d[i]), sig, period)
        score = abs(rel) * (0.25 + agree)
        if best is None or score > best[0]:
            best = (score, rel, agree)
    if best is None:
        return None, 0.0
    return bool(best[1] > 0), float(abs(best[1]))


def _block_agreement(profile: Profile, row: float, sign: float, sig: float, period: float) -> float:
    """Share of column blocks whose own steepest step of this sign lies within 2 spacings of row."""
    if profile.blocks is None or len(profile.blocks) == 0:
        return 0.5
    rows = profile.rows
    win = (rows > row - 6 * sig) & (rows < row + 6 * sig)
    if win.sum() < 5:
        return 0.5
    hits = 0
    for blk in profile.blocks:
        seg = blk[win]
        if not np.isfinite(seg).all():
            continue
        g = np.gradient(cv2.GaussianBlur(seg.astype(np.float32).reshape(-1, 1), (1, 0), sigmaX=0,
                                         sigmaY=sig).ravel())
        j = int(np.argmax(sign * g))
        if sign * g[j] > 0 and abs(rows[win][j] - row) < max(2 * period, 3.0):
            hits += 1
    return hits / len(profile.blocks)


def read_photo(path, instrument: Instrument | None = None, calibration=None, overlay_dir=None) -> PhotoReading:
    """Read one eyepiece photo into RI readings.

    Never raises for a bad photo: unusable photos come back with status
    ``rejected`` and a one-line reason.

    Parameters
    ----------
    path : path-like
        The photo (JPEG, PNG, TIFF or HEIC).
    instrument : Instrument, optional
        The scale description; :data:`critline.instrument.DEFAULT` if None.
    calibration : critline.calibration.Calibration, optional
        Maps scale positions (and field positions) to RI; nominal values without it.
    overlay_dir : path-like, optional
        Where to write the marked-up photo (never overwriting a file).
    """
    inst = instrument or DEFAULT
    name = str(path)
    try:
        photo = load_photo(path)
    except PhotoRejected as exc:
        return rejected(name, _sha_or_empty(path), str(exc))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows outside the field
            result, evidence = _read_loaded(photo, name, inst, calibration)
    except PhotoRejected as exc:
        result, evidence = rejected(name, photo.sha256, str(exc)), None
    except (MemoryError, cv2.error, ValueError, np.linalg.LinAlgError) as exc:
        result, evidence = rejected(name, photo.sha256, f"could not be analysed ({type(exc).__name__})"), None
    if result.status in ("no_edge", "rejected") and evidence and evidence.get("circle") is not None:
        # A spot (distance) view shows no shadow edge across the field; only then is the
        # spot detector asked, so a flat-facet reading never pays for it nor turns into one.
        from critline.photo.spot import might_be_spot_view, read_spot_view

        frame = evidence.get("frame")
        spot = None
        if frame is None or might_be_spot_view(frame):
            spot = read_spot_view(photo, evidence["circle"], inst, calibration, name)
        if spot is not None:
            result = spot
    if overlay_dir is not None:
        from critline.photo.overlay import write_overlay
        try:
            write_overlay(photo, result, evidence, overlay_dir, name)
        except (OSError, cv2.error, PhotoRejected):
            pass  # evidence is best effort: the reading itself stands
    return result


def _sha_or_empty(path) -> str:
    import hashlib
    try:
        return hashlib.sha256(Path(path).read_bytes()).hexdigest()
    except OSError:
        return ""


def _read_loaded(photo: LoadedPhoto, name: str, inst: Instrument, calibration):
    base, rb = _base_image(photo)
    coarse, rc = _coarse_grey(photo, base, rb)
    fr = find_field(coarse, rc)
    del coarse
    if fr.circle is None:
        raise PhotoRejected(fr.reason)
    circle = fr.circle
    work = _working_rgb(photo, circle, base, rb)
    del base
    rgb, rw, origin, shape = work.rgb, work.reduce, work.origin, work.shape
    wcx, wcy, wr = (circle.cx - (rw - 1) / 2) / rw, (circle.cy - (rw - 1) / 2) / rw, circle.r / rw
    grey_w = cv2.cvtColor(rgb, cv2.COLOR_RGB2GRAY)
    axis = axis_angle(grey_w, wcx - origin[0], wcy - origin[1], wr)
    frame = make_frame(rgb, wcx, wcy, wr, axis.angle, rw, origin=origin, shape=shape)
    dark, dark_abs = normalised(frame.grey, frame.inside, frame.radius, relative="both")
    col = _best_column(dark, dark_abs, frame, inst)
    if col is None or col.periodicity < MIN_PERIODICITY:
        # the gradient orientation can lock onto structure along the scale (a crescent's rim,
        # motion blur); graduations across the other way are worth one more look
        turned = make_frame(rgb, wcx, wcy, wr, axis.angle + np.pi / 2, rw, origin=origin, shape=shape)
        dark2, dark_abs2 = normalised(turned.grey, turned.inside, turned.radius, relative="both")
        col2 = _best_column(dark2, dark_abs2, turned, inst)
        # a second try at a found column must be well clear of the threshold: scikit-image's
        # rocket photograph passes at 2.1 turned, an eyepiece view with its axis mistaken by
        # a right angle scores about 5 (held-out seed 110066)
        if col2 is not None and col2.periodicity >= TURNED_AXIS_PERIODICITY and (
                col is None or col2.periodicity > col.periodicity):
            frame, dark, dark_abs, col = turned, dark2, dark_abs2, col2
            axis = AxisEstimate(float(axis.angle + np.pi / 2), axis.coherence)
    del rgb, grey_w
    evidence = {"circle": circle, "axis": axis, "frame": frame, "first": inst.first, "step": inst.step}
    figures: dict = {"field_radius_px": circle.r, "field_support": circle.support,
                     "field_in_frame": circle.inside_frame, "axis_coherence": axis.coherence,
                     "working_reduction": rw}
    flags: list[str] = []
    if circle.clipped:
        flags.append("field_clipped")
    if col is None:
        reason = "field too small to hold graduations"
        return _no_graduations(photo, name, reason, figures, flags, calibration, frame, circle, inst), evidence
    exclude = int(max(0.35 * frame.radius, 3 * (col.v_hi - col.v_lo + 1)))
    # a vignetting crescent's curved boundary is no shadow edge: its dimming is divided out
    crescent = find_crescent(frame)
    if crescent is not None:
        figures.update({"crescent_share": crescent.share, "crescent_dark_ratio": crescent.dark_ratio})
        evidence["crescent"] = crescent
        evidence["crescent_frame"] = frame  # its circle is in this frame's pixels (before any flip)
    prof = brightness_profile(frame, col.v_lo, col.v_hi, exclude, col.period, crescent=crescent)
    profile_frame = frame  # the profiles' frame (find_graduations may return it flipped)
    decided = {}

    def direction(lo, hi):
        down, step = _dominant_step(prof, col.period, frame.half, frame.radius, lo, hi)
        if step < 0.15:
            # no clear step along the scale: over the limit the bright side can lie beyond the
            # scale's end, out toward the field stop
            down2, step2 = _dominant_step(prof, col.period, frame.half, frame.radius, reach=0.95)
            if step2 > max(2 * step, 0.1):
                down, step = down2, step2
        decided["down"] = None if step < 0.03 else down
        figures["direction_step"] = step
        return decided["down"]

    try:
        grads, frame = find_graduations(frame, inst, dark, col, direction)
    except GraduationsNotFound as exc:
        return _no_graduations(photo, name, str(exc), figures, flags, calibration, frame, circle, inst), evidence
    evidence["frame"] = frame
    evidence["graduations"] = grads
    n = frame.grey.shape[0]
    flip = decided.get("down") is False
    # the instrument's prism glass (its dispersion formula) for a white-light reading
    glass = prism_glass(inst) if getattr(inst, "prism_glass", None) else None
    prof = _oriented(prof, flip, n)
    analysis, values, bright, ok = _edge_analysis(prof, grads, inst, glass)
    if crescent is not None and _vignetted_share(analysis, prof, values, ok, col.period) >= VIGNETTED_EDGE_SHARE:
        # an edge seen mostly through the crescent: the divided-out dimming is not trusted there
        plain = brightness_profile(profile_frame, col.v_lo, col.v_hi, exclude, col.period)
        prof = _oriented(plain, flip, n)
        analysis, values, bright, ok = _edge_analysis(prof, grads, inst, glass)
        figures["crescent_divided_out"] = False
    figures.update(grads.figures)
    figures.update(prof.figures)
    flags.extend(grads.flags)
    evidence["profile"] = (values, bright)
    evidence["analysis"] = analysis
    refusal = calibration_light_refusal(calibration, getattr(analysis, "light", "unknown"))
    if refusal:
        raise PhotoRejected(refusal)
    if "direction_undetermined" in flags and analysis.edges:
        if max(float(getattr(e, "contrast", 1.0)) for e in analysis.edges) >= LOW_CONTRAST:
            raise PhotoRejected("scale direction undetermined (no clear dark side) but an edge-like feature found")
        # only faint features and no side darker than the other: no stone edge, and no value for the
        # faint feature since the direction of the scale is not known
        analysis = _NoEdges(getattr(analysis, "light", "unknown"), tuple(getattr(analysis, "flags", ())))
    if analysis.status == "no_edge" and not analysis.edges and decided.get("down") is not None:
        beyond = _bright_only_beyond(frame, grads, inst)
        if beyond is not None:
            # no step on the profile, but the whole field is dark up to the liquid's zone
            figures.update({f"over_limit_{k}": v for k, v in beyond.items()})
            flags.append("liquid_edge_beyond_profile")
            analysis = _NoEdges(getattr(analysis, "light", "unknown"), tuple(getattr(analysis, "flags", ())),
                                status="over_limit")
    # quality figures
    top = float(np.percentile(bright, 95))
    clipped = float(np.mean(frame.grey[frame.inside] > 0.985)) if frame.inside.any() else 0.0
    figures["clipped_fraction"] = clipped
    figures["spacing_px_full"] = col.period * frame.reduce
    if clipped > 0.05:
        flags.append("clipped_highlights")
    if col.period * frame.reduce < 3.5:
        flags.append("low_resolution")
    if abs(prof.tilt) > 0.05:
        flags.append("edge_tilted")
    flags.extend(f for f in getattr(analysis, "flags", ()) if f not in flags and f not in _OWN_FLAGS)
    edges = []
    stone_widths: list[float] = []
    stone_contrasts: list[float] = []
    step_val = inst.step
    for e in analysis.edges:
        row = float(np.interp(e.value, values, prof.rows[ok]))
        k_unc = float(grads.index_uncertainty(row))
        # the edge's own straightness across the field: scatter of its row between column blocks
        rows_per_index = abs(float(np.polynomial.polynomial.polyval(
            e.value / step_val - inst.first / step_val, np.polynomial.polynomial.polyder(grads.coef))))
        k_straight = prof.figures.get("edge_row_scatter", 0.0) / max(rows_per_index, 1e-6)
        scale_pos = (e.value - inst.first) / step_val
        scale_unc = math.sqrt((e.uncertainty / step_val) ** 2 + k_unc ** 2 + k_straight ** 2
                              + GEOMETRY_FLOOR ** 2)
        # where the edge sits on the field stop, for a calibration's field-frame map: only from a
        # refined stop seen well enough (a coarse circle or a short arc put it 0.24-0.40 radii off)
        u = float(frame.field_position(row)) if _stop_placed(frame) else None
        eflags: tuple[str, ...] = ()
        if calibration is not None:
            ri, unc, eflags = calibration.scale_to_ri(scale_pos, scale_unc)
        else:
            ri, unc = inst.value(scale_pos), scale_unc * step_val
        edges.append(Edge(ri=float(ri), uncertainty=float(max(unc, 1e-4)), kind=e.kind,
                          scale_position=float(scale_pos), scale_uncertainty=float(scale_unc),
                          contrast=float(np.clip(e.contrast, 0, 1)), field_position=u,
                          flags=tuple(eflags)))
        if e.kind == "stone" and not (grads.indices.min() - 2 <= scale_pos <= grads.indices.max() + 2):
            if "map_extrapolated" not in flags:
                flags.append("map_extrapolated")
        if e.kind == "stone":
            stone_widths.append(float(getattr(e, "width", 0.0)))
            stone_contrasts.append(float(getattr(e, "contrast", 1.0)))
    edges.sort(key=lambda e: e.ri)
    if stone_widths:
        figures["edge_width"] = max(stone_widths)
        figures["edge_contrast"] = min(stone_contrasts)
        if max(stone_widths) > BLURRED_WIDTH * inst.step / 0.01:
            flags.append("blurred")
        if min(stone_contrasts) < LOW_CONTRAST:
            flags.append("low_contrast")
    light = getattr(analysis, "light", "unknown")
    if light == "white" and "white_light" not in flags:
        flags.append("white_light")
    if light == "white":
        figures.update(white_light_summary(analysis))  # 589.3 nm reading, yellow-green boundary beside it
    status = analysis.status
    figures["profile_top"] = top
    quality = Quality(tuple(dict.fromkeys(flags)), figures)
    prof_out = (tuple(float(x) for x in (values - inst.first) / step_val),
                tuple(float(y) for y in bright / max(top, 1e-6)))
    reading = PhotoReading(photo=name, sha256=photo.sha256, status=status, reason=None,
                           edges=tuple(edges), light=light, mode="graduations", quality=quality,
                           profile=_thin(prof_out), field_circle=(circle.cx, circle.cy, circle.r))
    return reading, evidence


def _thin(profile, max_points=400):
    xs, ys = profile
    if len(xs) <= max_points:
        return profile
    sel = np.linspace(0, len(xs) - 1, max_points).astype(int)
    return tuple(xs[i] for i in sel), tuple(ys[i] for i in sel)


#: Standard uncertainty (field radii) of a field position measured on the refined field stop,
#: besides the parts the frame states (:meth:`FieldFrame.position_sigma`: the stop's fit and the
#: phone's tilt): the edge's row, and the outline's biases the fit's scatter does not show (a
#: circle fitted to part of a tilted stop's elliptical outline, a crescent's ramp beside it).
#: Sized on tuning seeds (setups 20000-20069, photos 200500-200569, true field map: 47 of the
#: 48 field-frame readings within 2 sigma; field-position error p95 0.037 radii, chiefly the tilt).
FIELD_POSITION_SIGMA = 0.010
#: Smallest fraction of the field stop's circumference whose edge must be seen for a field-frame
#: reading.  A crescent (the phone off the eyepiece's axis) or the shadow's dark half can hide
#: the rest; a circle through a short arc, or the coarse circle alone, was off by 0.05 to 0.6
#: field radii on tuning seeds, beyond what its uncertainty says.
MIN_STOP_SEEN = 1 / 6


def _stop_placed(frame) -> bool:
    """Whether the field stop is refined and seen enough to place an edge on it."""
    return frame.stop is not None and frame.stop_seen >= MIN_STOP_SEEN


def _no_graduations(photo, name, reason, figures, flags, calibration, frame, circle, inst):
    """Graduations failed: a field-frame reading when the calibration has a field-frame map
    (edge position relative to the field circle -> RI), else rejected with the reason.

    The reading says so: ``mode`` is ``field_frame`` and its flags carry ``field_frame`` and
    ``lower_precision``; each edge's uncertainty includes the field position's own: the stop's fit
    and the phone's unknown tilt (:meth:`FieldFrame.position_sigma`) and :data:`FIELD_POSITION_SIGMA`.
    Rejected when too little of the field stop's outline is seen to place the edge on it
    (:data:`MIN_STOP_SEEN`).
    """
    if calibration is None or getattr(calibration, "field_map", None) is None:
        return rejected(name, photo.sha256, reason)
    if not _stop_placed(frame):
        return rejected(name, photo.sha256, reason + f"; field stop's outline seen on only {frame.stop_seen:.0%} "
                        "of its circumference, too little for a field-frame reading")
    # no graduation column known: the profile over the central columns (the median ignores the
    # graduations and labels, which are thin)
    prof = brightness_profile(frame, frame.half, frame.half - 1, 0, max(2.0, frame.radius / 40))
    down, step = _dominant_step(prof, max(2.0, frame.radius / 40), frame.half, frame.radius)
    if down is None or step < 0.03:
        return rejected(name, photo.sha256, reason + "; no shadow edge for a field-frame reading either")
    sign = 1.0 if down else -1.0
    fpos = sign * frame.field_position(prof.rows)  # positive toward higher values
    order = np.argsort(fpos)
    fpos, bright, noise, rgb_p = fpos[order], prof.brightness[order], prof.noise[order], prof.rgb[:, order]
    inside = np.abs(fpos) < 0.95
    fpos, bright, noise, rgb_p = fpos[inside], bright[inside], noise[inside], rgb_p[:, inside]
    try:
        ri_axis = np.array([calibration.field_to_ri(float(f), 0.0)[0] for f in fpos])
    except Exception:
        return rejected(name, photo.sha256, reason)
    if len(ri_axis) < 20 or np.any(np.diff(ri_axis) <= 0):
        return rejected(name, photo.sha256, reason + "; field-frame map not monotone here")
    try:
        analysis = _analyse(ri_axis, bright, noise, inst.liquid_ri, rgb_p)
    except (ValueError, FloatingPointError, np.linalg.LinAlgError, RuntimeError):
        return rejected(name, photo.sha256, reason)
    refusal = calibration_light_refusal(calibration, getattr(analysis, "light", "unknown"))
    if refusal:
        return rejected(name, photo.sha256, refusal)
    slope = np.gradient(ri_axis, fpos)
    edges = []
    for e in analysis.edges:
        f = float(np.interp(e.value, ri_axis, fpos))
        f_fit = float(e.uncertainty / max(np.interp(f, fpos, slope), 1e-9))
        f_unc = math.hypot(f_fit, float(frame.position_sigma(sign * f)), FIELD_POSITION_SIGMA)
        ri, unc, eflags = calibration.field_to_ri(f, f_unc)
        edges.append(Edge(ri=float(ri), uncertainty=float(max(unc, 1e-4)), kind=e.kind,
                          scale_position=float("nan"), scale_uncertainty=float("nan"),
                          contrast=float(np.clip(e.contrast, 0, 1)), field_position=f, flags=tuple(eflags)))
    edges.sort(key=lambda e: e.ri)
    flags = list(flags) + ["field_frame", "lower_precision"]
    figures = dict(figures, graduations_failure=reason)
    return PhotoReading(photo=name, sha256=photo.sha256, status=analysis.status, reason=None,
                        edges=tuple(edges), light=getattr(analysis, "light", "unknown"), mode="field_frame",
                        quality=Quality(tuple(dict.fromkeys(flags)), figures),
                        field_circle=(circle.cx, circle.cy, circle.r))
