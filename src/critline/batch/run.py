"""``run_batch``: a folder (or manifest) of stones in, readings and identifications out."""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from critline.batch.cache import ReadingCache, file_sha256, reader_fingerprint
from critline.batch.grouping import Grouping, Problem, group_photos
from critline.batch.stones import PhotoResult, StoneResult, analyse_stone
from critline.batch.work import ReadTask, default_reader, is_verdict, read_many
from critline.errors import EXIT_OK, EXIT_REJECTED
from critline.instrument import DEFAULT, Instrument
from critline.readings import rejected

#: problem kinds of a photo that gave no result (an empty stone folder is not one)
NO_RESULT = ("rejected", "unreadable", "refused")


@dataclass(frozen=True)
class BatchResult:
    """Everything a batch produced, ready for the report writers.

    Attributes
    ----------
    source : str
        The folder or manifest as given.
    out_dir : Path
    calibration_id : str or None
        None: readings are nominal scale values (no calibration).
    calibration_info : dict
        What the report says about the calibration (id, created, light, model).
    instrument : Instrument
    stones : tuple of StoneResult
    problems : tuple of Problem
        Every photo without a result and every empty stone folder, one line each.
    counts : dict
        ``photos``, ``read`` (newly read), ``cached`` (taken from the cache), ``rejected``.
    elapsed : float
        Seconds.
    """

    source: str
    out_dir: Path
    calibration_id: str | None
    instrument: Instrument
    stones: tuple[StoneResult, ...]
    problems: tuple[Problem, ...]
    counts: dict = field(default_factory=dict)
    elapsed: float = 0.0
    calibration_info: dict = field(default_factory=dict)
    grouping: str = "folders"

    @property
    def exit_code(self) -> int:
        """0 when every photo got a result, 3 when at least one was rejected, unreadable or refused."""
        bad = any(p.kind in NO_RESULT for p in self.problems)
        return EXIT_REJECTED if bad else EXIT_OK


def calibration_summary(calibration) -> dict:
    if calibration is None:
        return {}
    info = {}
    for key in ("id", "created", "light", "model", "residual_rms", "valid_range"):
        value = getattr(calibration, key, None)
        if value is None:
            continue
        if isinstance(value, float):
            value = round(value, 4)
        elif isinstance(value, tuple | list):
            value = "–".join(f"{v:.4f}" if isinstance(v, float) else str(v) for v in value)
        info[key] = value if isinstance(value, str | int | float) else str(value)
    return info


def photo_problems(stones: tuple[StoneResult, ...]) -> list[Problem]:
    out = []
    for stone in stones:
        for p in stone.photos:
            r = p.summary
            if r.status == "rejected":
                kind = "unreadable" if (r.reason or "").startswith("cannot open") else "rejected"
                out.append(Problem(p.item.display, r.reason or "rejected", kind))
    return out


def run_batch(source: str | Path, *, calibration=None, instrument: Instrument | None = None,
              out_dir: str | Path, workers: int | None = None, fresh: bool = False,
              name_pattern: str | None = None, reader=None, overlays: bool = True,
              on_progress: Callable[[int, int], None] | None = None,
              on_start: Callable[[int, int], None] | None = None) -> BatchResult:
    """Read every photo of a batch (in parallel, resumable), analyse and identify each stone.

    Parameters
    ----------
    source : path
        A folder (one stone per subfolder) or a manifest ``.csv``
        (:func:`critline.batch.grouping.read_manifest`).
    calibration : Calibration, optional
        From :func:`critline.calibration.load_calibration`; None reads nominal values.
    instrument : Instrument, optional
    out_dir : path
        Where the cache (``cache/``), the marked-up photos (``overlays/``) and
        the reports go; skipped when it lies inside ``source``.
    workers : int, optional
        Reading processes; default all cores.  1 reads in this process.
    fresh : bool
        Ignore cached results (they are replaced by the new ones).
    name_pattern : str, optional
        File-name pattern for rotation and polariser (see :mod:`critline.batch.grouping`).
    overlays : bool
        Ask the reader for marked-up photos (the report's thumbnails); False is quicker.
    reader : callable, optional
        ``reader(path, instrument, calibration, overlay_dir) -> PhotoReading``;
        default :func:`critline.photo.read_photo`.  Must be picklable for workers > 1.
    on_start, on_progress : callable, optional
        ``on_start(to_read, cached)`` once; ``on_progress(done, to_read)`` after each photo.
    """
    t0 = time.perf_counter()
    instrument = instrument or DEFAULT
    out_dir = Path(out_dir)
    grouping: Grouping = group_photos(source, name_pattern=name_pattern, skip=(out_dir,))
    reader = reader or default_reader()
    cache = ReadingCache(out_dir / "cache", getattr(calibration, "id", None), instrument,
                         reader_fingerprint(reader))

    results: dict[str, PhotoResult] = {}
    tasks: list[ReadTask] = []
    items = {}
    n_cached = 0
    for stone in grouping.stones:
        for item in stone.photos:
            items[item.display] = item
            try:
                sha = file_sha256(item.path)
            except OSError as exc:
                reason = f"cannot open ({exc.strerror or type(exc).__name__})"
                results[item.display] = PhotoResult(item, rejected(item.display, "", reason))
                continue
            hit = None if fresh else cache.get(sha, item.display)
            if hit is not None:
                # only a summary stays in memory; the report re-reads the rest from the cache file
                results[item.display] = PhotoResult(item, hit[0], hit[1], cached=True,
                                                    source=cache.path(sha))
                n_cached += 1
                continue
            tasks.append(ReadTask(os.fspath(item.path), item.display, sha,
                                  os.fspath(cache.overlay_dir(sha)) if overlays else None))

    if on_start is not None:
        on_start(len(tasks), n_cached)
    done_count = [0]

    def on_result(task, reading, overlay):
        # memory must not grow with the number of photos: a reading stored in the cache is kept
        # as a summary (the profile and quality figures are re-read from its file for the report)
        source = cache.put(reading, overlay) if is_verdict(reading) else None
        results[task.display] = PhotoResult(items[task.display], reading, overlay, source=source)
        done_count[0] += 1
        if on_progress is not None:
            on_progress(done_count[0], len(tasks))

    read_many(tasks, reader=reader, instrument=instrument, calibration=calibration,
              workers=workers, on_result=on_result, keep=False)

    liquid = getattr(instrument, "liquid_ri", None)
    stones = tuple(
        analyse_stone(stone, tuple(results[i.display] for i in stone.photos), liquid_ri=liquid,
                      instrument=instrument, calibration=calibration)
        for stone in grouping.stones
    )
    problems = tuple(photo_problems(stones)) + grouping.problems
    n_photos = sum(len(s.photos) for s in stones)
    counts = {"photos": n_photos, "read": len(tasks), "cached": n_cached,
              "rejected": sum(p.kind in NO_RESULT for p in problems)}
    return BatchResult(source=os.fspath(source), out_dir=out_dir,
                       calibration_id=getattr(calibration, "id", None), instrument=instrument,
                       stones=stones, problems=problems, counts=counts,
                       elapsed=time.perf_counter() - t0,
                       calibration_info=calibration_summary(calibration),
                       grouping=grouping.source)
