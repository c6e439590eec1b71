"""Soak: thousands of synthesized photos through `critline batch`, memory measured start and end.

Renders ``--photos`` small eyepiece photos (0.3-1 megapixel frames, scenes
drawn across the whole envelope by :func:`critline.synth.random_scene`) into
a temporary folder of invented stones (``--per-stone`` photos each), then runs
the real command line, ``critline batch FOLDER --out OUT --json --fresh``, as a
child process and watches it from outside:

* the resident memory (``VmRSS`` of ``/proc/<pid>/status``) of the command's
  process and of every process below it (the fork server and the reading
  workers), sampled every ``--interval`` seconds;
* its progress, as the number of result files in ``OUT/cache`` (one per photo,
  written as each result comes back).

"Start" is the mean of the samples taken while 5-15 % of the photos were done
(past the workers' first photos, when their imports and caches have settled),
"end" the mean while 85-100 % were done.  The soak passes when neither the
command's own memory nor the workers' total grows by more than 10 % from start
to end.  Photos per second are counted over the reading (first to last result
file) and over the whole command (start to exit, reports included).  The readings'
statuses are compared with the synthesizer's truth sidecars as a sanity figure.

Usage::

    python bench/bench_soak.py [--photos 2000] [--per-stone 8] [--workers N] [--keep DIR]
                               [--min-mp 0.3] [--max-mp 1.0] [--no-overlays]

All photos are invented (synthesized); nothing is downloaded.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

GROWTH_LIMIT = 0.10


def _render_one(args) -> str:
    """Render photo ``index`` (its own seed) into ``folder``; returns the truth status."""
    folder, index, per_stone, min_mp, max_mp = args
    import numpy as np

    from critline.synth import random_scene, write_photo

    rng = np.random.default_rng([index, 0x50AC])
    megapixels = float(rng.uniform(min_mp, max_mp))
    scene = random_scene(20_000 + index, megapixels=megapixels)
    stone = f"soak-stone-{index // per_stone:04d}"
    path = Path(folder) / stone / f"photo-{index % per_stone:02d}.jpg"
    path.parent.mkdir(parents=True, exist_ok=True)
    write_photo(path, scene, 20_000 + index)
    return stone


def render(folder: Path, n: int, per_stone: int, min_mp: float, max_mp: float, processes: int) -> float:
    t0 = time.perf_counter()
    jobs = [(str(folder), i, per_stone, min_mp, max_mp) for i in range(n)]
    with multiprocessing.get_context("spawn").Pool(processes) as pool:
        for k, _ in enumerate(pool.imap_unordered(_render_one, jobs, chunksize=8), start=1):
            if k % 200 == 0 or k == n:
                print(f"  rendered {k}/{n}", file=sys.stderr, flush=True)
    return time.perf_counter() - t0


def _rss_kib(pid: int) -> int | None:
    try:
        with open(f"/proc/{pid}/status") as fh:
            for line in fh:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1])
    except (OSError, ValueError):
        return None
    return 0


def _children_map() -> dict[int, list[int]]:
    kids: dict[int, list[int]] = {}
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat") as fh:
                text = fh.read()
        except OSError:
            continue
        # the command name may hold spaces and parentheses: the ppid follows the last ')'
        fields = text.rsplit(")", 1)[-1].split()
        if len(fields) > 1:
            kids.setdefault(int(fields[1]), []).append(int(entry))
    return kids


def descendants(pid: int) -> list[int]:
    kids = _children_map()
    out, todo = [], [pid]
    while todo:
        p = todo.pop()
        for c in kids.get(p, ()):
            out.append(c)
            todo.append(c)
    return out


def soak(folder: Path, out: Path, n: int, workers: int | None, overlays: bool, interval: float):
    cmd = [sys.executable, "-c", "from critline.cli import run; run()", "batch", str(folder), "--out", str(out), "--json", "--fresh"]
    if workers:
        cmd += ["--workers", str(workers)]
    if not overlays:
        cmd.append("--no-overlays")
    cache = out / "cache"
    samples = []  # (time, done, parent_kib, workers_kib, n_workers)
    first_result = last_result = None
    t0 = time.perf_counter()
    with open(out.parent / "soak-stdout.json", "wb") as stdout, open(out.parent / "soak-stderr.txt", "wb") as stderr:
        proc = subprocess.Popen(cmd, stdout=stdout, stderr=stderr)
        while proc.poll() is None:
            time.sleep(interval)
            try:
                done = sum(1 for _ in os.scandir(cache))
            except OSError:
                done = 0
            now = time.perf_counter() - t0
            if done and first_result is None:
                first_result = now
            if done and (not samples or done > samples[-1][1]):
                last_result = now
            parent = _rss_kib(proc.pid)
            below = descendants(proc.pid)
            worker_kib = sum(v for v in (_rss_kib(p) for p in below) if v)
            if parent:
                samples.append((now, done, parent, worker_kib, len(below)))
        code = proc.returncode
    wall = time.perf_counter() - t0
    return code, wall, first_result, last_result, samples


def window_mean(samples, n, lo, hi, index):
    """Mean of the samples taken while lo..hi of the photos were done (results come back in
    chunks, so a small run may skip the window: then the first three samples past ``lo``)."""
    sel = [s[index] for s in samples if lo * n <= s[1] <= hi * n]
    if not sel:
        sel = [s[index] for s in samples if s[1] >= lo * n][:3]
    return statistics.fmean(sel) if sel else None, len(sel)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--photos", type=int, default=2000)
    ap.add_argument("--per-stone", type=int, default=8)
    ap.add_argument("--workers", type=int, default=None, help="reading processes (default: all cores)")
    ap.add_argument("--min-mp", type=float, default=0.3)
    ap.add_argument("--max-mp", type=float, default=1.0)
    ap.add_argument("--render-processes", type=int, default=max(1, min(2, os.cpu_count() or 1)))
    ap.add_argument("--interval", type=float, default=0.5, help="seconds between memory samples")
    ap.add_argument("--no-overlays", action="store_true")
    ap.add_argument("--keep", type=Path, default=None, help="work in this folder and keep it")
    args = ap.parse_args(argv)

    work = args.keep or Path(tempfile.mkdtemp(prefix="critline-soak-"))
    folder, out = work / "photos", work / "out"
    if out.exists():
        shutil.rmtree(out)
    folder.mkdir(parents=True, exist_ok=True)
    try:
        existing = sum(1 for _ in folder.rglob("*.jpg"))
        if existing != args.photos:
            shutil.rmtree(folder)
            folder.mkdir(parents=True)
            print(f"rendering {args.photos} photos ({args.min_mp}-{args.max_mp} MP) into {folder}",
                  file=sys.stderr, flush=True)
            t_render = render(folder, args.photos, args.per_stone, args.min_mp, args.max_mp,
                              args.render_processes)
            print(f"rendered in {t_render:.0f} s", file=sys.stderr, flush=True)
        out.mkdir(parents=True)
        load_before = os.getloadavg()
        code, wall, first, last, samples = soak(folder, out, args.photos, args.workers,
                                                not args.no_overlays, args.interval)
        load_after = os.getloadavg()
        n = args.photos
        print(f"critline batch exit code {code}; {n} photos; wall {wall:.1f} s; "
              f"load average {load_before[0]:.1f} before, {load_after[0]:.1f} after "
              f"({os.cpu_count()} cores)")
        if first is not None and last is not None and last > first:
            print(f"photos per second: {n / wall:.2f} (whole command, reports included), "
                  f"{(n - 1) / (last - first):.2f} (first to last result)")
        ok = code in (0, 3)
        for label, index in (("command process", 2), ("workers (total)", 3)):
            start, n_start = window_mean(samples, n, 0.05, 0.15, index)
            end, n_end = window_mean(samples, n, 0.85, 1.0, index)
            peak = max((s[index] for s in samples), default=0)
            if start and end:
                growth = end / start - 1.0
                verdict = "ok" if growth <= GROWTH_LIMIT else "GROWS"
                ok &= growth <= GROWTH_LIMIT
                print(f"RSS {label}: start {start / 1024:.1f} MiB ({n_start} samples), end "
                      f"{end / 1024:.1f} MiB ({n_end} samples), growth {100 * growth:+.1f} % "
                      f"(limit +{100 * GROWTH_LIMIT:.0f} %) {verdict}; peak {peak / 1024:.1f} MiB")
            else:
                ok = False
                print(f"RSS {label}: too few samples (start {n_start}, end {n_end}); run more photos")
        if last is not None:
            # after the last result: stone analysis and the reports (they count in the "end" window)
            tail = [s[2] for s in samples if s[0] > last]
            if tail:
                print(f"after the last result (analysis, reports): {wall - last:.1f} s, command RSS "
                      f"mean {statistics.fmean(tail) / 1024:.1f} MiB, peak {max(tail) / 1024:.1f} MiB "
                      f"({len(tail)} samples)")
        n_procs = sorted({s[4] for s in samples})
        print(f"processes below the command during the run: {n_procs}")
        try:
            doc = json.loads((out.parent / "soak-stdout.json").read_text())
            statuses: dict[str, int] = {}
            agree = total = 0
            for stone in doc["stones"]:
                for r in stone["readings"]:
                    statuses[r["status"]] = statuses.get(r["status"], 0) + 1
                    truth = folder / Path(r["photo"]).with_suffix(".json")
                    if truth.exists():
                        total += 1
                        agree += json.loads(truth.read_text())["status"] == r["status"]
            problems = len(doc.get("problems", []))
            print(f"statuses: {dict(sorted(statuses.items()))}; problems listed {problems}; "
                  f"status agrees with the synthesizer's truth for {agree}/{total}")
            ok &= sum(statuses.values()) == n
        except (OSError, ValueError, KeyError) as exc:
            print(f"could not read the batch document: {exc}")
            ok = False
        print("SOAK", "PASSED" if ok else "FAILED")
        return 0 if ok else 1
    finally:
        if args.keep is None:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
