"""The README's main command on the bundled demo parcel: every stone comes out as its truth.

Truth: samples/README.md (the invented "Harbour Lane" parcel, rendered by the synthesizer from
the indices in that table; quartz, tourmaline, peridot, spinel and topaz values from the
published formulas or handbook values named there).  The demo uses its deliberately mis-scaled
instrument and the demo calibration, exactly as the README's command does.
"""

from __future__ import annotations

import contextlib
import io
import json
from pathlib import Path

import pytest

from critline.cli import main

SAMPLES = Path(__file__).resolve().parents[2] / "samples"

#: stone -> (optic character, a material its leading group must hold, lowest and highest index)
EXPECTED = {
    "HL-01": ("uniaxial", "quartz", 1.5443, 1.5534),
    "HL-02": ("uniaxial", "tourmaline", 1.6230, 1.6420),
    "HL-03": ("biaxial", "olivine", 1.654, 1.690),
    "HL-04": ("isotropic", "spinel", 1.7155, 1.7155),
}


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    stdout = io.StringIO()
    with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(io.StringIO()):
        code = main(["batch", str(SAMPLES / "parcel"), "--calibration", str(SAMPLES / "demo-calibration.toml"),
                     "--out", str(out), "--json", "--workers", "2"])
    return code, {s["stone"]: s for s in json.loads(stdout.getvalue())["stones"]}


@pytest.mark.parametrize("stone", sorted(EXPECTED))
def test_demo_stone_reads_as_its_truth(demo, stone):
    code, stones = demo
    assert code == 0
    character, material, low, high = EXPECTED[stone]
    s = stones[stone]
    assert s["optic_character"] == character, s["notes"]
    assert material in s["leading_group"], (s["leading_group"], s["notes"])
    # within 0.002 of the invented truth: a few times a calibrated reading's uncertainty
    assert s["ri_low"] == pytest.approx(low, abs=0.002) and s["ri_high"] == pytest.approx(high, abs=0.002)


def test_demo_zircon_is_over_the_limit(demo):
    _, stones = demo
    assert "Over the limit" in " ".join(stones["HL-06"]["notes"])
