"""Resumable batches: one JSON file per photo result, keyed by what the result depends on.

A reading depends on the photo's bytes (sha256), the calibration (its id), the
instrument description and the reader (critline's version and a hash of the
reader's source files); the cache key is a hash of those, so a re-run after an interruption or after adding photos reads only
what is new, and a change of calibration or instrument reads everything again.
Files are written atomically (:mod:`critline.fileio`); a damaged cache file is
ignored and the photo read again.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import replace
from pathlib import Path

from critline import __version__
from critline.fileio import atomic_write_text
from critline.instrument import Instrument
from critline.readings import Edge, PhotoReading, Quality

CACHE_SCHEMA = "critline.batch-cache/1"
_CHUNK = 1 << 20


def file_sha256(path: str | Path) -> str:
    """sha256 of a file's bytes (hex); raises OSError when it cannot be read."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(_CHUNK):
            h.update(chunk)
    return h.hexdigest()


def instrument_fingerprint(instrument: Instrument | None) -> str:
    if instrument is None:
        return "default"
    text = json.dumps(instrument.to_dict(), sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def reader_fingerprint(reader) -> str:
    """A hash of the reader's source: the files of the package its module belongs to.

    A changed reader (a new release, or code being worked on) reads photos anew
    instead of reusing results it would no longer give.
    """
    import importlib
    import inspect

    module_name = getattr(reader, "__module__", None) or ""
    h = hashlib.sha256(module_name.encode())
    try:
        module = importlib.import_module(module_name)
        path = Path(inspect.getfile(module))
    except (ImportError, TypeError, OSError):
        return h.hexdigest()[:16]
    # a module inside a package: the whole package folder (its stages live in sibling files)
    files = sorted(path.parent.glob("*.py")) if getattr(module, "__package__", "") else [path]
    for f in files:
        try:
            h.update(f.name.encode())
            h.update(f.read_bytes())
        except OSError:
            continue
    return h.hexdigest()[:16]


def _num(x):
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _unnum(x):
    return math.nan if x is None else float(x)


def reading_to_record(reading: PhotoReading) -> dict:
    """Every field of a :class:`PhotoReading` as plain JSON (lossless, unlike ``read/1``)."""
    return {
        "photo": reading.photo,
        "sha256": reading.sha256,
        "status": reading.status,
        "reason": reading.reason,
        "edges": [
            {"ri": _num(e.ri), "uncertainty": _num(e.uncertainty), "kind": e.kind,
             "scale_position": _num(e.scale_position), "scale_uncertainty": _num(e.scale_uncertainty),
             "contrast": _num(e.contrast), "field_position": _num(e.field_position),
             "flags": list(e.flags)}
            for e in reading.edges
        ],
        "light": reading.light,
        "mode": reading.mode,
        "quality": {"flags": list(reading.quality.flags),
                    "figures": _jsonable(reading.quality.figures)},
        "profile": None if reading.profile is None else
        [[_num(v) for v in reading.profile[0]], [_num(v) for v in reading.profile[1]]],
        "field_circle": None if reading.field_circle is None else [_num(v) for v in reading.field_circle],
    }


def _jsonable(value):
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, int):
        return int(value)
    try:
        return _num(float(value))
    except (TypeError, ValueError):
        return str(value)


def reading_from_record(rec: dict) -> PhotoReading:
    """Inverse of :func:`reading_to_record`."""
    edges = tuple(
        Edge(ri=_unnum(e["ri"]), uncertainty=_unnum(e["uncertainty"]), kind=e["kind"],
             scale_position=_unnum(e["scale_position"]), scale_uncertainty=_unnum(e["scale_uncertainty"]),
             contrast=_unnum(e["contrast"]),
             field_position=None if e.get("field_position") is None else float(e["field_position"]),
             flags=tuple(e.get("flags", ())))
        for e in rec.get("edges", ())
    )
    q = rec.get("quality") or {}
    profile = rec.get("profile")
    circle = rec.get("field_circle")
    return PhotoReading(
        photo=rec["photo"], sha256=rec["sha256"], status=rec["status"], reason=rec.get("reason"),
        edges=edges, light=rec.get("light", "unknown"), mode=rec.get("mode", "graduations"),
        quality=Quality(flags=tuple(q.get("flags", ())), figures=dict(q.get("figures", {}))),
        profile=None if profile is None else (tuple(_unnum(v) for v in profile[0]),
                                              tuple(_unnum(v) for v in profile[1])),
        field_circle=None if circle is None else tuple(_unnum(v) for v in circle),
    )


def load_reading_file(path: str | Path, sha256: str, photo: str) -> PhotoReading | None:
    """The reading stored in one cache file, renamed to ``photo``; None when the file is missing,
    damaged or holds another photo's result (``sha256`` differs)."""
    try:
        rec = json.loads(Path(path).read_text(encoding="utf-8"))
        if rec.get("schema") != CACHE_SCHEMA:
            return None
        reading = reading_from_record(rec["reading"])
    except (OSError, ValueError, KeyError, TypeError, IndexError, AttributeError):
        return None
    if reading.sha256 != sha256:
        return None
    return reading if reading.photo == photo else replace(reading, photo=photo)


class ReadingCache:
    """Photo results stored under ``directory`` as ``<key>.json``.

    Parameters
    ----------
    directory : path
        Usually ``<out>/cache``.
    calibration_id : str or None
        Id of the calibration the readings use (None: nominal scale values).
    instrument : Instrument or None
    reader_id : str
        Fingerprint of the reader (:func:`reader_fingerprint`).
    """

    def __init__(self, directory: str | Path, calibration_id: str | None,
                 instrument: Instrument | None, reader_id: str = ""):
        self.directory = Path(directory)
        self.calibration_id = calibration_id or "nominal"
        self.instrument_id = instrument_fingerprint(instrument)
        self.reader_id = reader_id

    def key(self, sha256: str) -> str:
        text = f"{sha256}|{self.calibration_id}|{self.instrument_id}|{__version__}|{self.reader_id}"
        return hashlib.sha256(text.encode()).hexdigest()[:40]

    def path(self, sha256: str) -> Path:
        return self.directory / f"{self.key(sha256)}.json"

    def overlay_dir(self, sha256: str) -> Path:
        """Folder for this result's marked-up photo (one folder per result: names never clash)."""
        return self.directory.parent / "overlays" / self.key(sha256)

    def get(self, sha256: str, photo: str) -> tuple[PhotoReading, str | None] | None:
        """The cached reading (renamed to ``photo``) and its overlay path, or None."""
        path = self.path(sha256)
        try:
            rec = json.loads(path.read_text(encoding="utf-8"))
            if rec.get("schema") != CACHE_SCHEMA or rec.get("key") != self.key(sha256):
                return None
            reading = reading_from_record(rec["reading"])
        except (OSError, ValueError, KeyError, TypeError, IndexError):
            return None
        if reading.sha256 != sha256:
            return None
        overlay = rec.get("overlay")
        if overlay is not None and not Path(overlay).exists():
            overlay = None
        return replace(reading, photo=photo), overlay

    def put(self, reading: PhotoReading, overlay: str | None = None) -> Path:
        rec = {
            "schema": CACHE_SCHEMA,
            "key": self.key(reading.sha256),
            "calibration": self.calibration_id,
            "instrument": self.instrument_id,
            "critline": __version__,
            "overlay": overlay,
            "reading": reading_to_record(reading),
        }
        return atomic_write_text(self.path(reading.sha256), json.dumps(rec, indent=1))
