"""Batch throughput: reading a parcel with worker processes against one process.

Renders a small invented parcel with the synthesizer (stones of quartz-like,
spinel-like and tourmaline-like indices, a few rotations and polariser settings,
frames of about one megapixel), then reads it twice with :func:`critline.batch.run_batch`
ignoring the cache: once in this process (``workers=1``) and once with worker
processes (default 2).  Prints both times, photos per second and the speed-up
measured in this one run (target: >= 1.7x on 2 cores), and checks that both
runs gave the same readings.

Usage::

    python bench/bench_batch.py [--photos 24] [--megapixels 1.0] [--workers 2] [--keep DIR] [--no-overlays]

The machine's load average is printed too, and the CPU seconds the photos took in
each mode with the average number of cores kept busy: other work on the same
cores lowers the speed-up, and the wall-clock figure is only meaningful on
otherwise idle cores (the busy-cores figures show how much of the machine each
mode actually got).
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

# invented parcel: (stone folder, principal ray indices at one rotation), values from memory
STONES = (
    ("bench-quartz-like", (1.5442, 1.5533)),
    ("bench-spinel-like", (1.7180,)),
    ("bench-tourmaline-like", (1.6240, 1.6440)),
)
SETTINGS = (("none", "both"), ("pol0", "low"), ("pol90", "high"))


def render_parcel(folder: Path, n_photos: int, megapixels: float) -> int:
    from critline.synth import Scene, write_photo
    from critline.synth.scene import frame_size

    width, height = frame_size(megapixels)
    count = 0
    rotation = 0
    while count < n_photos:
        for stone, ris in STONES:
            for tag, polariser in SETTINGS:
                if count >= n_photos:
                    break
                if len(ris) == 1 and polariser != "both":
                    continue
                scene = Scene(stone_ris=ris, polariser=polariser, width=width, height=height,
                              axis_angle_deg=90.0 + 7.0 * count)
                write_photo(folder / stone / f"r{rotation:03d}_{tag}.jpg", scene, seed=1000 + count)
                count += 1
        rotation += 30
    return count


CPU_LOG = "CRITLINE_BENCH_CPU_LOG"


def cpu_timed_reader(path, instrument=None, calibration=None, overlay_dir=None):
    """The photo reader, logging the CPU seconds each photo took in whichever process read it."""
    from critline.batch.work import default_reader

    t0 = time.process_time()
    reading = default_reader()(path, instrument, calibration, overlay_dir)
    with open(os.environ[CPU_LOG], "a") as fh:
        fh.write(f"{time.process_time() - t0}\n")
    return reading


def timed_batch(folder: Path, out: Path, workers: int, overlays: bool = True):
    """Wall time, result, and the CPU seconds the photos took (summed over processes)."""
    from critline.batch import run_batch

    log = Path(os.environ[CPU_LOG])
    log.write_text("")
    t0 = time.perf_counter()
    result = run_batch(folder, out_dir=out, workers=workers, fresh=True, overlays=overlays,
                       reader=cpu_timed_reader)
    wall = time.perf_counter() - t0
    cpu = sum(float(x) for x in log.read_text().split())
    return wall, result, cpu


def signature(result):
    return [(p.item.display, p.reading.status,
             tuple(round(e.ri, 4) for e in p.reading.edges))
            for s in result.stones for p in s.photos]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--photos", type=int, default=24)
    ap.add_argument("--megapixels", type=float, default=1.0)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--keep", type=Path, default=None, help="render into this folder and keep it")
    ap.add_argument("--no-overlays", action="store_true", help="do not write marked-up photos")
    args = ap.parse_args(argv)

    tmp = Path(tempfile.mkdtemp(prefix="critline-bench-batch-"))
    folder = args.keep or (tmp / "parcel")
    os.environ[CPU_LOG] = str(tmp / "cpu.log")  # set before the fork server starts
    from critline.batch.work import default_reader, prepare_workers

    # the fork server preloads what the real reader needs (the timing wrapper lives in __main__)
    prepare_workers(default_reader())
    try:
        t0 = time.perf_counter()
        n = render_parcel(folder, args.photos, args.megapixels)
        print(f"rendered {n} photos of {args.megapixels:g} MP in {time.perf_counter() - t0:.1f} s")
        print(f"cores available: {len(os.sched_getaffinity(0))}, load average before: "
              f"{', '.join(f'{x:.2f}' for x in os.getloadavg())}")
        # warm-up of both modes on a few photos: imports in this process and in the fork
        # server happen once per command, so they are timed apart from the throughput
        overlays = not args.no_overlays
        few = tmp / "few"
        stone = sorted(p for p in folder.iterdir() if p.is_dir())[0]
        shutil.copytree(stone, few / stone.name)
        w1, _, _ = timed_batch(few, tmp / "warm1", 1, overlays)
        w2, _, _ = timed_batch(few, tmp / "warm2", args.workers, overlays)
        print(f"first use (imports, fork server start) on {sum(1 for _ in few.rglob('*.jpg'))} photos: "
              f"one process {w1:.2f} s, {args.workers} workers {w2:.2f} s (paid once per command)")
        t1, r1, c1 = timed_batch(folder, tmp / "one", 1, overlays)
        t2, r2, c2 = timed_batch(folder, tmp / "many", args.workers, overlays)
        same = signature(r1) == signature(r2)
        statuses = {}
        for _, status, _ in signature(r1):
            statuses[status] = statuses.get(status, 0) + 1
        ratio = t1 / t2
        print(f"photo results: {statuses} (marked-up photos: {'yes' if overlays else 'no'})")
        print(f"one process:      {t1:7.2f} s  ({n / t1:5.2f} photos/s); reading CPU {c1:6.2f} s "
              f"({c1 / n:.2f} s/photo), {c1 / t1:.2f} cores busy on average")
        print(f"{args.workers} worker processes: {t2:7.2f} s  ({n / t2:5.2f} photos/s); reading CPU "
              f"{c2:6.2f} s ({c2 / n:.2f} s/photo), {c2 / t2:.2f} cores busy on average")
        print(f"speed-up {args.workers} workers / one process: {ratio:.2f}x "
              f"(target >= 1.7x on 2 cores: {'met' if ratio >= 1.7 else 'NOT met'})")
        print(f"same readings in both runs: {same}")
        print(f"load average after: {', '.join(f'{x:.2f}' for x in os.getloadavg())}")
        return 0 if same else 1
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
