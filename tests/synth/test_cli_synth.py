"""The `critline synth` command: a thin shell over critline.synth."""

import json

from critline import cautions
from critline.cli import main


def test_photo_command_writes_photo_and_truth(tmp_path, capsys):
    out = tmp_path / "p.png"
    code = main(["synth", "photo", str(out), "--seed", "3", "--ri", "1.544", "--ri", "1.553",
                 "--megapixels", "0.1", "--clean", "--json"])
    assert code == 0
    truth = json.loads(capsys.readouterr().out)
    assert truth["schema"] == "critline.synth-truth/1"
    assert [round(e["ri"], 3) for e in truth["edges"] if e["kind"] == "stone"] == [1.544, 1.553]
    assert out.exists() and out.with_suffix(".json").exists()


def test_photo_command_refuses_overwrite_and_bad_values(tmp_path, capsys):
    out = tmp_path / "p.jpg"
    assert main(["synth", "photo", str(out), "--megapixels", "0.1"]) == 0
    before = out.read_bytes()
    assert main(["synth", "photo", str(out), "--megapixels", "0.1", "--seed", "9"]) == 2
    assert out.read_bytes() == before
    assert main(["synth", "photo", str(tmp_path / "q.jpg"), "--light", "candle"]) == 2
    assert main(["synth", "photo", str(tmp_path / "q.bmp")]) == 2
    err = capsys.readouterr().err
    assert "already exists" in err and "light must be one of" in err and "Traceback" not in err
    bad = tmp_path / "bad.toml"
    bad.write_text("first = 'x'\n")
    assert main(["synth", "photo", str(tmp_path / "r.jpg"), "--instrument", str(bad)]) == 2


def test_help_shows_cautions(capsys):
    assert main(["synth", "photo", "--help"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "Contact liquids" in text and cautions.HELP_EPILOG.split()[1] in text


def test_stone_command_writes_a_session(tmp_path, capsys):
    folder = tmp_path / "stone"
    code = main(["synth", "stone", str(folder), "--principal", "1.5443", "--principal", "1.5443",
                 "--principal", "1.5534", "--rotations", "0,90", "--megapixels", "0.08"])
    assert code == 0
    names = sorted(p.name for p in folder.glob("*.jpg"))
    assert names == ["r000_none.jpg", "r000_pol0.jpg", "r000_pol90.jpg",
                     "r090_none.jpg", "r090_pol0.jpg", "r090_pol90.jpg"]
    truth = json.loads((folder / "r090_pol90.json").read_text())
    assert truth["session"]["rotation"] == 90 and truth["session"]["polariser"] == 90
    assert main(["synth", "stone", str(folder), "--principal", "1.6"]) == 2
    assert main(["synth", "stone", str(tmp_path / "x"), "--principal", "1.6", "--principal", "1.6",
                 "--principal", "1.6", "--rotations", "a,b"]) == 2
    assert "Traceback" not in capsys.readouterr().err
