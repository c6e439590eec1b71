"""Watching a folder that a phone syncs into: each new photo is read as it lands.

The folder is polled (no extra dependency): a photo is read once its size and
modification time are the same at two looks in a row (a file still being
copied is left alone), then its reading and the running summary of its stone
are printed.  Each subfolder is one stone; a photo in another subfolder starts
a new stone.  Results go to the same cache as ``critline batch`` (so a later
batch run reads nothing twice) and ``watch-summary.json`` in the output folder
is rewritten after every photo; on Ctrl-C, or when a bounded run ends, the full
report set is written as a batch writes it.
"""

from __future__ import annotations

import json
import os
import sys
import time
from collections.abc import Callable
from pathlib import Path

from critline.batch.cache import ReadingCache, file_sha256, reader_fingerprint
from critline.batch.grouping import StoneGroup, group_folder
from critline.batch.run import BatchResult, calibration_summary, photo_problems
from critline.batch.stones import PhotoResult, StoneResult, analyse_stone
from critline.batch.work import ReadTask, default_reader, is_verdict, read_one
from critline.errors import EXIT_OK, EXIT_REJECTED
from critline.fileio import atomic_write_text
from critline.instrument import DEFAULT
from critline.readings import rejected
from critline.report.document import batch_document, candidate_name, r4

SUMMARY_NAME = "watch-summary.json"


def describe_reading(photo: PhotoResult) -> str:
    """One line: photo, status, stone edges with uncertainty, rotation and polariser."""
    r, item = photo.reading, photo.item
    where = (f"rotation {'?' if item.rotation is None else f'{item.rotation:g}°'}, "
             f"polariser {item.polariser_setting}")
    if r.status == "rejected":
        return f"{item.display}: rejected: {r.reason}"
    edges = ", ".join(f"{e.ri:.4f} ± {max(e.uncertainty, 1e-4):.4f}"
                      for e in sorted(r.stone_edges, key=lambda e: e.ri))
    text = {"ok": edges or "no stone edge", "over_limit": "over the limit",
            "no_edge": "no edge on the scale"}.get(r.status, r.status)
    flags = f" [{', '.join(r.quality.flags)}]" if r.quality.flags else ""
    return f"{item.display}: {text} ({where}){flags}"


def describe_stone(stone: StoneResult) -> str:
    """Running summary of a stone in one line."""
    a, ident = stone.analysis, stone.identification
    head = f"  {stone.name}: {len(stone.usable)}/{len(stone.photos)} photo(s)"
    if a is None:
        return head + ", nothing to analyse yet"
    if getattr(a, "over_limit", False):
        ri = "over the limit"
    else:
        lo, hi = r4(getattr(a, "ri_low", None)), r4(getattr(a, "ri_high", None))
        ri = "RI -" if lo is None else (f"RI {lo:.4f}" if hi is None or hi == lo else f"RI {lo:.4f}-{hi:.4f}")
    bi = r4(getattr(a, "birefringence", None))
    parts = [head, ri]
    if bi is not None:
        parts.append(f"birefringence {bi:.4f}")
    char = getattr(a, "optic_character", None) or "undetermined"
    sign = getattr(a, "optic_sign", None)
    parts.append(char + (f" {sign}" if sign else ""))
    cands = tuple(getattr(ident, "candidates", ()) or ())
    if cands:
        parts.append(f"leading: {candidate_name(cands[0])} ({float(cands[0].score):.2f})")
    return ", ".join(parts)


class _Watcher:
    def __init__(self, folder, calibration, instrument, out_dir, name_pattern, reader):
        self.folder = Path(folder)
        self.calibration = calibration
        self.instrument = instrument or DEFAULT
        self.out_dir = Path(out_dir)
        self.name_pattern = name_pattern
        self.reader = reader
        self.cache = ReadingCache(self.out_dir / "cache", getattr(calibration, "id", None), self.instrument,
                                  reader_fingerprint(reader))
        self.seen: dict[str, tuple[int, int]] = {}      # display -> (size, mtime) at the last look
        self.done: dict[str, tuple[int, int]] = {}      # display -> (size, mtime) when read
        self.results: dict[str, PhotoResult] = {}
        self.order: list[str] = []                       # stones in order of first photo
        self.groups: dict[str, StoneGroup] = {}
        self.counts = {"read": 0, "cached": 0}
        self.overlays = True

    def look(self) -> tuple[list, int]:
        """Photos whose size is stable since the last look, and how many are still changing."""
        grouping = group_folder(self.folder, name_pattern=self.name_pattern, skip=(self.out_dir,))
        ready, changing = [], 0
        for stone in grouping.stones:
            self.groups[stone.name] = stone
            for item in stone.photos:
                try:
                    st = os.stat(item.path)
                    sig = (st.st_size, st.st_mtime_ns)
                except OSError:
                    sig = (-1, -1)  # dangling link or vanished: read (and reject) once it is stable
                if self.done.get(item.display) == sig:
                    continue
                if self.seen.get(item.display) == sig and sig[0] != 0:
                    ready.append((item, sig))
                else:
                    changing += 1
                self.seen[item.display] = sig
        return ready, changing

    def read(self, item) -> PhotoResult:
        try:
            sha = file_sha256(item.path)
        except OSError as exc:
            return PhotoResult(item, rejected(item.display, "", f"cannot open ({exc.strerror or type(exc).__name__})"))
        hit = self.cache.get(sha, item.display)
        if hit is not None:
            self.counts["cached"] += 1
            return PhotoResult(item, hit[0], hit[1], cached=True)
        overlay_dir = os.fspath(self.cache.overlay_dir(sha)) if self.overlays else None
        task = ReadTask(os.fspath(item.path), item.display, sha, overlay_dir)
        reading, overlay = read_one(task, self.reader, self.instrument, self.calibration)
        if is_verdict(reading):
            self.cache.put(reading, overlay)
        self.counts["read"] += 1
        return PhotoResult(item, reading, overlay)

    def stone(self, name: str) -> StoneResult:
        group = self.groups[name]
        photos = tuple(self.results[i.display] for i in group.photos if i.display in self.results)
        return analyse_stone(StoneGroup(name, tuple(p.item for p in photos), group.sg), photos,
                             liquid_ri=self.instrument.liquid_ri, instrument=self.instrument,
                             calibration=self.calibration)

    def result(self, elapsed: float) -> BatchResult:
        stones = tuple(self.stone(n) for n in self.order)
        problems = tuple(photo_problems(stones))
        counts = {"photos": sum(len(s.photos) for s in stones), **self.counts,
                  "rejected": len(problems)}
        return BatchResult(source=os.fspath(self.folder), out_dir=self.out_dir,
                           calibration_id=getattr(self.calibration, "id", None),
                           instrument=self.instrument, stones=stones, problems=problems,
                           counts=counts, elapsed=elapsed,
                           calibration_info=calibration_summary(self.calibration), grouping="folders")


def watch_folder(folder: str | Path, *, calibration=None, instrument=None, out_dir: str | Path,
                 interval: float = 2.0, max_idle: float | None = None, once: bool = False,
                 name_pattern: str | None = None, overwrite: bool = False, reader=None,
                 overlays: bool = True,
                 echo: Callable[[str], None] = print,
                 sleep: Callable[[float], None] = time.sleep,
                 clock: Callable[[], float] = time.monotonic) -> int:
    """Watch ``folder`` and read each new photo; returns the exit code (0, or 3 if any was rejected).

    Parameters
    ----------
    interval : float
        Seconds between looks.
    max_idle : float, optional
        Stop when no photo has arrived for this long and none is still changing.
    once : bool
        Stop as soon as everything present has been read.
    overlays : bool
        Ask the reader for marked-up photos.
    echo : callable
        Where the lines go (stdout in the command); rejected photos also go to stderr.
    """
    from critline.report.write import write_reports

    w = _Watcher(folder, calibration, instrument, out_dir, name_pattern, reader or default_reader())
    w.overlays = overlays
    start = last_new = clock()
    current = None
    try:
        while True:
            ready, changing = w.look()
            for item, sig in ready:
                photo = w.read(item)
                w.results[item.display] = photo
                w.done[item.display] = sig
                if item.stone not in w.order:
                    w.order.append(item.stone)
                if item.stone != current:
                    echo(f"— stone {item.stone} —")
                    current = item.stone
                echo(describe_reading(photo))
                if photo.reading.status == "rejected":
                    print(f"critline: {item.display}: {photo.reading.reason}", file=sys.stderr)
                echo(describe_stone(w.stone(item.stone)))
                atomic_write_text(w.out_dir / SUMMARY_NAME,
                                  json.dumps(batch_document(w.result(clock() - start)), indent=1,
                                             ensure_ascii=False))
                last_new = clock()
            if not changing and not ready:
                if once or (max_idle is not None and clock() - last_new >= max_idle):
                    break
            sleep(interval)
    except KeyboardInterrupt:
        echo("stopped; writing what has been read so far")
    result = w.result(clock() - start)
    if result.stones:
        paths = write_reports(result, w.out_dir, overwrite=overwrite)
        echo(f"reports: {', '.join(str(p) for p in paths.values())}")
    else:
        echo("no photo read; no report written")
    return EXIT_REJECTED if result.exit_code else EXIT_OK
