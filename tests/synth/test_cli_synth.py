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
