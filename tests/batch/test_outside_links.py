"""Symbolic links that lead out of the batch folder are refused, one line each, the batch goes on.

Rule as for calibration manifests (critline.calibration.manifest: the resolved photo must lie in
the manifest's folder): a link must not bring a file from elsewhere on the disk into a batch and
its report.  Links that stay inside the folder are read as usual.
"""

import json
import os

from batchfakes import fake_reader, write_fake_photo
from test_batch_cli import fake_reader_everywhere  # noqa: F401 - fixture

from critline.batch import group_photos, run_batch
from critline.cli import main


def _parcel(tmp_path):
    parcel, elsewhere = tmp_path / "parcel", tmp_path / "elsewhere"
    write_fake_photo(parcel / "oval" / "r000_pol0.png", [1.5442])
    write_fake_photo(elsewhere / "private.png", [1.7180])
    write_fake_photo(elsewhere / "folder" / "r000_none.png", [1.7180])
    os.symlink(elsewhere / "private.png", parcel / "oval" / "r090_pol0.png")       # file, out
    os.symlink(parcel / "oval" / "r000_pol0.png", parcel / "oval" / "r045_pol0.png")  # file, in
    os.symlink(parcel / "oval" / "r000_pol0.json", parcel / "oval" / "r045_pol0.json")  # its truth
    os.symlink(elsewhere / "folder", parcel / "linked-stone")                        # folder, out
    os.symlink(elsewhere / "private.png", parcel / "loose.png")                      # loose, out
    return parcel


def test_folder_links_outside_are_refused_and_inside_kept(tmp_path):
    g = group_photos(_parcel(tmp_path))
    assert [s.name for s in g.stones] == ["oval"]
    assert [p.display for p in g.stones[0].photos] == ["oval/r000_pol0.png", "oval/r045_pol0.png"]
    refused = {p.photo: p for p in g.problems}
    assert set(refused) == {"loose.png", "linked-stone/", "oval/r090_pol0.png"}
    assert all(p.kind == "refused" and "outside the batch folder" in p.reason
               and "\n" not in p.line() for p in g.problems)


def test_batch_goes_on_past_refused_links(tmp_path, fake_core):
    res = run_batch(_parcel(tmp_path), out_dir=tmp_path / "out", workers=1, reader=fake_reader)
    assert res.counts == {"photos": 2, "read": 2, "cached": 0, "rejected": 3}
    assert res.exit_code == 3  # photos meant for the batch gave no result
    assert [p.summary.status for p in res.stones[0].photos] == ["ok", "ok"]


def test_manifest_link_outside_is_refused(tmp_path, fake_core):
    parcel = _parcel(tmp_path)
    manifest = parcel / "manifest.csv"
    manifest.write_text("stone,photo\noval,oval/r000_pol0.png\noval,oval/r090_pol0.png\n")
    g = group_photos(manifest)
    assert [p.display for s in g.stones for p in s.photos] == ["oval/r000_pol0.png"]
    assert [(p.photo, p.kind) for p in g.problems] == [("oval/r090_pol0.png", "refused")]
    assert "outside the manifest's folder" in g.problems[0].reason


def test_cli_names_each_refused_link_in_one_line(tmp_path, capsys, fake_reader_everywhere):  # noqa: F811
    parcel = _parcel(tmp_path)
    code = main(["batch", str(parcel), "--out", str(tmp_path / "out"), "--json", "--workers", "1"])
    captured = capsys.readouterr()
    assert code == 3
    assert "Traceback" not in captured.err
    lines = [ln for ln in captured.err.splitlines() if "(refused)" in ln]
    assert len(lines) == 3 and any(ln.startswith("critline: oval/r090_pol0.png: symbolic link") for ln in lines)
    doc = json.loads(captured.out)
    assert sorted(p["photo"] for p in doc["problems"] if p["kind"] == "refused") == [
        "linked-stone/", "loose.png", "oval/r090_pol0.png"]
    assert "private" not in captured.out  # nothing from outside reached the report
