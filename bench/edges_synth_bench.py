"""The edge analysis on 1-D profiles taken from the synthesizer's scenes, on the TRUE value axis.

For each seeded scene (critline.synth.random_scene) the synthesizer's own 1-D
physics along the scale (prism / liquid / stone stack, instrument blur, stray
light, uneven lamp: critline.synth.render.axis_profiles) goes through a 1-D
copy of the phone's chain: defocus (Gaussian), motion blur along the axis (box),
exposure with shot noise and clipping, the sRGB curve (IEC 61966-2-1), unsharp
masking in the tone image, 8-bit quantisation, back to linear light.  Sample
values come from the true scale map, so the figures measure the edge fit alone,
without the graduation map of the reader.  (Not reproduced: JPEG, noise
reduction, the colour mosaic, glare, dust.)

    python bench/edges_synth_bench.py                 # seeds 0-149, sodium light
    python bench/edges_synth_bench.py --light white --count 60
"""

from __future__ import annotations

import argparse
import math

import numpy as np
from scipy.ndimage import convolve1d, gaussian_filter1d

from critline.photo.edges import analyse_profile
from critline.synth import random_scene
from critline.synth.render import axis_profiles, canvas, scale_map


def srgb_encode(x):
    return np.where(x <= 0.0031308, 12.92 * x, 1.055 * np.power(np.maximum(x, 0), 1 / 2.4) - 0.055)


def srgb_decode(t):
    return np.where(t <= 0.04045, t / 12.92, ((t + 0.055) / 1.055) ** 2.4)


def scene_profile(seed, light="sodium", noise=0.002):
    scene = random_scene(seed, light=light)
    smap = scale_map(scene)
    ppu = float(min(scene.field_radius_px, 1500.0))
    size, c0, u = canvas(ppu)
    channels = axis_profiles(scene, smap, size, ppu, c0)
    inside = np.abs(u) <= 0.95
    rng = np.random.default_rng(seed + 7)
    out = []
    for ch in channels:
        x = ch.astype(float)
        if scene.defocus > 0:
            x = gaussian_filter1d(x, scene.defocus * ppu, mode="nearest")
        along = scene.motion * ppu * abs(math.cos(math.radians(scene.motion_angle_deg
                                                               - scene.axis_angle_deg)))
        if along >= 1:
            kernel = np.ones(int(round(along)) | 1)
            x = convolve1d(x, kernel / kernel.sum(), mode="nearest")
        x = x * scene.exposure
        x = np.clip(x + rng.normal(0, noise, x.size) * np.sqrt(np.maximum(x, 0.01)), 0, 1)
        t = srgb_encode(x)
        if scene.sharpen > 0:
            t = t * (1 + scene.sharpen) - scene.sharpen * gaussian_filter1d(t, 1.2, mode="nearest")
        t = np.round(np.clip(t, 0, 1) * 255) / 255
        out.append(srgb_decode(t))
    out = np.array(out)
    rgb = out[:, inside] if out.shape[0] == 3 else None
    return scene, smap.value(u)[inside], out.mean(axis=0)[inside], rgb


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--first", type=int, default=0)
    ap.add_argument("--count", type=int, default=150)
    ap.add_argument("--light", default="sodium", choices=["sodium", "white"])
    ap.add_argument("--verbose", action="store_true")
    args = ap.parse_args()
    z, errors, clean, missed, status_wrong, lights = [], [], [], 0, 0, {}
    for seed in range(args.first, args.first + args.count):
        scene, values, y, rgb = scene_profile(seed, args.light)
        rays = [n for n, w in zip(scene.stone_ris, scene.weights, strict=True) if w > 0]
        a = analyse_profile(values, y, 0.002, liquid_ri=scene.instrument.liquid_ri, rgb=rgb)
        lights[a.light] = lights.get(a.light, 0) + 1
        below = [n for n in rays if n < scene.liquid_ri]
        truth = "ok" if below else ("over_limit" if rays else "no_edge")
        status_wrong += a.status != truth
        found = [e for e in a.edges if e.kind == "stone"]
        for n in below:
            if not values[0] + 0.02 < n < values[-1] - 0.005:
                continue
            near = [e for e in found if abs(e.value - n) < 0.006]
            if not near:
                missed += 1
                continue
            e = min(near, key=lambda e: abs(e.value - n))
            errors.append(e.value - n)
            z.append((e.value - n) / e.uncertainty)
            if not {"clipped", "blurred", "low_contrast", "white_light"} & set(a.flags):
                clean.append(abs(e.value - n))
        if args.verbose:
            print(seed, truth, a.status, a.light, a.flags,
                  [(round(e.value, 4), round(e.uncertainty, 4), e.kind) for e in a.edges], rays)
    errors = np.abs(np.array(errors))
    print(f"scenes {args.count} (seeds {args.first}-{args.first + args.count - 1}, {args.light} light)")
    print(f"stone edges found: {len(errors)}, missed: {missed}")
    print(f"within 2 stated sigma: {np.mean(np.abs(np.array(z)) <= 2):.1%}")
    print(f"|error| all found: median {np.median(errors):.5f} p95 {np.percentile(errors, 95):.5f}")
    if clean:
        print(f"|error| unflagged ({len(clean)}): median {np.median(clean):.5f} "
              f"p95 {np.percentile(clean, 95):.5f}")
    print(f"status wrong: {status_wrong}/{args.count}")
    print(f"light: {lights}")


if __name__ == "__main__":
    main()
