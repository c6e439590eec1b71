"""From a manifest of reference photos to a calibration: checks, reading, pairing, fit.

The manifest is CSV with the header ``photo,known_ri`` (optional ``material``),
photo paths relative to the manifest's folder; a photo showing two stone
edges appears on two rows.  ``known_ri`` is a number or a key of the
reference table (``calibration/references.csv``).

Every problem with the input is a :class:`CalibrationError` with one line
naming the file and the reason, raised before anything is written.
"""

from __future__ import annotations

import csv
import hashlib
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path

from critline.calibration.fitting import (
    MIN_SPAN,
    SCALE_MODEL_MIN_REFS,
    SCALE_MODELS,
    CalibrationError,
    CalibrationFit,
    ReferencePair,
    SuspectReferenceError,
    fit_calibration,
)
from critline.calibration.record import LIGHTS, Calibration, make_calibration
from critline.calibration.references import load_references, resolve_known
from critline.instrument import DEFAULT, Instrument
from critline.readings import PhotoReading


@dataclass(frozen=True)
class ManifestRow:
    line: int
    photo: str  # as written in the manifest
    path: Path  # resolved
    known_ri: float
    known_uncertainty: float
    material: str


def read_manifest(path: str | Path) -> tuple[ManifestRow, ...]:
    """Parse and check the manifest (not the photos' content)."""
    path = Path(path)
    try:
        with path.open(newline="", encoding="utf-8-sig") as fh:
            reader = csv.DictReader(fh)
            header = [h.strip().lower() for h in (reader.fieldnames or [])]
            raw = list(reader)
    except FileNotFoundError:
        raise CalibrationError(f"{path}: manifest not found") from None
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise CalibrationError(f"{path}: cannot read manifest ({exc})") from None
    if "photo" not in header or "known_ri" not in header:
        raise CalibrationError(f"{path}: manifest needs the header photo,known_ri (optional material)")
    base = path.resolve().parent
    rows = []
    for line, r in enumerate(raw, start=2):
        r = {(k or "").strip().lower(): (v or "").strip() if isinstance(v, str) else "" for k, v in r.items()}
        if not any(r.values()):
            continue
        photo = r.get("photo", "")
        if not photo:
            raise CalibrationError(f"{path}: line {line}: no photo given")
        rel = Path(photo)
        if rel.is_absolute():
            raise CalibrationError(f"{path}: line {line}: photo {photo} must be relative to the manifest's folder")
        resolved = (base / rel).resolve()
        if not resolved.is_relative_to(base):
            raise CalibrationError(f"{path}: line {line}: photo {photo} lies outside the manifest's folder")
        if not resolved.is_file():
            raise CalibrationError(f"{path}: line {line}: photo {photo} not found")
        try:
            ri, unc, key = resolve_known(r.get("known_ri", ""))
        except CalibrationError as exc:
            raise CalibrationError(f"{path}: line {line}: {exc}") from None
        rows.append(ManifestRow(line, photo, resolved, ri, unc, r.get("material") or key))
    return tuple(rows)


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def check_rows(rows: tuple[ManifestRow, ...], manifest: Path, instrument: Instrument,
               exclude: Iterable[str] = ()) -> dict[str, str]:
    """Checks that need no reading; returns the sha256 of each photo path."""
    if not rows:
        raise CalibrationError(f"{manifest}: the manifest lists no reference photos")
    excluded = set(exclude)
    unknown = excluded - {r.photo for r in rows} - {r.path.name for r in rows}
    if unknown:
        raise CalibrationError(f"{manifest}: --exclude {sorted(unknown)[0]} is not a photo of the manifest")
    for r in rows:
        if not instrument.first <= r.known_ri <= instrument.last:
            raise CalibrationError(
                f"{manifest}: line {r.line}: known RI {r.known_ri:.4f} of {r.photo} is outside the scale "
                f"({instrument.first:.2f} to {instrument.last:.2f})")
        if r.known_ri >= instrument.liquid_ri:
            raise CalibrationError(
                f"{manifest}: line {r.line}: known RI {r.known_ri:.4f} of {r.photo} is over the limit "
                f"(contact liquid {instrument.liquid_ri:.3f}): no stone edge to fit")
    used = [r for r in rows if r.photo not in excluded and r.path.name not in excluded]
    need = SCALE_MODEL_MIN_REFS["offset"]
    if len(used) < need:
        raise CalibrationError(f"{manifest}: too few references: {len(used)} edge(s), at least {need} needed")
    span = max(r.known_ri for r in used) - min(r.known_ri for r in used)
    if span < MIN_SPAN:
        raise CalibrationError(
            f"{manifest}: references all at one end of the scale: known RIs span only "
            f"{min(r.known_ri for r in used):.4f} to {max(r.known_ri for r in used):.4f} ({span:.4f}); "
            f"at least {MIN_SPAN} is needed: add a reference from the other end")
    hashes: dict[str, str] = {}
    seen: dict[str, str] = {}
    for r in rows:
        if r.photo in hashes:
            continue
        try:
            digest = _sha256(r.path)
        except OSError as exc:
            raise CalibrationError(f"{manifest}: cannot read photo {r.photo} ({exc.strerror})") from None
        if digest in seen:
            raise CalibrationError(f"{manifest}: photos {seen[digest]} and {r.photo} are the same file "
                                   "(same sha256): each reference needs its own photo")
        seen.setdefault(digest, r.photo)
        hashes[r.photo] = digest
    return hashes


def default_reader() -> Callable[..., PhotoReading]:
    try:
        from critline.photo import read_photo
    except ImportError:
        from critline.photo.reading import read_photo
    return read_photo


@dataclass(frozen=True)
class ManifestResult:
    calibration: Calibration
    fit: CalibrationFit
    readings: tuple[PhotoReading, ...]


def calibrate_manifest(manifest: str | Path, *, instrument: Instrument | None = None,
                       setup: dict | None = None, light: str | None = None,
                       exclude: Iterable[str] = (), force: bool = False, model: str | None = None,
                       read: Callable[..., PhotoReading] | None = None) -> ManifestResult:
    """Read every reference photo of the manifest, pair edges with known RIs and fit.

    Raises
    ------
    CalibrationError
        One line naming the manifest (and line or photo) and the reason.
    """
    manifest = Path(manifest)
    inst = instrument or DEFAULT
    exclude = tuple(exclude)
    if light is not None and light not in LIGHTS:
        raise CalibrationError(f"light must be one of {', '.join(LIGHTS)}, not {light!r}")
    if model is not None and model not in SCALE_MODELS:
        raise CalibrationError(f"unknown model {model!r}: use one of {', '.join(SCALE_MODELS)}")
    rows = read_manifest(manifest)
    hashes = check_rows(rows, manifest, inst, exclude)
    read = read or default_reader()

    by_photo: dict[str, list[ManifestRow]] = {}
    for r in rows:
        by_photo.setdefault(r.photo, []).append(r)
    readings = []
    pairs: list[ReferencePair] = []
    records: list[tuple[str, str, str]] = []
    excluded_idx: list[int] = []
    lights = set()
    warnings = []
    for photo, group in by_photo.items():
        is_excluded = photo in exclude or group[0].path.name in exclude
        reading = read(group[0].path, instrument=inst)
        readings.append(reading)
        stones = sorted(reading.stone_edges, key=lambda e: e.scale_position)
        problem = None
        if reading.status == "rejected":
            problem = f"reference photo {photo} was rejected ({reading.reason})"
        elif reading.status == "over_limit":
            problem = (f"reference photo {photo} is over the limit (only the liquid edge shows): "
                       "it cannot calibrate")
        elif reading.status == "no_edge" or not stones:
            problem = f"no stone edge found in reference photo {photo}"
        elif len(stones) != len(group):
            problem = (f"photo {photo} shows {len(stones)} stone edge(s) but the manifest gives "
                       f"{len(group)} known RI(s): cannot pair them (one row per edge; a polariser "
                       "shows one edge at a time)")
        if problem and is_excluded:
            warnings.append(f"excluded and left out of the record: {problem}")
            continue
        if problem:
            raise CalibrationError(f"{manifest}: {problem}")
        if reading.light in LIGHTS and not is_excluded:
            lights.add(reading.light)
        for row, edge in zip(sorted(group, key=lambda r: r.known_ri), stones, strict=True):
            if is_excluded:
                excluded_idx.append(len(pairs))
            pairs.append(ReferencePair(
                scale_position=edge.scale_position, scale_uncertainty=max(edge.scale_uncertainty, 1e-6),
                known_ri=row.known_ri, field_position=edge.field_position,
                known_uncertainty=row.known_uncertainty,
                label=photo + (f" ({row.material})" if row.material else "")))
            records.append((photo, hashes[photo], row.material))

    if len(lights) > 1:
        raise CalibrationError(f"{manifest}: reference photos mix monochromatic and white light: "
                               "calibrate each light separately")
    if light is not None:
        if lights and light not in lights:
            raise CalibrationError(f"{manifest}: --light {light} but the photos were taken in "
                                   f"{next(iter(lights))} light")
        chosen = light
    elif lights:
        chosen = next(iter(lights))
    else:
        chosen = "monochromatic"
        warnings.append("the light could not be told from the photos: recorded as monochromatic "
                        "(state it with the light option)")
    try:
        fit = fit_calibration(pairs, first=inst.first, step=inst.step, model=model,
                              exclude=excluded_idx, force=force)
    except SuspectReferenceError as exc:
        raise CalibrationError(f"{manifest}: {exc}{_lookalikes(exc.suspects)}") from None
    except CalibrationError as exc:
        raise CalibrationError(f"{manifest}: {exc}") from None
    cal = make_calibration(fit, photos=tuple(records), setup=setup, light=chosen,
                           instrument={"name": inst.name, "first": inst.first, "last": inst.last,
                                       "step": inst.step},
                           extra_warnings=tuple(warnings))
    return ManifestResult(cal, fit, tuple(readings))


def _lookalikes(suspects, tolerance: float = 0.003) -> str:
    """Which reference materials a suspect actually reads like (a hint at a swapped label)."""
    try:
        table = load_references()
    except CalibrationError:
        return ""
    hints = []
    for s in suspects:
        near = sorted((abs(m.ri - s.predicted_ri), m.key) for m in table.values()
                      if abs(m.ri - s.predicted_ri) <= tolerance)
        if near:
            hints.append(f"{s.label.split(' (')[0]} reads like {', '.join(k for _, k in near[:3])}")
    return f" ({'; '.join(hints)})" if hints else ""


def parse_setup(text: str | None) -> dict:
    """``"instrument=bench A; liquid=1.79"`` -> dict; free text goes under ``description``."""
    if not text:
        return {}
    out: dict[str, str] = {}
    free = []
    for part in text.replace("\n", ";").split(";"):
        part = part.strip()
        if not part:
            continue
        if "=" in part:
            k, v = part.split("=", 1)
            if k.strip():
                out[k.strip()] = v.strip()
                continue
        free.append(part)
    if free:
        out["description"] = "; ".join(free)
    return out
