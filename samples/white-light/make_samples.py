"""Render the invented white-light samples of this folder (same seeds, same bytes).

    python samples/white-light/make_samples.py
    critline calibrate samples/white-light/references/manifest.csv --instrument samples/instrument.toml \
        --out samples/white-light/white-calibration.toml --overwrite \
        --setup "instrument=Harbour Lane desk refractometer (invented); light=incandescent lamp; note=invented white-light setup"

Invented scenario: the Harbour Lane desk (invented, see ../README.md) has no sodium lamp on a
Saturday and photographs three stones of its parcel under an incandescent lamp (white light,
CIE illuminant A in critline's synthesizer).  Its instrument is the demo's deliberately
mis-scaled one (../instrument.toml: the printed scale reads about 0.003 low), and its sodium-light
calibration (../demo-calibration.toml) is refused for white-light photos, so the desk first
photographs four reference stones in the same white light (``references/``) and makes a
white-light calibration from them.  Each photo gets the synthesizer's truth sidecar (``.json``,
schema ``critline.synth-truth/1``, plus a ``note`` that it is invented synthetic data) and a row
in ``truth.csv`` (the parcel stones) or ``references/manifest.csv`` (the references).

Indices at 589.3 nm: references from published dispersion formulas (fluorite Malitson 1963,
N-BK7 SCHOTT catalogue, quartz ordinary ray Ghosh 1999, spinel Tropf and Thomas 1991;
``critline/synth/data/stones.csv``); the parcel stones' values are the demo parcel's
(``critline/synth/data/demo_parcel.toml``, typical values from memory where marked so there),
their dispersion from an invented Abbe number.
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

from critline.optics import SODIUM_D_NM
from critline.synth.demo import demo_instrument, load_demo
from critline.synth.dispersion import stone_formulas
from critline.synth.photo_io import write_photo
from critline.synth.scene import Scene

HERE = Path(__file__).resolve().parent
NOTE = "invented synthetic data: rendered by critline.synth, not a photograph"
#: A modest hand-held shot (small files for the repository).
PHONE = dict(width=1200, height=900, field_diameter=0.8, jpeg_quality=85, sharpen=0.4, denoise=0.7,
             full_well=6000.0, read_noise=2.0, vignetting=0.15, stray_light=0.02, edge_blur=0.002)
#: Parcel stones: (file, invented label, indices at 589.3 nm, polariser, Abbe number, seed, shot)
PARCEL = (
    ("wl-hl02-tourmaline.jpg", "HL-02 green step-cut (invented), polariser on the lower ray",
     (1.6230, 1.6420), "low", 55.0, 20261221,
     dict(exposure=0.85, axis_angle_deg=23.0, tilt_deg=3.0, defocus=0.0015, white_balance=0.5)),
    ("wl-hl04-spinel.jpg", "HL-04 red octagon (invented)", (1.7155,), "both", 60.0, 20261222,
     dict(exposure=0.95, axis_angle_deg=137.0, tilt_deg=5.0, defocus=0.0025, white_balance=0.3)),
    ("wl-hl05-topaz.jpg", "HL-05 colourless pear (invented), polariser on the lower ray",
     (1.6100, 1.6200), "low", 50.0, 20261223,
     dict(exposure=0.75, axis_angle_deg=281.0, tilt_deg=2.0, defocus=0.001, white_balance=0.7)),
)
#: References: (file, material for the manifest, formula key, ray, seed, shot)
REFERENCES = (
    ("wref-fluorite.jpg", "fluorite", "fluorite", "n", 20261231,
     dict(exposure=0.8, axis_angle_deg=75.0, tilt_deg=2.5, defocus=0.001, white_balance=0.5)),
    ("wref-glass.jpg", "glass", "N-BK7 glass", "n", 20261232,
     dict(exposure=0.9, axis_angle_deg=190.0, tilt_deg=4.0, defocus=0.002, white_balance=0.4)),
    ("wref-quartz-o.jpg", "quartz", "quartz", "o", 20261233,
     dict(exposure=0.85, axis_angle_deg=320.0, tilt_deg=1.5, defocus=0.0015, white_balance=0.6)),
    ("wref-spinel.jpg", "synthetic spinel", "spinel", "n", 20261234,
     dict(exposure=0.8, axis_angle_deg=12.0, tilt_deg=3.5, defocus=0.001, white_balance=0.5)),
)


def _scene(ris, polariser, shot, **stone) -> Scene:
    demo = load_demo()
    return Scene(instrument=demo_instrument(), liquid_ri=demo["liquid_ri"], light="white",
                 scale_offset=demo["scale_offset"], scale_gain=demo["scale_gain"], stone_ris=tuple(ris),
                 polariser=polariser, **PHONE, **shot, **stone)


def _write(path: Path, scene: Scene, seed: int) -> dict:
    write_photo(path, scene, seed)
    sidecar = path.with_suffix(".json")
    truth = json.loads(sidecar.read_text())
    truth["note"] = NOTE
    sidecar.write_text(json.dumps(truth, separators=(",", ":")) + "\n")
    return truth


def _csv(rows, comment: str | None = None) -> str:
    buf = io.StringIO()
    if comment:
        buf.write(f"# {comment}\n")
    csv.writer(buf, lineterminator="\n").writerows(rows)
    return buf.getvalue()


def main() -> None:
    rows = [["photo", "true_ri", "label"]]
    for name, label, ris, polariser, abbe, seed, shot in PARCEL:
        truth = _write(HERE / name, _scene(ris, polariser, shot, stone_abbe=abbe), seed)
        rows += [[name, f"{e['ri']:.4f}", label] for e in truth["edges"] if e["kind"] == "stone"]
    (HERE / "truth.csv").write_text(_csv(rows, f"{NOTE}; true RI at 589.3 nm of each stone edge"))
    (HERE / "references").mkdir(exist_ok=True)
    manifest = [["photo", "known_ri", "material"]]
    for name, material, key, ray, seed, shot in REFERENCES:
        n_d = float(stone_formulas()[(key, ray)].index(SODIUM_D_NM))
        ris = (n_d,)
        polariser = "both"
        if key == "quartz":  # uniaxial: the polariser passes the ordinary (lower) ray
            other = float(stone_formulas()[(key, "e")].index(SODIUM_D_NM))
            ris, polariser = (n_d, other), "low"
        _write(HERE / "references" / name, _scene(ris, polariser, shot, stone_material=key), seed)
        manifest.append([name, f"{n_d:.4f}", material])
    (HERE / "references" / "manifest.csv").write_text(_csv(manifest))


if __name__ == "__main__":
    main()
