"""Accuracy, honesty and speed of the 1-D shadow-edge analysis (critline.photo.edges).

Profiles are made here from the physics (Fresnel reflectance of critline.optics,
blur, noise), across the envelope of design.md expressed on the scale-value axis:
blur sigma 0.0003-0.004, noise 0.1-2 % of the bright level, tone exponent
0.8-1.3, vignetting slopes, sample spacing 0.0001-0.002.  Besides the exact
model, each batch is repeated with a mismatch the fit does not contain: the
synthesizer's prism/liquid/stone stack, a defocus disc, a motion box, unsharp
masking, a residual tone curve, a wrong prism index.  Printed: bias, spread and
the coverage of the stated 2-sigma interval per class, the half-brightness bias,
the separation at which two edges are resolved, and the time per call.

    python bench/edges_bench.py            # all sections (a few minutes)
    python bench/edges_bench.py --quick    # fewer profiles
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

import numpy as np
from scipy.ndimage import convolve1d, gaussian_filter1d

from critline.optics import unpolarised_reflectance
from critline.photo.edges import analyse_profile

N_PRISM = 1.88


def render(values, onsets, sigma, *, kind="exact", weights=None, low=0.03, high=1.0, g=1.0,
           trend=0.0, noise=0.002, seed=0, prism=N_PRISM, liquid_ri=1.79):
    """Profile along the scale with one blur/shape kind (see module docstring)."""
    rng = np.random.default_rng(seed)
    step = min(sigma / 12.0, 2e-5)
    t = np.arange(values[0] - 0.06, values[-1] + 0.06, step)
    weights = weights or [1.0 / len(onsets)] * len(onsets)
    lit = np.zeros_like(t)
    for n, w in zip(onsets, weights, strict=True):
        if kind == "stack":
            from critline.synth.physics import stack_reflectance
            r = stack_reflectance(t, n, liquid_ri, prism)
        elif kind == "prism_1.80":
            r = unpolarised_reflectance(t, n, 1.80)
        else:
            r = unpolarised_reflectance(t, n, prism)
        lit += w * r**g
    b = (low + (high - low) * lit) * (1.0 + trend * (t - t.mean()) / 0.25)
    if kind == "disc":  # defocus: the 1-D projection of a uniform disc, same variance
        radius = 2.0 * sigma
        x = np.arange(-radius, radius + step, step)
        kernel = np.sqrt(np.maximum(radius * radius - x * x, 0.0))
        b = convolve1d(b, kernel / kernel.sum(), mode="nearest")
    elif kind == "motion":  # a box of the same variance
        width = sigma * np.sqrt(12.0)
        kernel = np.ones(max(int(width / step), 1))
        b = convolve1d(b, kernel / kernel.sum(), mode="nearest")
    else:
        b = gaussian_filter1d(b, sigma / step, mode="nearest")
    if kind.startswith("sharpen"):
        amount = float(kind.split("_")[1])
        b = b + amount * (b - gaussian_filter1d(b, 2 * sigma / step, mode="nearest"))
    if kind.startswith("tone"):
        b = np.clip(b, 0, None) ** float(kind.split("_")[1])
    return np.interp(values, t, b) + rng.normal(0.0, noise, values.size)


def random_single(rng):
    span = rng.uniform(0.12, 0.5)
    spacing = float(np.exp(rng.uniform(np.log(0.0001), np.log(0.002))))
    count = int(np.clip(span / spacing, 120, 4000))
    lo = rng.uniform(1.30, 1.80 - span)
    values = np.linspace(lo, lo + span, count)
    onset = rng.uniform(lo + 0.05, lo + span - 0.03)
    sigma = float(np.exp(rng.uniform(np.log(0.0003), np.log(0.004))))
    kw = dict(low=rng.uniform(0.0, 0.2), high=rng.uniform(0.5, 1.0), g=rng.uniform(0.8, 1.3),
              trend=rng.uniform(-0.3, 0.3), noise=float(np.exp(rng.uniform(np.log(0.001),
                                                                         np.log(0.02)))),
              seed=int(rng.integers(1 << 30)))
    return values, onset, sigma, kw


KINDS = ("exact", "stack", "prism_1.80", "disc", "motion", "sharpen_0.5", "sharpen_1.0",
         "tone_0.9", "tone_1.15")


def accuracy(count):
    print(f"\n== single edge: {count} random profiles per class (seeded) ==")
    print(f"{'class':12s} {'found':>6s} {'bias':>9s} {'spread':>8s} {'med|err|':>9s} "
          f"{'p95|err|':>9s} {'cover2u':>8s} {'med u':>8s} {'half bias':>9s}")
    for kind in KINDS:
        rng = np.random.default_rng(4242)
        errs, zs, us, half = [], [], [], []
        found = 0
        for _ in range(count):
            values, onset, sigma, kw = random_single(rng)
            y = render(values, [onset], sigma, kind=kind, **kw)
            a = analyse_profile(values, y, kw["noise"])
            stones = [e for e in a.edges if e.kind == "stone"]
            if len(stones) != 1:
                zs.append(np.inf)
                continue
            found += 1
            e = stones[0]
            errs.append(e.value - onset)
            zs.append((e.value - onset) / e.uncertainty)
            us.append(e.uncertainty)
            if e.figures.get("half_brightness") is not None:
                half.append(e.figures["half_brightness"] - onset)
        errs = np.array(errs)
        cover = float(np.mean(np.abs(np.array(zs)) <= 2.0))
        print(f"{kind:12s} {found / count:6.1%} {errs.mean():+9.5f} {errs.std():8.5f} "
              f"{np.median(np.abs(errs)):9.5f} {np.percentile(np.abs(errs), 95):9.5f} "
              f"{cover:8.1%} {np.median(us):8.5f} {np.median(half):+9.5f}")
    print("cover2u: share of profiles (missed or extra edges count as misses) whose onset lies"
          " within 2 stated sigma")


def separation(trials):
    print(f"\n== two equal edges without a polariser: share resolved ({trials} seeds, "
          "noise 0.002, spacing 0.00025) ==")
    values = np.linspace(1.30, 1.80, 2000)
    seps = (0.001, 0.002, 0.003, 0.004, 0.006, 0.009)
    print("sigma   " + " ".join(f"{s:>7.3f}" for s in seps))
    for sigma in (0.0005, 0.001, 0.0015, 0.002):
        row = []
        for sep in seps:
            ok = 0
            for seed in range(trials):
                n = 1.55 + 0.013 * seed
                y = render(values, [n, n + sep], sigma, seed=seed)
                a = analyse_profile(values, y, 0.002)
                got = sorted(e.value for e in a.edges if e.kind == "stone")
                if len(got) == 2 and abs(got[0] - n) < 0.001 and abs(got[1] - n - sep) < 0.001:
                    ok += 1
            row.append(ok / trials)
        print(f"{sigma:.4f}  " + " ".join(f"{r:7.0%}" for r in row))
    false_pairs = 0
    total = 0
    for kind in KINDS:
        rng = np.random.default_rng(99)
        for _ in range(trials):
            values, onset, sigma, kw = random_single(rng)
            a = analyse_profile(values, render(values, [onset], sigma, kind=kind, **kw), kw["noise"])
            total += 1
            false_pairs += sum(e.kind == "stone" for e in a.edges) > 1
    print(f"single edges reported as two (all classes): {false_pairs}/{total}")


def timing(repeats):
    print(f"\n== time per call, 2000-sample profile (median of {repeats}; wall clock and CPU"
          " time of this process, which differ when other work shares the machine) ==")
    values = np.linspace(1.30, 1.80, 2000)
    cases = {
        "one edge": render(values, [1.544], 0.001, seed=1),
        "one edge, blurred": render(values, [1.544], 0.003, seed=1),
        "two edges 0.009": render(values, [1.544, 1.553], 0.001, seed=1),
        "over the limit": render(values, [1.79], 0.001, seed=1),
        "no edge": 0.8 + np.random.default_rng(1).normal(0, 0.002, values.size),
    }
    rgb = np.stack([render(values, [1.544], 0.001, seed=s) for s in (1, 2, 3)])
    cases["one edge + rgb"] = (rgb.mean(axis=0), rgb)
    for name, case in cases.items():
        y, colours = case if isinstance(case, tuple) else (case, None)
        wall, cpu = [], []
        for _ in range(repeats):
            t0, c0 = time.perf_counter(), time.process_time()
            analyse_profile(values, y, 0.002, rgb=colours)
            wall.append(time.perf_counter() - t0)
            cpu.append(time.process_time() - c0)
        print(f"{name:20s} wall {statistics.median(wall) * 1e3:7.1f} ms   "
              f"cpu {statistics.median(cpu) * 1e3:7.1f} ms")
    print(f"load average during the run: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args()
    accuracy(60 if args.quick else 300)
    separation(4 if args.quick else 10)
    timing(5 if args.quick else 20)


if __name__ == "__main__":
    main()
