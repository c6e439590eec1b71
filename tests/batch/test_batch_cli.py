"""`critline batch` / `critline watch` as a user meets them: help, usage errors, JSON on stdout, exit codes."""

import json

import pytest
from batchfakes import fake_reader, write_fake_photo

from critline import cautions
from critline.batch import run as batch_run
from critline.batch import watch as batch_watch
from critline.cli import main


@pytest.fixture
def fake_reader_everywhere(monkeypatch, fake_core):
    monkeypatch.setattr(batch_run, "default_reader", lambda: fake_reader)
    monkeypatch.setattr(batch_watch, "default_reader", lambda: fake_reader)


@pytest.mark.parametrize("command", ["batch", "watch"])
def test_help_shows_the_cautions(command, capsys):
    assert main([command, "--help"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "A reading is evidence, not a verdict" in text
    assert "diiodomethane" in text


def test_usage_errors_exit_2_in_one_line(tmp_path, capsys):
    assert main(["batch", str(tmp_path / "missing"), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "missing" in err[0] and "Traceback" not in err[0]
    m = tmp_path / "m.csv"
    m.write_text("stone,photo\nx,../../etc/passwd.jpg\n")
    assert main(["batch", str(m), "--out", str(tmp_path / "o")]) == 2
    assert "climbs out" in capsys.readouterr().err
    assert main(["batch", str(tmp_path), "--workers", "0"]) == 2
    bad_inst = tmp_path / "inst.toml"
    bad_inst.write_text("first = 'x'\nfrobnicate = 1\n")
    assert main(["batch", str(tmp_path), "--instrument", str(bad_inst)]) == 2
    assert "inst.toml" in capsys.readouterr().err


def test_json_is_one_document_and_problems_go_to_stderr(tmp_path, capsys, fake_reader_everywhere):
    parcel = tmp_path / "parcel"
    write_fake_photo(parcel / "oval" / "r000_pol0.png", [1.5442])
    write_fake_photo(parcel / "oval" / "r000_pol90.png", [1.5532])
    (parcel / "oval" / "broken.jpg").write_bytes(b"nope")
    out = tmp_path / "out"
    code = main(["batch", str(parcel), "--out", str(out), "--json", "--workers", "1"])
    captured = capsys.readouterr()
    assert code == 3
    doc = json.loads(captured.out)  # exactly one JSON document, nothing else on stdout
    assert doc["schema"] == "critline.batch/1"
    stone = doc["stones"][0]
    assert {"stone", "photos", "ri_low", "ri_high", "birefringence", "uncertainty", "optic_character",
            "optic_sign", "over_limit", "candidates", "flags"} <= set(stone)
    assert stone["ri_low"] == 1.5442 and stone["birefringence"] == 0.009
    assert doc["cautions"] == list(cautions.ALL)
    err_lines = [x for x in captured.err.splitlines() if "broken.jpg" in x]
    assert err_lines == ["critline: oval/broken.jpg: not an image this tool can open (UnidentifiedImageError)"]
    # second run: everything cached, earlier report kept, the new one numbered and announced
    code = main(["batch", str(parcel), "--out", str(out), "--json"])
    captured = capsys.readouterr()
    assert code == 3 and json.loads(captured.out)["counts"]["cached"] == 3, captured.err  # the rejection is cached too
    assert "report-2.html" in captured.err and (out / "report.json").exists()


def test_human_table_and_exit_0(tmp_path, capsys, fake_reader_everywhere):
    parcel = tmp_path / "parcel"
    write_fake_photo(parcel / "r000_pol0.png", [1.7180])
    assert main(["batch", str(parcel), "--out", str(tmp_path / "out")]) == 0
    out = capsys.readouterr().out
    assert "parcel" in out and "1.7180" in out and "quartz" in out


def test_watch_command_once(tmp_path, capsys, fake_reader_everywhere):
    write_fake_photo(tmp_path / "inbox" / "s1" / "r000_pol0.png", [1.62])
    code = main(["watch", str(tmp_path / "inbox"), "--out", str(tmp_path / "out"), "--once",
                 "--interval", "0.05"])
    out = capsys.readouterr().out
    assert code == 0 and "s1/r000_pol0.png: 1.6200" in out and "reports:" in out


@pytest.mark.parametrize("workers", ["1", "2"])
def test_json_stdout_survives_a_chatty_reader(tmp_path, capfd, monkeypatch, fake_core, workers):
    from batchfakes import chatty_reader

    monkeypatch.setattr(batch_run, "default_reader", lambda: chatty_reader)
    write_fake_photo(tmp_path / "p" / "s" / "r000_pol0.png", [1.62])
    write_fake_photo(tmp_path / "p" / "s" / "r045_pol0.png", [1.62])
    code = main(["batch", str(tmp_path / "p"), "--out", str(tmp_path / "o"), "--json",
                 "--workers", workers])
    out, err = capfd.readouterr()
    assert code == 0
    assert json.loads(out)["stones"][0]["stone"] == "s"
    if workers == "1":
        # (worker processes write to the stderr their fork server started with)
        assert "reading " in err  # the chatter went to stderr


SLOW_BATCH = """
import sys
import batchfakes
from critline.batch import run as batch_run, stones
from critline.cli import main

if __name__ == "__main__":
    batch_run.default_reader = lambda: batchfakes.slow_reader
    stones._core = batchfakes.fake_core
    print("started", file=sys.stderr, flush=True)
    sys.exit(main(sys.argv[1:]))
"""


def test_ctrl_c_keeps_what_was_read(tmp_path, fake_core):
    import signal
    import subprocess
    import sys
    import time
    from pathlib import Path

    for k in range(16):
        write_fake_photo(tmp_path / "p" / "s" / f"r{k * 10:03d}_pol0.png", [1.62])
    script = tmp_path / "slow_batch.py"
    script.write_text(SLOW_BATCH)
    env = dict(__import__("os").environ, PYTHONPATH=str(Path(__file__).parent))
    # a suite started in the background by a non-interactive shell inherits SIGINT ignored, and
    # Python then installs no KeyboardInterrupt handler: give the child the default disposition
    proc = subprocess.Popen([sys.executable, str(script), "batch", str(tmp_path / "p"), "--out",
                             str(tmp_path / "o"), "--workers", "2"], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    cache = tmp_path / "o" / "cache"
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and len(list(cache.glob("*.json"))) < 2:
        time.sleep(0.1)
    proc.send_signal(signal.SIGINT)
    try:
        out, err = proc.communicate(timeout=30)
    except subprocess.TimeoutExpired:
        proc.kill()
        raise
    assert proc.returncode == 130, err
    assert "critline: interrupted; the photos read so far are kept" in err and "Traceback" not in err
    kept = len(list(cache.glob("*.json")))
    assert 2 <= kept < 16
    assert not list((tmp_path / "o").glob(".*.tmp")) and not list(cache.glob(".*.tmp"))
    # the re-run reads only what is missing
    res = batch_run.run_batch(tmp_path / "p", out_dir=tmp_path / "o", workers=1, reader=fake_reader)
    assert res.counts["cached"] == kept and res.counts["read"] == 16 - kept


def test_calibration_brings_its_instrument_and_a_different_scale_is_refused(tmp_path):
    from types import SimpleNamespace

    from critline.cli.batch import instrument_for
    from critline.errors import UsageError
    from critline.instrument import DEFAULT, Instrument

    cal = SimpleNamespace(instrument={"name": "desk", "first": 1.35, "last": 1.85, "step": 0.01,
                                      "liquid_ri": 1.81, "unknown_key": 1})
    inst = instrument_for(cal, DEFAULT, explicit=False, calibration_path="c.toml")
    assert (inst.first, inst.last, inst.liquid_ri) == (1.35, 1.85, 1.81)
    same = Instrument(first=1.35, last=1.85, liquid_ri=1.80)
    assert instrument_for(cal, same, explicit=True, calibration_path="c.toml") is same
    with pytest.raises(UsageError, match="c.toml: made for a 1.35-1.85 scale"):
        instrument_for(cal, DEFAULT, explicit=True, calibration_path="c.toml")
