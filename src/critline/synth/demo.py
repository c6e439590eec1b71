"""The invented demo scenario: the Harbour Lane parcel and its reference set.

``write_demo(folder)`` renders, from fixed seeds, every sample photo with its
truth sidecar::

    parcel/HL-01/r000_pol0.jpg ...   one folder per stone, rotations x polariser settings
    references/ref-quartz.jpg ...    stones of known index, and references/manifest.csv
    instrument.toml                  the invented desk's instrument file

Everything in the scenario (parcel, desk, stones, labels) is invented.
"""

from __future__ import annotations

import csv
import dataclasses
import io
import tomllib
from importlib import resources
from pathlib import Path

import numpy as np

from critline.errors import UsageError
from critline.fileio import atomic_write_text
from critline.instrument import Instrument
from critline.optics import SODIUM_D_NM
from critline.synth.dispersion import stone_formulas
from critline.synth.photo_io import write_photo
from critline.synth.scene import Scene, frame_size
from critline.synth.session import write_session

DEMO_SEED = 20261202
#: (rotation, polariser) of each photo of a stone: four positions through 180 degrees with the
#: polariser at 0 and 90 degrees, and two positions without it
PLAN = tuple((r, p) for r in (0, 45, 90, 135) for p in (0, 90)) + ((0, None), (90, None))


def load_demo() -> dict:
    text = resources.files("critline.synth").joinpath("data", "demo_parcel.toml").read_text(encoding="utf-8")
    return tomllib.loads(text)


def demo_instrument() -> Instrument:
    return Instrument(name="Harbour Lane desk refractometer (invented)", liquid_ri=load_demo()["liquid_ri"])


def _phone(rng: np.random.Generator) -> dict:
    """A hand-held phone shot within a modest part of the envelope (small files for the repo)."""
    mp = float(rng.uniform(1.0, 1.15))
    width, height = frame_size(mp, 4 / 3, portrait=bool(rng.random() < 0.3))
    return dict(
        width=width, height=height,
        field_cx=float(rng.uniform(0.4, 0.6)), field_cy=float(rng.uniform(0.4, 0.6)),
        field_diameter=float(rng.uniform(0.6, 0.85)),
        axis_angle_deg=float(rng.uniform(0, 360)),
        tilt_deg=float(rng.uniform(0, 6)), tilt_axis_deg=float(rng.uniform(0, 360)),
        defocus=float(rng.uniform(0.0, 0.003)), motion=float(rng.uniform(0.0, 0.002)),
        motion_angle_deg=float(rng.uniform(0, 180)),
        exposure=float(rng.uniform(0.6, 1.05)), full_well=float(rng.uniform(3000, 9000)),
        read_noise=float(rng.uniform(1.5, 3.0)), denoise=float(rng.uniform(0.6, 0.9)),
        sharpen=float(rng.uniform(0.2, 0.6)), white_balance=float(rng.uniform(0.3, 0.7)),
        vignetting=float(rng.uniform(0.05, 0.25)),
        glare=float(rng.uniform(0.0, 0.02)), lateral_ca=float(rng.uniform(0.0, 0.0006)),
        crescent=float(rng.choice([0.0, rng.uniform(0.05, 0.25)], p=[0.7, 0.3])),
        crescent_angle_deg=float(rng.uniform(0, 360)),
        surround=float(rng.uniform(0.0, 0.01)), dust=int(rng.integers(0, 4)),
        jpeg_quality=85, orientation=int(rng.choice([1, 1, 1, 6])),
    )


def _base(demo: dict, instrument: Instrument, rng: np.random.Generator) -> Scene:
    return Scene(instrument=instrument, liquid_ri=demo["liquid_ri"], light=demo["light"],
                 scale_offset=demo["scale_offset"], scale_gain=demo["scale_gain"],
                 liquid_line=0.04, spacing_change=0.11, spacing_bow=0.01, u_first=-0.78, u_last=0.78,
                 axis_v=-0.12, edge_blur=0.003, stone_abbe=float(rng.uniform(40, 65)),
                 stray_light=0.02, illumination_curve=-0.04)


def reference_values(ref: dict) -> list[float]:
    f = ref["formula"]
    return [float(stone_formulas()[(f[i], f[i + 1])].index(SODIUM_D_NM)) for i in range(0, len(f), 2)]


def write_demo(folder, overwrite: bool = False) -> list[Path]:
    """Render the whole demo scenario into ``folder``; returns the photos written."""
    folder = Path(folder)
    if not overwrite:
        existing = [p for p in (folder / "instrument.toml", folder / "parcel", folder / "references") if p.exists()]
        if existing:
            raise UsageError(f"{existing[0]}: already exists (refusing to overwrite; pass the overwrite option)")
    demo = load_demo()
    instrument = demo_instrument()
    rng = np.random.default_rng(DEMO_SEED)
    written: list[Path] = []
    inst_toml = (f'name = "{instrument.name}"\nfirst = {instrument.first}\nlast = {instrument.last}\n'
                 f"step = {instrument.step}\nmedium_every = {instrument.medium_every}\n"
                 f"long_every = {instrument.long_every}\nlabelled_every = {instrument.labelled_every}\n"
                 f"liquid_ri = {instrument.liquid_ri}\n")
    atomic_write_text(folder / "instrument.toml", inst_toml, overwrite=overwrite)
    for k, stone in enumerate(demo["stone"]):
        base = _base(demo, instrument, rng)
        shots = [_phone(rng) for _ in PLAN]
        facts = {key: stone[key] for key in ("folder", "label", "material", "principal", "source")}
        facts["scenario"] = demo["scenario"]
        written += write_session(folder / "parcel" / stone["folder"], stone["principal"],
                                 stone["facet_normal"], base, DEMO_SEED + 100 * k,
                                 plan=PLAN,
                                 vary=lambda i, shots=shots: shots[i], stone=facts, overwrite=overwrite)
    rows = []
    for k, ref in enumerate(demo["reference"]):
        values = reference_values(ref)
        scene = dataclasses.replace(_base(demo, instrument, rng), **_phone(rng), stone_ris=tuple(values),
                                    polariser="both")
        name = f"{ref['name']}.jpg"
        write_photo(folder / "references" / name, scene, DEMO_SEED + 1000 + k, overwrite=overwrite)
        written.append(folder / "references" / name)
        rows += [(name, f"{v:.4f}", ref["material"]) for v in sorted(values)]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["photo", "known_ri", "material"])
    w.writerows(rows)
    atomic_write_text(folder / "references" / "manifest.csv", buf.getvalue(), overwrite=overwrite)
    written += write_cabochons(folder, overwrite=overwrite)
    return written


def write_cabochons(folder, overwrite: bool = False) -> list[Path]:
    """Render the demo's cabochons: spot views, one photo per head position (own seeds)."""
    from critline.synth.spot import write_spot_series

    folder = Path(folder)
    demo = load_demo()
    instrument = demo_instrument()
    written: list[Path] = []
    for k, cab in enumerate(demo.get("cabochon", [])):
        rng = np.random.default_rng([DEMO_SEED, 0x5B07, k])
        shots = [_phone(rng) for _ in cab["centres"]]
        for shot in shots:  # small frames: the spot photos need little
            shot["width"], shot["height"] = frame_size(0.7, 4 / 3, portrait=shot["height"] > shot["width"])
            shot["surround"] = 0.003
            shot["dust"] = 0
        base = dataclasses.replace(
            _base(demo, instrument, rng), view="spot", stone_ris=(float(cab["ri"]),), liquid_line=0.0,
            spot_length=float(cab["spot_length"]), spot_aspect=0.8, spot_v=-0.05, spot_surround=0.05,
            spot_rim=0.2, spot_softness=0.006)
        facts = {key: cab[key] for key in ("folder", "label", "material", "ri", "source")}
        facts["scenario"] = demo["scenario"]
        written += write_spot_series(folder / "parcel" / cab["folder"], base, DEMO_SEED + 5000 + 10 * k,
                                     cab["centres"], vary=lambda i, shots=shots: shots[i], stone=facts,
                                     overwrite=overwrite)
    return written
