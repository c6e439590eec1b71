"""The reference materials table (``calibration/references.csv`` at the top of the repository).

A manifest may name a reference stone by its key (``quartz-o``, ``fluorite``
...) instead of giving a number; the table gives the RI at 589.3 nm, a
tolerance (standard uncertainty for natural variation; 0 for a formula value
of a synthetic crystal or glass) and the published source.

The package reads its own copy, ``critline/calibration/data/references.csv``
(package data, through :mod:`importlib.resources`), so an installed wheel has
it too; ``tests/calibration/test_references.py`` checks that the copy is the
repository's table byte for byte.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from pathlib import Path

from critline.calibration.fitting import CalibrationError

#: the table shipped with the package (a copy of the repository's calibration/references.csv)
TABLE = resources.files("critline.calibration").joinpath("data", "references.csv")


@dataclass(frozen=True)
class ReferenceMaterial:
    key: str
    material: str
    ri: float
    tolerance: float
    ray: str
    formula: str
    source: str
    note: str


@lru_cache(maxsize=4)
def load_references(path: str | Path | None = None) -> dict[str, ReferenceMaterial]:
    """Read the table (default: the package's copy, :data:`TABLE`); keys are lower case."""
    path = Path(path) if path is not None else TABLE
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise CalibrationError(f"{path}: cannot read the reference table ({exc.strerror})") from None
    rows = list(csv.DictReader(io.StringIO(text, newline="")))
    out = {}
    for i, r in enumerate(rows, start=2):
        try:
            m = ReferenceMaterial(key=r["key"].strip().lower(), material=r["material"].strip(),
                                  ri=float(r["ri"]), tolerance=float(r["tolerance"] or 0),
                                  ray=r["ray"].strip(), formula=r["formula"].strip(),
                                  source=r["source"].strip(), note=(r.get("note") or "").strip())
        except (KeyError, ValueError, AttributeError):
            raise CalibrationError(f"{path}: line {i} is not a usable reference row") from None
        out[m.key] = m
    return out


def resolve_known(text: str, table: dict[str, ReferenceMaterial] | None = None
                  ) -> tuple[float, float, str]:
    """A manifest's ``known_ri`` cell: a number, or a key of the reference table.

    Returns ``(ri, standard uncertainty, material name or "")``.
    """
    text = (text or "").strip()
    try:
        value = float(text)
    except ValueError:
        pass
    else:
        if not math.isfinite(value):
            raise CalibrationError(f"known_ri {text!r} is not a finite number")
        return value, 0.0, ""
    table = load_references() if table is None else table
    ref = table.get(text.lower())
    if ref is None:
        raise CalibrationError(f"known_ri {text!r} is neither a number nor a reference key "
                               f"(keys: {', '.join(sorted(table))})")
    return ref.ri, ref.tolerance, ref.key
