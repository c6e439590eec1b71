"""White light: the reader's 589.3 nm reading of a coloured fringe against the yellow-green boundary.

A seeded set of synthesizer photos in white light (critline.synth.random_scene
with ``light='white'``: CIE illuminant A, the CIE 1931 colour matching
functions as the camera's response, dispersion of the N-LASF31A prism, the
contact liquid and the stone) across the whole envelope of design.md, read by
critline.photo.read_photo without a calibration.  Every true stone edge below
the liquid is matched with the nearest reported stone edge (within 0.02);
the error is against the stone's index at 589.3 nm from the truth sidecar.

Beside it, on the same edges: the simple yellow-green boundary convention
(critline.photo.whitelight.yellow_green_boundary: half-brightness point of the
mean of the white-balanced red and green channels), and the luminance onset
that the reader gave before the white-light method.

HELD OUT: the white-light method was developed on 1-D profiles of seeds 0-59
and on photos of seeds 0-15 only.  Seeds 300000-300119 were read before and
after one change (the channels' own fringe check also runs when the coarse
check of critline.photo.edges saw a channel shift but called the light
monochromatic; motivated by development seed 14); seeds 400000-400079 were
first read with the code of 0639177.  The clipping and fringe changes of
62f96c3 and bddb192 were tuned on seeds 500000-500299 (white) and checked for
false white calls on sodium seeds 510000-510159; seeds 410000-410199 were first
read with 62f96c3, seeds 420000-420199 first with bddb192, seeds
430000-430199 first with 8300f88 (p95 0.00356).  Both 420000-420199 and
430000-430199 have since been looked at and are tuning ranges: the fringe
pairing, clipped-channel choice and unknown-light changes of 0e34dd0 and
ffa04bc were tuned on 430000-430199 and 500000-500199 (white) and checked on
sodium seeds 510000-510079.  Seeds 440000-440199 (the default) were first read
with c36f588: p95 0.00254 (90% bootstrap 0.00152-0.00316; target 0.002 not
met), 2-sigma coverage 99.3% of 135, yellow-green convention p95 0.00656;
photos without a clipping flag p95 0.00100 (102 edges), flagged 0.00407 (33).
440000-440199 has been read since and is no longer held out.  The censored fit of
clipped channels and the clipped-channel rules of 5a384a8 and 7ede085 were tuned
on 430000-430199 and 450000-450199 (white; 450000-450199 rendered for it) and
checked on sodium seeds 120000-120199 (no photo changed); with 7ede085 the tuning
ranges read p95 0.00152 (430000-430199; flagged 0.00157, 2-sigma 98.6%) and 0.00248
(450000-450199; flagged 0.00257, 2-sigma 95.7%).  Seeds 460000-460199
(the default) were first read with 7ede085: p95 0.00321 (90% bootstrap
0.00227-0.00577; target 0.002 not met), 2-sigma coverage 98.0% of 153,
yellow-green convention p95 0.00743; photos without a clipping flag p95 0.00277
(117 edges, 99.1% within 2 sigma), flagged 0.00466 (36); channel method with a
channel clipped at the edge p95 0.00177 (73).  The code before 5a384a8, read on
the same photos afterwards for comparison only: p95 0.00360, flagged 0.00472,
over-exposed channel method 0.00271.  Nothing was tuned on the held-out ranges; a
later change needs a fresh range (``--first``).

    python bench/bench_white.py                      # held-out set 460000-460199
    python bench/bench_white.py --first 500000 --count 300   # the tuning range
    python bench/bench_white.py --first 0 --count 40 # development range
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

#: Reader flags that say a highlight or a colour channel was clipped at full scale.
CLIP_FLAGS = {"clipped", "channel_clipped", "clipped_highlights"}


def _render(args):
    seed, folder, max_mp = args
    from critline.synth import random_scene, write_photo

    scene = random_scene(seed, light="white")
    if max_mp and scene.width * scene.height / 1e6 > max_mp:
        scene = random_scene(seed, light="white", megapixels=max_mp)
    path = Path(folder) / f"white-{seed}.jpg"
    if not path.with_suffix(".json").exists():
        write_photo(path, scene, seed)
    return str(path)


def _read(path):
    from critline.photo import read_photo

    return path, read_photo(path).to_json()


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--first", type=int, default=460000)
    ap.add_argument("--count", type=int, default=200)
    ap.add_argument("--max-mp", type=float, default=6.0, help="frames drawn larger are re-drawn at this size")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--folder", type=Path, default=None, help="keep the photos here (reused if present)")
    ap.add_argument("--verbose", action="store_true")
    args = ap.parse_args(argv)
    folder = args.folder or Path(tempfile.mkdtemp(prefix="critline-white-"))
    folder.mkdir(parents=True, exist_ok=True)
    seeds = list(range(args.first, args.first + args.count))
    with ProcessPoolExecutor(args.workers) as ex:
        paths = list(ex.map(_render, [(s, str(folder), args.max_mp) for s in seeds]))
    with ProcessPoolExecutor(args.workers) as ex:
        results = list(ex.map(_read, paths))

    err, err_yg, err_lum, z, missed, lights, rejected, no_dispersion = [], [], [], [], 0, {}, 0, 0
    err_method, err_other, err_over, err_exposed, err_same = [], [], [], [], []
    err_flag_clip, err_no_clip, z_no_clip = [], [], []
    for path, res in results:
        truth = json.loads(Path(path).with_suffix(".json").read_text())
        lights[res["light"]] = lights.get(res["light"], 0) + 1
        if res["status"] == "rejected":
            rejected += 1
        white = {round(d["value"], 6): d for d in res["quality"].get("white_light_edges", [])}
        stones = [e for e in res["edges"] if e["kind"] == "stone"]
        for te in truth["edges"]:
            if te["kind"] != "stone" or truth["status"] != "ok":
                continue
            best = min(stones, key=lambda e: abs(e["ri"] - te["ri"])) if stones else None
            if best is None or abs(best["ri"] - te["ri"]) > 0.02:
                missed += 1
                continue
            e = best["ri"] - te["ri"]
            err.append(e)
            z.append(abs(e) / best["uncertainty"])
            if CLIP_FLAGS & set(res["quality"]["flags"]):
                err_flag_clip.append(e)
            else:
                err_no_clip.append(e)
                z_no_clip.append(abs(e) / best["uncertainty"])
            d = min(white.values(), key=lambda d: abs(d["value"] - best["ri"]), default=None)
            method = d is not None and abs(d["value"] - best["ri"]) < 0.003 and \
                d.get("white_light_method") == "channel_cauchy"
            (err_method if method else err_other).append(e)
            if method:
                (err_over if d.get("overexposed") else err_exposed).append(e)
            if d is not None and abs(d["value"] - best["ri"]) < 0.003:
                if d.get("yellow_green_boundary") is not None:
                    err_yg.append(d["yellow_green_boundary"] - te["ri"])
                    err_same.append(e)  # the reading on the edges the convention could be read on
                if d.get("luminance_onset") is not None:
                    err_lum.append(d["luminance_onset"] - te["ri"])
                if d.get("stone_dispersion_fc") is None:
                    no_dispersion += 1
            if args.verbose:
                print(Path(path).name, f"true {te['ri']:.4f} read {best['ri']:.4f} +- {best['uncertainty']:.4f}",
                      res["light"], ",".join(res["quality"]["flags"]), file=sys.stderr)

    def line(name, xs, target=None):
        a = np.abs(np.asarray(xs))
        if a.size == 0:
            print(f"{name}: no edges")
            return
        tgt = f" (target <= {target})" if target else ""
        print(f"{name}: n={a.size} median={np.median(a):.5f} p95={np.percentile(a, 95):.5f}{tgt} "
              f"max={a.max():.5f} mean signed={np.mean(xs):+.5f}")

    print(f"photos: {len(results)} (seeds {args.first}-{args.first + args.count - 1}, white light, "
          f"held out unless stated; frames <= {args.max_mp} MP)")
    print(f"light detected: {lights}; rejected: {rejected}; true stone edges missed: {missed}")
    line("589.3 nm reading (channel edges + Cauchy), abs error", err, 0.002)
    line("  of which read by the channel method            ", err_method)
    line("    no channel clipped at the edge               ", err_exposed)
    line("    over-exposed (a channel clipped at the edge) ", err_over)
    line("  of which white light not recognised (luminance)", err_other)
    line("  photos flagged clipped (channel or highlights) ", err_flag_clip)
    line("  photos without a clipping flag                 ", err_no_clip)
    if z_no_clip:
        print(f"    of which within 2 x stated uncertainty: {np.mean(np.asarray(z_no_clip) <= 2):.1%}")
    line("yellow-green boundary convention, abs error     ", err_yg)
    line("  589.3 nm reading on those same edges           ", err_same)
    line("luminance onset (no white-light method), abs error", err_lum)
    if z:
        za = np.asarray(z)
        print(f"error within 2 x stated uncertainty: {np.mean(za <= 2):.1%} of {za.size}")
    if err and err_yg:
        print(f"p95 ratio yellow-green / 589.3 nm reading: "
              f"{np.percentile(np.abs(err_yg), 95) / np.percentile(np.abs(err), 95):.1f}")
        # sampling uncertainty of a 95th percentile over this many edges: bootstrap over the edges
        boot = np.random.default_rng(0).choice(np.abs(err), size=(2000, len(err)))
        lo, hi = np.percentile(np.percentile(boot, 95, axis=1), [5, 95])
        print(f"p95 of the 589.3 nm reading, 90% bootstrap interval: {lo:.5f} - {hi:.5f}")
        print(f"SUMMARY p95 |error|: 589.3 nm reading {np.percentile(np.abs(err), 95):.5f} (target <= 0.002), "
              f"yellow-green boundary convention {np.percentile(np.abs(err_yg), 95):.5f}; 2-sigma coverage "
              f"{np.mean(np.asarray(z) <= 2):.1%}")
    print(f"edges without a meaningful dispersion estimate: {no_dispersion}")


if __name__ == "__main__":
    main()
