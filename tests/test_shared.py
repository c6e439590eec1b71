"""Checks of the shared contracts: instrument file, atomic writes, read/1 JSON, CLI error shell."""

import json

import pytest

from critline.errors import UsageError
from critline.fileio import atomic_write_text
from critline.instrument import DEFAULT, InstrumentError, load_instrument
from critline.readings import Edge, PhotoReading, Quality


def test_default_scale_has_51_graduations_and_kinds():
    # design.md: one graduation per 0.01 from 1.30 to 1.80, every 5th longer, every 10th longest
    assert DEFAULT.count == 51
    assert DEFAULT.kind(0) == "long"  # 1.30
    assert DEFAULT.kind(5) == "medium"  # 1.35
    assert DEFAULT.kind(7) == "short"  # 1.37
    assert DEFAULT.value(24.42) == pytest.approx(1.5442)


def test_instrument_file_roundtrip_and_errors(tmp_path):
    f = tmp_path / "inst.toml"
    f.write_text("first = 1.35\nlast = 1.85\n")
    inst = load_instrument(f)
    assert inst.first == 1.35 and inst.last == 1.85 and inst.count == 51
    f.write_text("first = 1.9\nlast = 1.3\n")
    with pytest.raises(InstrumentError):
        load_instrument(f)
    f.write_text("colour = 'red'\n")
    with pytest.raises(InstrumentError, match="unknown keys"):
        load_instrument(f)


def test_atomic_write_refuses_overwrite(tmp_path):
    target = tmp_path / "report.json"
    atomic_write_text(target, "first")
    with pytest.raises(UsageError, match="refusing to overwrite"):
        atomic_write_text(target, "second", overwrite=False)
    assert target.read_text() == "first"
    atomic_write_text(target, "third")
    assert target.read_text() == "third"
    assert [p.name for p in tmp_path.iterdir()] == ["report.json"]  # no temporary left behind


def test_read_json_sorts_edges_and_rounds():
    reading = PhotoReading(
        photo="a.jpg", sha256="0" * 64, status="ok",
        edges=(Edge(1.5532, 0.0004, "stone", 25.32, 0.02, 0.5),
               Edge(1.54417, 0.00041, "stone", 24.417, 0.02, 0.5)),
        light="monochromatic", quality=Quality(("blurred",), {"sharpness": 0.51234}),
    )
    d = json.loads(json.dumps(reading.to_json()))
    assert [e["ri"] for e in d["edges"]] == [1.5442, 1.5532]
    assert d["quality"] == {"flags": ["blurred"], "sharpness": 0.5123}
    with pytest.raises(ValueError):
        PhotoReading(photo="a", sha256="", status="maybe")


def test_cli_usage_error_exit_2(capsys):
    from critline.cli import main

    assert main(["no-such-command"]) == 2
    assert main(["--help"]) == 0
    out = capsys.readouterr().out
    assert "toxic" in out  # contact-liquid caution in the help (common practice)


def test_instrument_wrong_type_is_a_clear_error(tmp_path):
    f = tmp_path / "inst.toml"
    f.write_text("first = 'x'\n")
    with pytest.raises(InstrumentError, match="first must be a float"):
        load_instrument(f)


def test_atomic_write_gives_ordinary_file_mode(tmp_path):
    import os

    target = atomic_write_text(tmp_path / "a.txt", "x")
    umask = os.umask(0)
    os.umask(umask)
    assert target.stat().st_mode & 0o777 == 0o666 & ~umask


def test_option_parse_error_is_one_line(capsys):
    from critline.cli import main

    assert main(["identify", "--ri"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("critline: error:")
