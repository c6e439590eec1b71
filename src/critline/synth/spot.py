"""The spot (distance) view: a droplet under a curved stone, seen as a small oval on the scale.

Physics
-------
A cabochon touches the prism table over a tiny area only, through a droplet
of contact liquid.  With the eye some 30 cm behind the eyepiece (domain.md,
"Practice"), the observer sees a small image of the droplet on the scale.
The curved contact spans a spread of internal angles, so the spot is a small
image of that spread: each point of it along the axis has its own scale
value ``s = N sin(theta)``, and its brightness is the table's reflectance at
that ``s`` -- the same Fresnel stack as the flat facet
(:func:`critline.synth.render.channel_profiles`).  The part of the spot below
the stone's index is dim, the part above it totally reflected and bright;
the split sits where the scale value equals the stone's RI.  Moving the head
moves the spot along the scale (:attr:`Scene.spot_value`), while the split
stays at the RI's position on the scale: the reading is taken where the spot
is half dark, half light (common practice, no source).

The rest of the field is dim and even (:attr:`Scene.spot_surround`: only the
light that misses the droplet), with the graduations visible on it.  The
droplet's outline is soft and its rim a little darker (the meniscus).
Everything after the canonical raster -- pose, blur, noise, mosaic, noise
reduction, sharpening, JPEG -- is the phone model of :mod:`critline.synth.render`.

Truth
-----
:func:`spot_truth` adds a ``spot`` entry to the ground truth and replaces the
flat-facet edges: ``view = 'spot'``, the stone's RI, the spot's centre and
size in scale units (graduations from the first printed graduation), the
dark fraction of its length, and the status: ``ok`` when the split lies
inside the spot, ``no_edge`` when the spot is wholly dark or wholly light,
``over_limit`` when the stone's index is above the liquid's.
"""

from __future__ import annotations

import dataclasses
import importlib
import json
from collections.abc import Sequence
from pathlib import Path

import cv2
import numpy as np

from critline.fileio import atomic_write_text
from critline.synth.scene import LIGHTS, Scene, random_scene

# the module, not the function of the same name that critline.synth exports
_render = importlib.import_module("critline.synth.render")

#: The split must lie at least this fraction of the spot's length inside it to count as seen.
SPLIT_MARGIN = 0.1


def spot_axes(scene: Scene) -> tuple[float, float, float]:
    """Centre ``u`` and the semi-axes along and across the scale of the spot, in field radii."""
    smap = _render.scale_map(scene)
    lo = float(smap.position(scene.spot_value - 0.5 * scene.spot_length))
    hi = float(smap.position(scene.spot_value + 0.5 * scene.spot_length))
    half_along = 0.5 * (hi - lo)
    return 0.5 * (lo + hi), half_along, half_along * scene.spot_aspect


def spot_view(scene: Scene, ppu: float, rng: np.random.Generator | None = None):
    """Linear-light canonical raster of the spot view (same contract as ``eyepiece_view``)."""
    smap = _render.scale_map(scene)
    size, c0, u = _render.canvas(ppu)
    # reflectance along the axis: the spot shows it only where the droplet is
    profiles = _render.axis_profiles(scene, smap, size, ppu, c0, illuminate=False).astype(np.float32)
    stop, field = _render.field_mask(scene, smap, u, ppu, c0)
    uc, a, b = spot_axes(scene)
    # elliptical outline, soft over spot_softness (smoothstep on the normalised radius)
    rho = cv2.sqrt(((u - np.float32(uc)) / np.float32(a))[None, :] ** 2
                   + ((u - np.float32(scene.spot_v)) / np.float32(b))[:, None] ** 2)
    soft = np.float32(max(scene.spot_softness, 0.7 / ppu) / max(min(a, b), 1e-6))
    inside = np.clip((np.float32(1.0) - rho) / soft + np.float32(0.5), 0.0, 1.0)
    inside = inside * inside * (np.float32(3.0) - np.float32(2.0) * inside)
    rim = np.float32(1.0) - np.float32(scene.spot_rim) * np.exp(
        -0.5 * ((rho - np.float32(1.0) + 1.5 * soft) / soft) ** 2).astype(np.float32)
    del rho
    lamp = _render.illumination(scene, u).astype(np.float32)[None, :]
    base = np.float32(scene.spot_surround)
    img = np.empty((profiles.shape[0], size, size), np.float32)
    for ch in range(profiles.shape[0]):
        seen = base + inside * (profiles[ch][None, :] - base) * rim
        img[ch] = field * lamp * seen
    extras = _render.finish_view(scene, img, stop, rng, ppu, c0)
    return img, c0, extras


def dark_fraction(scene: Scene) -> float:
    """Fraction of the spot's length (along the scale) below the split, 0..1."""
    split = min(scene.stone_ris[0], scene.liquid_ri) if scene.stone_ris else scene.liquid_ri
    lo = scene.spot_value - 0.5 * scene.spot_length
    return float(np.clip((split - lo) / scene.spot_length, 0.0, 1.0))


def spot_truth(scene: Scene, truth: dict) -> dict:
    """Replace the flat-facet edges of ``truth`` by the spot's truth (see the module notes)."""
    smap = _render.scale_map(scene)
    h = _render.eyepiece_to_frame(scene)
    uc, a, b = spot_axes(scene)
    ri = float(scene.stone_ris[0]) if scene.stone_ris else None
    over = ri is not None and ri >= scene.liquid_ri
    split = scene.liquid_ri if over or ri is None else ri
    frac = dark_fraction(scene)
    seen = SPLIT_MARGIN <= frac <= 1.0 - SPLIT_MARGIN
    centre_px = _render.project(h, np.array([uc]), np.array([scene.spot_v]))[0]
    step = scene.instrument.step
    spot = {
        "ri": None if ri is None else round(ri, 6),
        "split_value": round(float(split), 6),
        "split_scale_position": round(float(smap.scale_position(split)), 5),
        "centre_value": round(float(scene.spot_value), 6),
        "centre_scale_position": round(float(smap.scale_position(scene.spot_value)), 5),
        "length_scale": round(float(scene.spot_length / step), 5),
        "width_field": round(float(2 * b), 5),
        "centre_pixel": [round(float(c), 3) for c in centre_px],
        "semi_axes_field": [round(float(a), 6), round(float(b), 6)],
        "dark_fraction": round(frac, 5),
        "split_in_spot": bool(seen),
    }
    edges = []
    if seen and ri is not None:
        edges.append({"ri": round(float(split), 6), "kind": "spot",
                      "scale_position": spot["split_scale_position"],
                      "field_position": round(float(smap.position(split)), 6)})
    status = "over_limit" if over else ("ok" if seen and ri is not None else "no_edge")
    out = dict(truth)
    out.update(view="spot", spot=spot, edges=edges, status=status)
    return out


def random_spot_scene(seed: int, **overrides) -> Scene:
    """Draw a spot-view scene: a phone and instrument from :func:`random_scene`, a cabochon's droplet.

    The stone's RI is drawn over 1.43-1.77 (opal to corundum, the range of
    cabochon materials; from memory); most draws put the split inside the spot
    (single-photo reading possible), about one in six a wholly dark or wholly
    light spot.  The frame is kept to 1-16 MP (spot photos need no more), the
    surround dim (3-15 % of the bright part).
    """
    rng = np.random.default_rng([seed, 0x5B07])
    megapixels = overrides.pop("megapixels", float(np.exp(rng.uniform(np.log(1.0), np.log(16.0)))))
    base = random_scene(seed, megapixels=megapixels)
    ri = float(rng.uniform(1.43, 1.77))
    length = float(rng.uniform(0.03, 0.10))
    if rng.random() < 5 / 6:
        centre = ri + float(rng.uniform(-0.35, 0.35)) * length
    else:
        centre = ri + float(rng.choice([-1, 1])) * float(rng.uniform(0.6, 1.5)) * length
    surround = float(rng.uniform(0.03, 0.08))
    tick_far = base.axis_v + base.tick_side * base.tick_lengths[2]
    spot_v = float(rng.uniform(min(base.axis_v, tick_far), max(base.axis_v, tick_far)))
    scene = dataclasses.replace(
        base, view="spot", stone_ris=(ri,), polariser="both", ray_weights=None, stone_material=None,
        liquid_ri=max(base.liquid_ri, ri + 0.02), liquid_line=0.0,
        light=str(rng.choice(LIGHTS, p=[0.85, 0.15])),
        spot_value=centre, spot_length=length, spot_aspect=float(rng.uniform(0.5, 1.0)),
        spot_v=spot_v, spot_surround=surround, spot_rim=float(rng.uniform(0.0, 0.4)),
        spot_softness=float(rng.uniform(0.003, 0.012)), stray_light=min(base.stray_light, 0.03),
        crescent=min(base.crescent, 0.3), surround=float(rng.uniform(0.0, 0.15)) * surround)
    return dataclasses.replace(scene, **overrides) if overrides else scene


def series_values(ri: float, length: float, count: int = 5, reach: float = 0.8) -> tuple[float, ...]:
    """Spot-centre values of a head-movement series: ``count`` steps across ``ri +- reach * length``."""
    return tuple(float(x) for x in np.linspace(ri - reach * length, ri + reach * length, count))


def write_spot_series(folder, base: Scene, seed: int, centres: Sequence[float], *, vary=None,
                      suffix: str = ".jpg", stone: dict | None = None, overwrite: bool = True) -> list[Path]:
    """Render one stone's spot photos as the head moves: one photo and sidecar per spot position.

    Parameters
    ----------
    folder : path-like
        Written into (created if missing); files ``h00.jpg, h01.jpg ...``.
    base : Scene
        The stone, instrument and phone (``view='spot'``).
    centres : sequence of float
        Scale value at the spot's centre in each photo (see :func:`series_values`).
    vary : callable, optional
        ``vary(index) -> dict`` of per-photo overrides (the phone moves between shots).
    stone : dict, optional
        Facts written into every sidecar under ``stone``.

    Returns
    -------
    list of Path
        The photos written (sidecars beside them, ``.json``).
    """
    from critline.synth.photo_io import write_photo

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for i, centre in enumerate(centres):
        extra = vary(i) if vary else {}
        scene = dataclasses.replace(base, **extra, view="spot", spot_value=float(centre))
        path = write_photo(folder / f"h{i:02d}{suffix}", scene, seed + i, overwrite=overwrite)
        sidecar = path.with_suffix(".json")
        truth = json.loads(sidecar.read_text(encoding="utf-8"))
        truth["series"] = {"index": i, "count": len(centres), "centres": [round(float(c), 6) for c in centres]}
        if stone:
            truth["stone"] = stone
        atomic_write_text(sidecar, json.dumps(truth, separators=(",", ":")) + "\n")
        written.append(path)
    return written


def ensure_registered() -> None:
    """Register :func:`spot_view` for ``Scene.view == 'spot'`` (idempotent)."""
    _render.VIEW_RENDERERS.setdefault("spot", spot_view)
    _render.TRUTH_HOOKS.setdefault("spot", spot_truth)


ensure_registered()

__all__ = ["SPLIT_MARGIN", "dark_fraction", "random_spot_scene", "series_values", "spot_axes", "spot_truth",
           "spot_view", "write_spot_series"]
