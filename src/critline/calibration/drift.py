"""Drift between two calibrations of the same setup.

The shift at a refractive index ``r`` is what the old calibration would read
today for a stone of index ``r``, minus ``r``: find where the new map puts
``r`` on the printed scale and read that position with the old map.  A shift
beyond 0.002 (what a careful reader reproduces by eye; common practice, no
source) is flagged with the usual suspects to check.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from critline.calibration.fitting import CalibrationError
from critline.calibration.record import Calibration
from critline.calibration.store import created_time, load_calibration

#: a shift beyond this (RI) is flagged (common practice, no source)
DRIFT_LIMIT = 0.002
ADVICE = ("check the contact liquid (fresh, not dried or contaminated), the room temperature "
          "(liquid index falls as it warms) and the prism (clean, no scratches or residue)")


@dataclass(frozen=True)
class DriftPoint:
    ri: float
    shift: float  # old calibration's reading minus the true RI
    label: str = ""


@dataclass(frozen=True)
class Drift:
    """How a new calibration differs from a previous one."""

    previous_id: str
    previous_created: str
    at_references: tuple[DriftPoint, ...]
    range: tuple[float, float]
    max_shift: float  # signed, the largest in magnitude across the common range
    max_shift_at: float
    flagged: bool
    notes: tuple[str, ...]

    def to_json(self) -> dict:
        return {
            "previous": self.previous_id, "previous_created": self.previous_created,
            "range": [round(v, 4) for v in self.range],
            "max_shift": round(self.max_shift, 4), "max_shift_at": round(self.max_shift_at, 4),
            "limit": DRIFT_LIMIT, "flagged": self.flagged,
            "at_references": [{"ri": round(p.ri, 4), "shift": round(p.shift, 4), "material": p.label}
                              for p in self.at_references],
            "notes": list(self.notes),
        }


def _invert(cal: Calibration, ri: np.ndarray) -> np.ndarray:
    """Nominal scale values at which ``cal`` gives ``ri`` (Newton steps; the map is near identity)."""
    x = np.array(ri, float) - cal.offset
    for _ in range(30):
        x = x - (cal.nominal_to_ri(x) - ri) / cal.scale_map.slope(x)
    return x


def shift_at(new: Calibration, old: Calibration, ri) -> np.ndarray:
    """Old reading minus true RI for stones of index ``ri``, measured on today's setup."""
    ri = np.asarray(ri, float)
    return old.nominal_to_ri(_invert(new, ri)) - ri


def compare(new: Calibration, old: Calibration, samples: int = 201) -> Drift:
    """Shift at each of the new calibration's references and across the common range."""
    notes = []
    for key in ("first", "step"):
        if abs(float(new.instrument.get(key, 0)) - float(old.instrument.get(key, 0))) > 1e-9:
            notes.append(f"the two calibrations describe different printed scales ({key} "
                         f"{old.instrument.get(key)} then {new.instrument.get(key)}): compared in nominal values")
    if new.light != old.light:
        notes.append(f"different light: {old.light} then {new.light}; drift mixes the light's effect")
    refs = [r for r in new.references if not r.excluded]
    seen = {}
    for r in refs:
        seen.setdefault(round(r.known_ri, 4), r.material or r.photo)
    values = np.array(sorted(seen))
    at_refs = tuple(DriftPoint(float(v), float(s), seen[v])
                    for v, s in zip(values, shift_at(new, old, values), strict=True))
    lo = max(new.valid_range[0], old.valid_range[0])
    hi = min(new.valid_range[1], old.valid_range[1])
    if lo >= hi:
        notes.append("the calibrated ranges do not overlap: compared over the new range only")
        lo, hi = new.valid_range
    grid = np.linspace(lo, hi, samples)
    shifts = shift_at(new, old, grid)
    k = int(np.argmax(np.abs(shifts)))
    flagged = bool(abs(shifts[k]) > DRIFT_LIMIT or any(abs(p.shift) > DRIFT_LIMIT for p in at_refs))
    if flagged:
        notes.append(f"shift of {shifts[k]:+.4f} at {grid[k]:.4f} exceeds {DRIFT_LIMIT}: {ADVICE}")
    return Drift(previous_id=old.id, previous_created=old.created, at_references=at_refs,
                 range=(float(lo), float(hi)), max_shift=float(shifts[k]), max_shift_at=float(grid[k]),
                 flagged=flagged, notes=tuple(notes))


def find_previous(path: str | Path, before: str | None = None, skip: Path | None = None) -> Calibration:
    """A calibration file, or the latest calibration in a folder made before ``before``.

    Files in the folder that are not calibrations are passed over.
    """
    path = Path(path)
    if path.is_file():
        return load_calibration(path)
    if not path.is_dir():
        raise CalibrationError(f"{path}: previous calibration not found")
    limit = None
    if before is not None:
        from datetime import datetime

        limit = datetime.fromisoformat(before)
        if limit.tzinfo is None:
            limit = limit.astimezone()
    best = None
    for f in sorted(path.glob("*.toml")):
        if skip is not None and f.resolve() == skip.resolve():
            continue
        try:
            cal = load_calibration(f)
        except CalibrationError:
            continue
        t = created_time(cal)
        if t is None or (limit is not None and t >= limit):
            continue
        if best is None or t > best[0]:
            best = (t, cal)
    if best is None:
        raise CalibrationError(f"{path}: no earlier calibration file in this folder")
    return best[1]
