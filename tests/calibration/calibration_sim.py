"""Simulated reference pairs for the calibration tests (no images)."""

import numpy as np

from critline.calibration import ReferencePair

# RIs at 589.3 nm of a lab's reference set, from calibration/references.csv (each row cites its
# paper; test_references.py checks them against the papers' dispersion formulas).
REFERENCE_SET = {
    "magnesium-fluoride-o": 1.3777, "fluorite": 1.4338, "calcite-e": 1.4861,
    "glass-n-bk7": 1.5167, "quartz-o": 1.5442, "quartz-e": 1.5533, "calcite-o": 1.6583,
    "spinel-mgal2o4": 1.7161, "corundum-e": 1.7600, "corundum-o": 1.7681,
}


def simulate(known, *, offset=0.0, gain=0.0, curvature=0.0, noise=0.0, sigma=0.0003, seed=0,
             first=1.30, step=0.01, centre=1.55, field=True):
    """Reference pairs from a mis-scaled instrument.

    The instrument's printed value x relates to the true index by
    ``true = x + offset + gain (x - centre) + curvature (x - centre)**2``; the reader measures x
    with Gaussian noise of ``noise`` (RI) and reports ``sigma``.  The field position is a smooth
    non-linear function of x (the scale spacing varies along the field).
    """
    rng = np.random.default_rng(seed)
    out = []
    items = known.items() if isinstance(known, dict) else ((f"ref{i}", r) for i, r in enumerate(known))
    for label, ri in items:
        x = ri
        for _ in range(50):  # solve the true map for the printed value
            x = ri - offset - gain * (x - centre) - curvature * (x - centre) ** 2
        x_meas = x + rng.normal(0, noise) if noise else x
        f = (x - centre) / 0.30 + 0.08 * ((x - centre) / 0.30) ** 2 if field else None
        out.append(ReferencePair((x_meas - first) / step, max(sigma, 1e-6) / step, ri,
                                 field_position=f, label=label))
    return out




def truth_reader(noise_graduations=0.0, seed=0):
    """A stand-in for ``read_photo`` that reads the synthesizer's truth sidecar (``.json`` beside
    the photo, schema critline.synth-truth/1) instead of the pixels: for tests of the
    calibration plumbing that must not depend on the photo reader's progress."""
    import json
    import pathlib

    from critline.readings import Edge, PhotoReading

    rng = np.random.default_rng(seed)

    def read(path, instrument=None, calibration=None, overlay_dir=None):
        path = pathlib.Path(path)
        truth = json.loads(path.with_suffix(".json").read_text())
        sigma = max(noise_graduations, 0.01)
        edges = []
        for e in truth.get("edges", []):
            pos = e["scale_position"] + (rng.normal(0, noise_graduations) if noise_graduations else 0.0)
            edges.append(Edge(ri=1.30 + 0.01 * pos, uncertainty=0.01 * sigma, kind=e["kind"],
                              scale_position=pos, scale_uncertainty=sigma, contrast=0.7,
                              field_position=e.get("field_position")))
        light = {"sodium": "monochromatic", "white": "white"}.get(truth.get("light"), "unknown")
        status = truth.get("status", "ok")
        return PhotoReading(photo=str(path), sha256="", status=status,
                            reason=truth.get("reason"), edges=tuple(edges), light=light)

    return read


def write_reference(folder, name, ris, *, offset=0.0, gain=0.0, centre=1.55, status="ok",
                    light="sodium", content=None, first=1.30, step=0.01):
    """A stand-in photo file (unique bytes) with a truth sidecar of a mis-scaled instrument whose
    true index is ``x + offset + gain (x - centre)`` at printed value x."""
    import json
    import pathlib

    folder = pathlib.Path(folder)
    photo = folder / name
    photo.write_bytes(content if content is not None else f"stand-in photo {name}".encode())
    edges = []
    for ri in ris:
        x = (ri - offset + gain * centre) / (1 + gain)
        edges.append({"ri": ri, "kind": "stone", "scale_position": (x - first) / step,
                      "field_position": (x - centre) / 0.3})
    photo.with_suffix(".json").write_text(json.dumps(
        {"schema": "critline.synth-truth/1", "edges": edges, "status": status, "light": light}))
    return photo
