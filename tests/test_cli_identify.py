"""`critline identify`: the command-line shell over the identification core."""

from __future__ import annotations

import json

import pytest

from critline import cautions
from critline.cli import main


def run(capsys, *args):
    code = main(["identify", *args])
    out, err = capsys.readouterr()
    return code, out, err


def test_json_is_one_identify_document(capsys):
    # quartz 1.544 / 1.553, SG 2.65 (textbook values, from memory)
    code, out, err = run(capsys, "--ri", "1.544", "--ri", "1.553", "--sg", "2.65", "--json")
    assert code == 0
    data = json.loads(out)  # exactly one JSON document on stdout
    assert data["schema"] == "critline.identify/1"
    assert isinstance(data["candidates"], list) and data["candidates"]
    for c in data["candidates"]:
        assert set(c) >= {"material", "aliases", "score", "agrees", "conflicts"}
        assert isinstance(c["material"], str) and c["material"] == c["material"].lower()
        assert 0.0 <= c["score"] <= 1.0
    assert isinstance(data["separating_tests"], list)
    assert "quartz" in data["groups"][0]


def test_table_by_default(capsys):
    code, out, _ = run(capsys, "--ri", "1.718", "--character", "isotropic")
    assert code == 0
    assert "spinel" in out
    assert "evidence, not a verdict" in out


def test_over_limit_states_the_liquid(capsys):
    code, out, _ = run(capsys, "--over-limit", "--json")
    data = json.loads(out)
    assert code == 0
    assert any("1.790" in n for n in data["notes"])
    assert "diamond" in data["groups"][0]


def test_spot_reading(capsys):
    code, out, _ = run(capsys, "--spot", "1.66", "--json")
    assert code == 0 and "jadeite" in json.loads(out)["groups"][0]


def test_help_shows_the_cautions(capsys):
    code, out, _ = run(capsys, "--help")
    assert code == 0
    flat = " ".join(out.split())
    assert "diiodomethane" in flat and "qualified gemmologist" in flat
    assert cautions.HELP_EPILOG.split()[0] in flat


@pytest.mark.parametrize(
    "args",
    [
        ["--ri", "0.9"],
        ["--ri", "3.6"],
        ["--ri", "abc"],
        ["--ri", "1.54", "--uncertainty", "-0.001"],
        [],
        ["--json"],
        ["--over-limit", "--ri", "1.85"],
        ["--character", "isotropic", "--ri", "1.54", "--ri", "1.56"],
        ["--character", "isotropic", "--sign", "+", "--ri", "1.54"],
        ["--character", "cubic", "--ri", "1.54"],
        ["--sign", "x", "--ri", "1.54"],
        ["--spot", "1.66", "--over-limit"],
        ["--ri", "1.54", "--sg", "heavy"],
        ["--ri", "1.54", "--liquid", "9"],
    ],
)
def test_bad_input_exit_2_one_line(capsys, args):
    code, out, err = run(capsys, *args)
    assert code == 2
    assert out == ""
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("critline: error:")
    assert "Traceback" not in err
