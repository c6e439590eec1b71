"""Synthesizer speed and memory: render times for 1, 12 and 48 MP frames, and the samples' size.

Prints figures measured in this run (wall-clock seconds, peak resident memory). Not a test.
Usage: python bench/bench_synth.py [--repeat N]
"""

from __future__ import annotations

import argparse
import os
import resource
import time
from pathlib import Path

from critline.synth import random_scene, render
from critline.synth.colour_response import white_weights


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=1)
    args = parser.parse_args()
    white_weights()  # load the colour tables once (import of colour-science), not timed
    render(random_scene(0, megapixels=0.1), 0)
    print(f"load average before: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    print(f"megapixels light   field_d  wall s (best of {args.repeat})  cpu s")
    times = {}
    for mp in (1, 12, 48):
        for light in ("sodium", "white"):
            scene = random_scene(7, megapixels=mp, light=light, field_diameter=0.9, defocus=0.003,
                                 motion=0.002, denoise=0.5, sharpen=0.5)
            best, cpu = min(_timed(scene) for _ in range(args.repeat))
            times[(mp, light)] = best
            print(f"{mp:10d} {light:7s} {scene.field_diameter:7.2f}  {best:8.2f}  {cpu:18.2f}")
    print(f"ratio 48 MP / 1 MP (sodium): {times[(48, 'sodium')] / times[(1, 'sodium')]:.1f}")
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak resident memory: {peak:.0f} MB")
    samples = Path(__file__).resolve().parents[1] / "samples"
    if samples.exists():
        files = [p for p in samples.rglob("*") if p.is_file()]
        photos = [p for p in files if p.suffix == ".jpg"]
        total = sum(p.stat().st_size for p in files)
        print(f"samples: {len(photos)} photos, {len(files)} files, {total / 1e6:.2f} MB on disk "
              f"(photos {sum(p.stat().st_size for p in photos) / 1e6:.2f} MB)")


def _timed(scene) -> tuple[float, float]:
    t0, c0 = time.perf_counter(), time.process_time()
    render(scene, 1)
    return time.perf_counter() - t0, time.process_time() - c0


if __name__ == "__main__":
    main()
