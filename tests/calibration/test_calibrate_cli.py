"""`critline calibrate` end to end on stand-in photos (truth sidecars read instead of pixels),
and every bad-input case: exit 2, one line on stderr, no calibration written."""

import json
import tomllib

import numpy as np
import pytest
from calibration_sim import truth_reader, write_reference

import critline.calibration.manifest as manifest_mod
from critline.calibration import load_calibration
from critline.cli import main

# RIs from calibration/references.csv (papers' formulas, checked in test_references.py)
GOOD = [("fluorite.jpg", "fluorite", [1.4338]), ("glass.jpg", "glass-n-bk7", [1.5167]),
        ("quartz.jpg", "quartz-o", [1.5442]), ("spinel.jpg", "spinel-mgal2o4", [1.7161]),
        ("corundum.jpg", "corundum-o", [1.7681])]


@pytest.fixture
def stand_in_reader(monkeypatch):
    monkeypatch.setattr(manifest_mod, "default_reader", lambda: truth_reader())


def make_set(folder, refs=GOOD, *, offset=0.004, gain=0.008, by_key=True, extra_rows=()):
    rows = ["photo,known_ri,material"]
    for name, key, ris in refs:
        write_reference(folder, name, ris, offset=offset, gain=gain)
        for ri in ris:
            rows.append(f"{name},{key if by_key and len(ris) == 1 else ri},")
    rows.extend(extra_rows)
    (folder / "manifest.csv").write_text("\n".join(rows) + "\n")
    return folder / "manifest.csv"


def run(args, capsys):
    code = main(["calibrate", *map(str, args)])
    out, err = capsys.readouterr()
    return code, out, err


def test_calibrates_a_mis_scaled_instrument(tmp_path, capsys, stand_in_reader):
    manifest = make_set(tmp_path)
    out = tmp_path / "cal.toml"
    code, stdout, err = run([manifest, "--out", out, "--json", "--setup",
                             "instrument=bench unit A (invented); liquid=1.79; temperature=21 C"], capsys)
    assert code == 0, err
    doc = json.loads(stdout)  # exactly one JSON document
    assert doc["schema"] == "critline.calibration/1" and doc["id"].startswith("cal-")
    assert doc["model"] == "offset+gain"
    assert doc["residual_rms"] < 1e-4
    assert doc["valid_range"] == pytest.approx([1.4288, 1.7731])
    assert {r["photo"] for r in doc["references"]} == {g[0] for g in GOOD}
    cal = load_calibration(out)
    assert cal.id == doc["id"] and cal.setup["temperature"] == "21 C"
    # the map undoes the instrument's error: printed x reads true x + 0.004 + 0.008 (x - 1.55)
    for x in (1.45, 1.60, 1.75):
        ri, sigma, flags = cal.scale_to_ri((x - 1.30) / 0.01, 0.01)
        assert ri == pytest.approx(x + 0.004 + 0.008 * (x - 1.55), abs=2e-4) and flags == ()
    assert all(len(r.sha256) == 64 for r in cal.references)


def test_table_output_and_drift_against_a_folder(tmp_path, capsys, stand_in_reader):
    history = tmp_path / "history"
    history.mkdir()
    first = tmp_path / "a"
    first.mkdir()
    assert run([make_set(first), "--out", history / "older.toml"], capsys)[0] == 0
    later = tmp_path / "b"
    later.mkdir()
    code, stdout, err = run([make_set(later, offset=0.004 - 0.003), "--out", history / "newer.toml",
                             "--previous", history], capsys)
    assert code == 0, err
    assert "drift since cal-" in stdout and "beyond 0.002" in stdout and "liquid" in stdout
    assert "fluorite.jpg" in stdout and "toxic" not in stdout


def test_two_edge_photo_pairs_by_order(tmp_path, capsys, stand_in_reader):
    refs = GOOD[:2] + [("quartz.jpg", "", [1.5442, 1.5533]), ("corundum.jpg", "", [1.7600, 1.7681])]
    code, stdout, err = run([make_set(tmp_path, refs), "--out", tmp_path / "c.toml", "--json"], capsys)
    assert code == 0, err
    doc = json.loads(stdout)
    quartz = [r for r in doc["references"] if r["photo"] == "quartz.jpg"]
    assert [r["known_ri"] for r in quartz] == [1.5442, 1.5533]
    assert max(abs(r["residual"]) for r in doc["references"]) < 2e-4


def test_mislabelled_reference_refused_then_excluded_or_forced(tmp_path, capsys, stand_in_reader):
    refs = GOOD + [("quartz2.jpg", "quartz-o", [1.5442])]
    manifest = make_set(tmp_path, refs)
    # label the second quartz as fluorite
    text = manifest.read_text().replace("quartz2.jpg,quartz-o", "quartz2.jpg,fluorite")
    manifest.write_text(text)
    out = tmp_path / "cal.toml"
    code, _, err = run([manifest, "--out", out], capsys)
    assert code == 2 and "quartz2.jpg" in err and "sigma" in err and err.count("\n") == 1
    assert "reads like quartz-o" in err  # the hint at the swapped label
    assert not out.exists()
    code, stdout, err = run([manifest, "--out", out, "--exclude", "quartz2.jpg", "--json"], capsys)
    assert code == 0, err
    doc = json.loads(stdout)
    assert [r["excluded"] for r in doc["references"] if r["photo"] == "quartz2.jpg"] == [True]
    code, stdout, err = run([manifest, "--out", tmp_path / "forced.toml", "--force", "--json"], capsys)
    assert code == 0 and any("quartz2.jpg" in w for w in json.loads(stdout)["warnings"])


def test_help_shows_the_cautions(capsys):
    assert main(["calibrate", "--help"]) == 0
    out = capsys.readouterr().out
    assert "toxic" in out and "--previous" in out  # contact-liquid caution (common practice)


def bad_cases():
    def too_few(d):
        return make_set(d, GOOD[:1])

    def duplicate(d):
        m = make_set(d)
        (d / "copy.jpg").write_bytes((d / "quartz.jpg").read_bytes())
        (d / "copy.json").write_text((d / "quartz.json").read_text())
        m.write_text(m.read_text() + "copy.jpg,1.5442,\n")
        return m

    def outside_scale(d):
        return make_set(d, extra_rows=["quartz.jpg,1.95,"])

    def over_limit_known(d):
        # on the scale (1.30-1.80) but above the default contact liquid, 1.79
        return make_set(d, extra_rows=["corundum.jpg,1.7950,"])

    def one_end(d):
        return make_set(d, [GOOD[3], GOOD[4], ("corundum-e.jpg", "corundum-e", [1.7600])])

    def over_limit_photo(d):
        m = make_set(d)
        write_reference(d, "spinel.jpg", [1.7161], status="over_limit")
        return m

    def rejected_photo(d):
        m = make_set(d)
        t = json.loads((d / "glass.json").read_text())
        t.update(status="rejected", reason="not an eyepiece view", edges=[])
        (d / "glass.json").write_text(json.dumps(t))
        return m

    def climbing(d):
        sub = d / "refs"
        sub.mkdir()
        m = make_set(sub)
        write_reference(d, "outside.jpg", [1.5442])
        m.write_text(m.read_text() + "../outside.jpg,1.5442,\n")
        return m

    def ambiguous(d):
        # the photo shows both corundum edges but the manifest gives one known RI
        m = make_set(d, GOOD[:4], extra_rows=["corundum.jpg,corundum-o,"])
        write_reference(d, "corundum.jpg", [1.7600, 1.7681], offset=0.004, gain=0.008)
        return m

    def bad_light(d):
        return make_set(d)

    def wrong_key(d):
        return make_set(d, extra_rows=["quartz.jpg,moonstone-x,"])

    def missing_photo(d):
        return make_set(d, extra_rows=["nowhere.jpg,1.5442,"])

    def bad_header(d):
        m = d / "manifest.csv"
        m.write_text("file,index\na.jpg,1.5\n")
        return m

    def mixed_light(d):
        m = make_set(d)
        write_reference(d, "glass.jpg", [1.5167], light="white")
        return m

    return {"too few references": (too_few, "too few references"),
            "duplicate photos": (duplicate, "same file"),
            "known RI outside the scale": (outside_scale, "outside the scale"),
            "known RI over the limit": (over_limit_known, "over the limit"),
            "references all at one end": (one_end, "all at one end"),
            "reference photo over the limit": (over_limit_photo, "is over the limit"),
            "reference photo rejected": (rejected_photo, "was rejected"),
            "path climbing out": (climbing, "outside the manifest's folder"),
            "ambiguous pairing": (ambiguous, "cannot pair"),
            "light option": (bad_light, "light must be one of"),
            "unknown reference key": (wrong_key, "neither a number nor a reference key"),
            "missing photo": (missing_photo, "not found"),
            "bad header": (bad_header, "header photo,known_ri"),
            "mixed light": (mixed_light, "mix monochromatic and white")}


@pytest.mark.parametrize("case", sorted(bad_cases()))
def test_bad_input_exit_2_one_line_nothing_written(tmp_path, capsys, stand_in_reader, case):
    build, reason = bad_cases()[case]
    manifest = build(tmp_path)
    out = tmp_path / "out" / "cal.toml"
    extra = ["--light", "daylight"] if case == "light option" else []
    code, stdout, err = run([manifest, "--out", out, *extra], capsys)
    assert code == 2, (case, err)
    assert err.count("\n") == 1 and err.startswith("critline: error:") and reason in err, err
    assert "Traceback" not in err and stdout == ""
    assert not out.exists() and not out.parent.exists()


def test_existing_output_is_kept_unless_overwrite(tmp_path, capsys, stand_in_reader):
    manifest = make_set(tmp_path)
    out = tmp_path / "cal.toml"
    out.write_text("precious")
    code, _, err = run([manifest, "--out", out], capsys)
    assert code == 2 and "refusing to overwrite" in err and out.read_text() == "precious"
    code, _, err = run([manifest, "--out", out, "--overwrite"], capsys)
    assert code == 0 and tomllib.loads(out.read_text())["schema"] == "critline.calibration/1"


def test_reading_noise_gives_honest_residuals(tmp_path, capsys, monkeypatch):
    # 0.03 graduations of reading noise (0.0003 RI): the stored LOO RMS is of that order
    monkeypatch.setattr(manifest_mod, "default_reader", lambda: truth_reader(0.03, seed=4))
    refs = GOOD + [("calcite.jpg", "calcite-o", [1.6583]), ("fused.jpg", "fused-silica", [1.4584])]
    code, stdout, err = run([make_set(tmp_path, refs), "--out", tmp_path / "n.toml", "--json"], capsys)
    assert code == 0, err
    doc = json.loads(stdout)
    assert 0.00005 < doc["loo_rms"] < 0.0012
    assert np.isfinite(doc["residual_rms"])


def test_an_excluded_photo_may_be_unreadable(tmp_path, capsys, stand_in_reader):
    manifest = make_set(tmp_path, GOOD + [("blurred.jpg", "calcite-o", [1.6583])])
    write_reference(tmp_path, "blurred.jpg", [1.6583], status="rejected")
    code, stdout, err = run([manifest, "--out", tmp_path / "c.toml", "--exclude", "blurred.jpg",
                             "--json"], capsys)
    assert code == 0, err
    doc = json.loads(stdout)
    assert "blurred.jpg" not in {r["photo"] for r in doc["references"]}
    assert any("blurred.jpg" in w and "rejected" in w for w in doc["warnings"])
    code, _, err = run([manifest, "--out", tmp_path / "d.toml", "--exclude", "nothere.jpg"], capsys)
    assert code == 2 and "not a photo of the manifest" in err


def test_real_reader_rejects_a_blank_reference_photo(tmp_path, capsys):
    # no stand-in here: the photo reader itself looks at a blank frame and rejects it
    from PIL import Image

    make_set(tmp_path)
    for i, (name, _, _) in enumerate(GOOD):
        (tmp_path / name).unlink()
        Image.new("RGB", (320, 240), (40 + 20 * i, 40, 40)).save(tmp_path / name, format="JPEG")
    out = tmp_path / "cal.toml"
    code, stdout, err = run([tmp_path / "manifest.csv", "--out", out], capsys)
    assert code == 2 and "was rejected" in err and err.count("\n") == 1 and not out.exists()
