"""Stand-ins for the reader and the identification core in the batch unit tests.

The fake reader opens the file with Pillow (so a corrupt file is rejected as the
real reader would reject it) and takes the edges from the truth sidecar next to
the photo (the synthesizer's ``*.json`` format); a picture without a sidecar is
"not an eyepiece view".  It is importable by the worker processes.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from PIL import Image

from critline.readings import Edge, PhotoReading, Quality, rejected

CALLS_ENV = "CRITLINE_FAKE_READER_LOG"


def fake_reader(path, instrument=None, calibration=None, overlay_dir=None) -> PhotoReading:
    path = Path(path)
    log = os.environ.get(CALLS_ENV)
    if log:
        with open(log, "a") as fh:
            fh.write(f"{path.name}\n")
    try:
        with Image.open(path) as im:
            im.load()
            rgb = np.asarray(im.convert("RGB"))
    except Exception as exc:  # noqa: BLE001
        return rejected(path.name, "", f"not an image this tool can open ({type(exc).__name__})")
    sidecar = path.with_suffix(".json")
    if not sidecar.exists():
        return rejected(path.name, "", "no eyepiece field found")
    truth = json.loads(sidecar.read_text())
    if "spot" in truth:  # a spot view: the figures the reader's spot series uses
        sp = truth["spot"]
        edges = tuple(Edge(ri=e["ri"], uncertainty=0.01, kind="spot", scale_position=(e["ri"] - 1.30) / 0.01,
                           scale_uncertainty=1.0, contrast=0.5) for e in truth["edges"])
        figures = {"spot_centre_scale": sp["centre"], "dark_fraction": sp["dark_fraction"],
                   "spot_length_scale": sp["length"]}
        return PhotoReading(photo=path.name, sha256="", status="ok" if edges else "no_edge",
                            edges=edges, quality=Quality(flags=("spot_reading",), figures=figures))
    edges = tuple(
        Edge(ri=e["ri"], uncertainty=0.0004, kind=e.get("kind", "stone"),
             scale_position=(e["ri"] - 1.30) / 0.01, scale_uncertainty=0.04, contrast=0.6)
        for e in truth["edges"])
    xs = tuple(float(x) for x in np.linspace(0, 50, 251))
    ys = tuple(float(min(1.0, max(0.05, 0.1 + sum(x > e.scale_position for e in edges
                                                  if e.kind == "stone") * 0.4)))
               for x in xs)
    if overlay_dir is not None:
        Image.fromarray(rgb[::-1]).save(Path(overlay_dir) / f"{path.stem}_marked.png")
    return PhotoReading(photo=path.name, sha256="", status=truth.get("status", "ok"), edges=edges,
                        light="monochromatic", quality=Quality(flags=(), figures={"sharpness": 1.0}),
                        profile=(xs, ys), field_circle=(32.0, 24.0, 20.0))


def write_fake_photo(path: Path, edges, status="ok", size=(64, 48), spot=None) -> Path:
    """A small PNG/JPEG with its truth sidecar: edges = list of RI (stone) or (ri, kind)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(int.from_bytes(hashlib.sha256(str(path).encode()).digest()[:4], "big"))
    Image.fromarray(rng.integers(0, 255, (size[1], size[0], 3), dtype=np.uint8)).save(path)
    listed = [e if isinstance(e, tuple) else (e, "stone") for e in edges]
    path.with_suffix(".json").write_text(json.dumps(
        {"schema": "critline.synth-truth/1", "status": status,
         "edges": [{"ri": ri, "kind": kind} for ri, kind in listed],
         **({"spot": spot} if spot else {})}))
    return path


# --- a fake identification core (numbers in, a simple analysis out) ---------------------------
@dataclass(frozen=True)
class FakeObservation:
    edges: tuple = ()
    rotation: float | None = None
    polariser: float | None = None
    over_limit: bool = False
    spot: bool = False
    label: str = ""


@dataclass(frozen=True)
class FakeAnalysis:
    ri_low: float | None
    ri_high: float | None
    birefringence: float | None
    birefringence_uncertainty: float | None
    uncertainty: float | None
    optic_character: str
    optic_sign: str | None
    beta: float | None = None
    over_limit: bool = False
    spot_ri: float | None = None
    flags: tuple = ()
    notes: tuple = ()
    observations: tuple = field(default=(), repr=False)


@dataclass(frozen=True)
class FakeCandidate:
    material: str
    aliases: tuple = ()
    score: float = 0.5
    agrees: tuple = ()
    conflicts: tuple = ()


@dataclass(frozen=True)
class FakeIdentification:
    candidates: tuple
    groups: tuple = ()
    separating_tests: tuple = ()
    notes: tuple = ()


def fake_analyse(observations, liquid_ri=None):
    ris = [ri for o in observations for ri, _ in o.edges]
    over = any(o.over_limit for o in observations)
    if not ris:
        return FakeAnalysis(liquid_ri if over else None, None, None, None, None, "undetermined", None,
                            over_limit=over, notes=("no stone edge",), observations=tuple(observations))
    lo, hi = min(ris), max(ris)
    char = "isotropic" if hi - lo < 0.002 else "uniaxial"
    return FakeAnalysis(lo, hi, hi - lo, 0.0006, 0.0004, char, None if char == "isotropic" else "+",
                        notes=("sign from the fake core",), observations=tuple(observations))


def fake_identify(analysis, sg=None, **_):
    return FakeIdentification(
        candidates=(FakeCandidate("quartz", ("amethyst",), 0.9, ("RI 1.544-1.553 fits",), ()),
                    FakeCandidate("<b>glass</b>", (), 0.2, (), ("birefringence too high",))),
        separating_tests=("specific gravity: 2.65 vs 2.3-4.5",),
        notes=() if sg is None else (f"measured sg {sg:g}",))


def fake_core():
    return FakeObservation, fake_analyse, fake_identify


def chatty_reader(path, instrument=None, calibration=None, overlay_dir=None) -> PhotoReading:
    """The fake reader, printing on stdout as careless library code might."""
    print(f"reading {path} ...")
    return fake_reader(path, instrument, calibration, overlay_dir)


def slow_reader(path, instrument=None, calibration=None, overlay_dir=None) -> PhotoReading:
    """The fake reader taking its time (for interruption tests)."""
    import time

    time.sleep(0.4)
    return fake_reader(path, instrument, calibration, overlay_dir)
