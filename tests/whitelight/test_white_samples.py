"""End to end: ``critline read`` on the invented white-light samples (samples/white-light).

The samples use the demo's deliberately mis-scaled instrument (samples/README.md), so they are
read with the white-light calibration made from the white-light reference photos of the same
folder (``white-calibration.toml``); the demo's sodium-light calibration must be refused.
Truth: ``samples/white-light/truth.csv`` and the synthesizer's sidecars (the demo parcel's
indices at 589.3 nm, samples/README.md).  Each reading must match its truth within twice its
own stated standard uncertainty (k = 2, about 95 % coverage).
"""

from __future__ import annotations

import csv
import io
import json
from contextlib import redirect_stdout
from pathlib import Path

import pytest

from critline.cli import main

SAMPLES = Path(__file__).resolve().parents[2] / "samples"
FOLDER = SAMPLES / "white-light"


def _truth():
    lines = [ln for ln in (FOLDER / "truth.csv").read_text().splitlines() if not ln.startswith("#")]
    return list(csv.DictReader(lines))


def test_samples_are_labelled_invented_and_modest():
    head = (FOLDER / "truth.csv").read_text().splitlines()[0]
    assert head.startswith("#") and "invented synthetic data" in head
    rows = _truth()
    assert len({r["photo"] for r in rows}) >= 2
    for r in rows:
        photo = FOLDER / r["photo"]
        assert photo.stat().st_size < 300_000
        sidecar = json.loads(photo.with_suffix(".json").read_text())
        assert "invented synthetic data" in sidecar["note"] and sidecar["light"] == "white"
        # the CSV and the sidecar agree on the true index
        assert any(abs(e["ri"] - float(r["true_ri"])) < 6e-5 for e in sidecar["edges"] if e["kind"] == "stone")


def _read(calibration):
    photos = sorted({r["photo"] for r in _truth()})
    out = io.StringIO()
    with redirect_stdout(out):
        code = main(["read", *(str(FOLDER / p) for p in photos), "--instrument", str(SAMPLES / "instrument.toml"),
                     "--calibration", str(calibration), "--json"])
    doc = json.loads(out.getvalue())
    return code, {Path(p["photo"]).name: p for p in doc["photos"]}


@pytest.fixture(scope="module")
def readings():
    code, photos = _read(FOLDER / "white-calibration.toml")
    assert code == 0
    return photos


def test_sodium_calibration_is_refused_for_white_light_samples():
    code, photos = _read(SAMPLES / "demo-calibration.toml")
    assert code == 3  # at least one photo rejected (README exit codes)
    for p in photos.values():
        assert p["status"] == "rejected" and "made in monochromatic light" in p["reason"]


def test_white_light_samples_read_at_589_within_stated_uncertainty(readings):
    for row in _truth():
        reading = readings[row["photo"]]
        assert reading["status"] == "ok" and reading["light"] == "white", row["photo"]
        assert "white_light" in reading["quality"]["flags"]
        stones = [e for e in reading["edges"] if e["kind"] == "stone"]
        true_ri = float(row["true_ri"])
        edge = min(stones, key=lambda e: abs(e["ri"] - true_ri))
        assert abs(edge["ri"] - true_ri) <= 2 * edge["uncertainty"], (row["photo"], edge, true_ri)
        # the white-light figures (on the printed scale, before the calibration) say how the value
        # was reached; the demo instrument's scale has 1.30 at graduation 0, 0.01 a step
        printed = 1.30 + 0.01 * edge["scale_position"]
        (white,) = [d for d in reading["quality"]["white_light_edges"] if abs(d["value"] - printed) < 1e-3]
        assert white["white_light_method"] == "channel_cauchy"
