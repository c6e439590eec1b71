"""Reading many photos on all cores.

Photos are read in worker processes (:class:`concurrent.futures.ProcessPoolExecutor`
with the ``forkserver`` start method, the reader preloaded once), handed out in
small chunks so that a slow photo does not hold back a whole share of the work.
One worker means reading in this process, which is also what the benchmark
compares against.  A reader that raises, or a worker that dies, turns into a
``rejected`` reading with the reason: a batch always goes on past a bad file.
"""

from __future__ import annotations

import contextlib
import importlib
import multiprocessing
import os
import pkgutil
import signal
import sys
import warnings
from collections.abc import Callable, Sequence
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, replace
from pathlib import Path

from critline.batch.grouping import IMAGE_SUFFIXES
from critline.errors import CritlineError
from critline.readings import PhotoReading, rejected

Reader = Callable[..., PhotoReading]

#: start of the reason when the reader raised instead of returning a verdict; such results are
#: not cached (a fixed reader, or more memory, may read the photo next time)
READER_FAILED = "could not be read ("
#: start of the reason when a worker process died
WORKER_DIED = "the reading process stopped"


def is_verdict(reading: PhotoReading) -> bool:
    """True when the reading is the reader's own result (worth caching), not a failure around it."""
    reason = reading.reason or ""
    return not (reading.status == "rejected" and reason.startswith((READER_FAILED, WORKER_DIED,
                                                                    "not enough memory")))


@dataclass(frozen=True)
class ReadTask:
    """One photo to read: where it is, the name to report, its hash, where its overlay goes."""

    path: str
    display: str
    sha256: str
    overlay_dir: str | None = None


def default_reader() -> Reader:
    """:func:`critline.photo.read_photo`, or a clear error when this build lacks it."""
    try:
        from critline.photo import read_photo
    except ImportError:
        try:
            from critline.photo.reading import read_photo
        except ImportError as exc:
            raise CritlineError(f"the photo reader is not available ({exc})") from None
    return read_photo


def find_overlay(overlay_dir: str | Path | None) -> str | None:
    """The marked-up photo the reader left in ``overlay_dir`` (first image file), if any."""
    if overlay_dir is None:
        return None
    folder = Path(overlay_dir)
    try:
        names = sorted(p for p in folder.iterdir() if p.suffix.lower() in IMAGE_SUFFIXES)
    except OSError:
        return None
    return str(names[0]) if names else None


def read_one(task: ReadTask, reader: Reader, instrument, calibration) -> tuple[PhotoReading, str | None]:
    """Read one photo; never raises for a bad photo or a failing reader."""
    try:
        if task.overlay_dir is not None:
            Path(task.overlay_dir).mkdir(parents=True, exist_ok=True)
        # stdout belongs to the command's own output (one JSON document with --json)
        with warnings.catch_warnings(), contextlib.redirect_stdout(sys.stderr):
            # numerical warnings inside the reader are not messages for the user: what
            # matters reaches the reading as flags, uncertainty or a rejection
            warnings.simplefilter("ignore", RuntimeWarning)
            reading = reader(Path(task.path), instrument, calibration, task.overlay_dir)
        if not isinstance(reading, PhotoReading):
            raise TypeError(f"reader returned {type(reading).__name__}, not a PhotoReading")
    except MemoryError:
        reading = rejected(task.display, task.sha256, "not enough memory to read this photo")
    except Exception as exc:  # the batch goes on; the reason is kept in one line
        text = " ".join(str(exc).split()) or type(exc).__name__
        reading = rejected(task.display, task.sha256, f"{READER_FAILED}{type(exc).__name__}: {text})")
    reading = replace(reading, photo=task.display, sha256=task.sha256)
    overlay = find_overlay(task.overlay_dir) if reading.status != "rejected" else None
    return reading, overlay


# --- worker process side -------------------------------------------------------------------
_worker_state: dict = {}


def _init_worker(reader: Reader, instrument, calibration) -> None:
    _worker_state.update(reader=reader, instrument=instrument, calibration=calibration)
    # Ctrl-C is handled by the main process (it keeps what is done and stops the workers)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # one thread per worker: the processes are the parallelism
    try:
        import cv2

        cv2.setNumThreads(1)
    except Exception:  # noqa: BLE001 - OpenCV is optional for fakes in tests
        pass


def _read_chunk(tasks: list[ReadTask]) -> list[tuple[PhotoReading, str | None]]:
    s = _worker_state
    return [read_one(t, s["reader"], s["instrument"], s["calibration"]) for t in tasks]


def default_workers() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def chunk_size(n_tasks: int, workers: int) -> int:
    """Photos handed out at a time: one by one for small batches (a photo takes about a second,
    a hand-out a millisecond, and the last worker to finish waits for one photo only); up to 8
    for large batches, still at least 16 shares per worker."""
    return max(1, min(8, n_tasks // max(1, workers * 16)))


#: libraries a reader may import only when first used; imported once in the fork server
LAZY_LIBRARIES = ("numpy", "cv2", "scipy.ndimage", "scipy.optimize", "scipy.signal", "scipy.stats",
                  "skimage.measure", "skimage.feature", "skimage.filters", "PIL.Image", "pillow_heif")


def preload_modules(reader: Reader) -> list[str]:
    """What the fork server imports before forking workers: the reader's module, its sibling
    modules (imported lazily inside functions) and the usual numerical libraries, so that a
    new worker's first photo costs no import time."""
    names = ["critline.batch.work", *LAZY_LIBRARIES]
    module = getattr(reader, "__module__", None)
    if module and module != "__main__":
        names.append(module)
        package = module.rpartition(".")[0]
        if package:
            try:
                pkg = importlib.import_module(package)
                names += [f"{package}.{m.name}" for m in pkgutil.iter_modules(getattr(pkg, "__path__", []))]
            except ImportError:
                pass
    return list(dict.fromkeys(names))


def _context(reader: Reader):
    """``forkserver`` with the reader's module preloaded: workers start without importing it again."""
    methods = multiprocessing.get_all_start_methods()
    if "forkserver" in methods:
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(preload_modules(reader))
        return ctx
    return multiprocessing.get_context("spawn")


def prepare_workers(reader: Reader) -> None:
    """Start the fork server now (it imports the reader while this process does other work).

    Workers are forked from it later with everything already imported; the
    server lives as long as this process and serves later batches too.
    """
    ctx = _context(reader)
    if ctx.get_start_method() == "forkserver":
        from multiprocessing import forkserver

        # one thread per worker: the processes are the parallelism, and numerical libraries
        # read these at import (which happens in the server), so they are set for its start
        saved = {k: os.environ.get(k) for k in _THREAD_VARIABLES}
        os.environ.update({k: "1" for k in _THREAD_VARIABLES})
        try:
            forkserver.ensure_running()
        except OSError:
            pass  # the pool will try again and report
        finally:
            for k, v in saved.items():
                if v is None:
                    os.environ.pop(k, None)
                else:
                    os.environ[k] = v


_THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def read_many(tasks: Sequence[ReadTask], *, reader: Reader, instrument=None, calibration=None,
              workers: int | None = None,
              on_result: Callable[[ReadTask, PhotoReading, str | None], None] | None = None,
              keep: bool = True) -> list[tuple[PhotoReading, str | None]]:
    """Read ``tasks`` with ``workers`` processes; results in task order.

    ``on_result`` is called in this process for every finished photo (progress,
    cache writes) as soon as its chunk is back.  With ``keep=False`` the results
    are handed to ``on_result`` only and the returned list holds None (a large
    batch then does not hold every full reading until the end).
    """
    tasks = list(tasks)
    workers = default_workers() if workers is None else int(workers)
    if workers < 1:
        raise CritlineError(f"workers must be at least 1 (got {workers})")
    results: list[tuple[PhotoReading, str | None] | None] = [None] * len(tasks)

    def done(i, res):
        if keep:
            results[i] = res
        if on_result is not None:
            on_result(tasks[i], *res)

    if workers == 1 or len(tasks) <= 1:
        for i, t in enumerate(tasks):
            done(i, read_one(t, reader, instrument, calibration))
        return results  # type: ignore[return-value]

    prepare_workers(reader)
    size = chunk_size(len(tasks), workers)
    chunks = [list(range(i, min(i + size, len(tasks)))) for i in range(0, len(tasks), size)]
    pool = ProcessPoolExecutor(max_workers=min(workers, len(chunks)), mp_context=_context(reader),
                               initializer=_init_worker, initargs=(reader, instrument, calibration))
    try:
        pending = {pool.submit(_read_chunk, [tasks[i] for i in idx]): idx for idx in chunks}
        while pending:
            finished, _ = wait(pending, return_when=FIRST_COMPLETED)
            for fut in finished:
                idx = pending.pop(fut)
                try:
                    chunk_results = fut.result()
                except BrokenProcessPool:
                    chunk_results = _all_rejected(
                        tasks, idx, f"{WORKER_DIED} while this photo was in its share "
                        "(crash or out of memory)")
                except Exception as exc:  # e.g. a result that cannot travel between processes
                    chunk_results = _all_rejected(
                        tasks, idx, f"{READER_FAILED}{type(exc).__name__}: {exc})")
                for i, res in zip(idx, chunk_results, strict=True):
                    done(i, res)
    except BaseException:
        # interrupted (Ctrl-C) or failing here: the results so far are already handed on;
        # stop the workers this call started instead of waiting for their shares
        processes = list((getattr(pool, "_processes", None) or {}).values())
        pool.shutdown(wait=False, cancel_futures=True)
        for proc in processes:
            if proc.is_alive():
                proc.terminate()
        raise
    pool.shutdown(wait=True)
    return results  # type: ignore[return-value]


def _all_rejected(tasks, idx, reason):
    return [(rejected(tasks[i].display, tasks[i].sha256, reason), None) for i in idx]
