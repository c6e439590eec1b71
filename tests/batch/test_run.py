"""run_batch mechanics with a stand-in reader and core: parallel reading, cache, problems, exit code.

The real reader and core are exercised end to end in test_end_to_end.py.
"""

import json
import os

import numpy as np
import pytest
from batchfakes import CALLS_ENV, fake_reader, write_fake_photo
from PIL import Image

from critline.batch import run_batch
from critline.errors import EXIT_OK, EXIT_REJECTED
from critline.report import batch_csv, batch_document, write_reports


def make_parcel(root):
    write_fake_photo(root / "oval" / "r000_pol0.png", [1.5442])
    write_fake_photo(root / "oval" / "r000_pol90.png", [1.5532])
    write_fake_photo(root / "oval" / "r090_none.png", [1.5442, 1.5532])
    write_fake_photo(root / "cushion" / "r000_pol0.png", [1.7180])
    write_fake_photo(root / "cushion" / "r045_pol0.png", [1.7181])
    return root


def test_parallel_batch_reads_every_photo_once(tmp_path, fake_core):
    parcel = make_parcel(tmp_path / "parcel")
    out = tmp_path / "out"
    res = run_batch(parcel, out_dir=out, workers=2, reader=fake_reader)
    assert res.exit_code == EXIT_OK
    assert res.counts == {"photos": 5, "read": 5, "cached": 0, "rejected": 0}
    cushion, oval = res.stones
    assert [p.reading.status for p in oval.photos] == ["ok", "ok", "ok"]
    assert oval.analysis.ri_low == pytest.approx(1.5442) and oval.analysis.ri_high == pytest.approx(1.5532)
    # every result came back to its own photo (no mix-up between processes)
    assert [p.item.display for p in oval.photos] == [p.reading.photo for p in oval.photos]
    assert all(p.overlay and os.path.exists(p.overlay) for p in oval.photos)
    assert len(list((out / "cache").glob("*.json"))) == 5


def test_rerun_reads_only_new_photos_and_fresh_reads_all(tmp_path, fake_core, monkeypatch):
    parcel = make_parcel(tmp_path / "parcel")
    out = tmp_path / "out"
    log = tmp_path / "calls.txt"
    monkeypatch.setenv(CALLS_ENV, str(log))
    run_batch(parcel, out_dir=out, workers=1, reader=fake_reader)
    assert len(log.read_text().split()) == 5
    write_fake_photo(parcel / "oval" / "r090_pol0.png", [1.5442])
    res = run_batch(parcel, out_dir=out, workers=1, reader=fake_reader)
    assert res.counts["read"] == 1 and res.counts["cached"] == 5
    assert log.read_text().split()[5:] == ["r090_pol0.png"]
    res = run_batch(parcel, out_dir=out, workers=1, reader=fake_reader, fresh=True)
    assert res.counts["read"] == 6 and res.counts["cached"] == 0
    # same bytes under another name: taken from the cache, reported under the new name
    (parcel / "oval" / "r090_pol0.png").rename(parcel / "oval" / "copy_r090_pol0.png")
    (parcel / "oval" / "r090_pol0.json").rename(parcel / "oval" / "copy_r090_pol0.json")
    res = run_batch(parcel, out_dir=out, workers=1, reader=fake_reader)
    assert res.counts["read"] == 0
    assert "oval/copy_r090_pol0.png" in [p.reading.photo for p in res.stones[1].photos]


def test_out_dir_inside_the_folder_is_not_read(tmp_path, fake_core):
    parcel = make_parcel(tmp_path / "parcel")
    out = parcel / "results"
    run_batch(parcel, out_dir=out, workers=1, reader=fake_reader)
    res = run_batch(parcel, out_dir=out, workers=1, reader=fake_reader)
    assert [s.name for s in res.stones] == ["cushion", "oval"]  # overlays/ not taken as a stone


def make_problem_parcel(root):
    make_parcel(root)
    bad = root / "bad"
    write_fake_photo(bad / "r000_pol0.png", [1.62])
    (bad / "corrupt.jpg").write_bytes(b"\xff\xd8\xff\xe0 this is not really a jpeg" * 10)
    from skimage import data  # a photo that is no eyepiece view (scikit-image's sample image)

    Image.fromarray(data.astronaut()[::4, ::4]).save(bad / "tray.png")
    (root / "empty-stone").mkdir()
    locked = write_fake_photo(bad / "locked.png", [1.62])
    locked.chmod(0)
    # a path open() cannot read even as root: a link to nothing
    os.symlink(root / "nowhere.png", bad / "gone.png")
    return root, locked


def test_problem_files_are_reported_and_the_rest_processed(tmp_path, fake_core):
    parcel, locked = make_problem_parcel(tmp_path / "parcel")
    try:
        res = run_batch(parcel, out_dir=tmp_path / "out", workers=2, reader=fake_reader)
        root_reads_anyway = os.access(locked, os.R_OK)
    finally:
        locked.chmod(0o644)
    assert res.exit_code == EXIT_REJECTED
    lines = {p.photo: p for p in res.problems}
    assert "bad/corrupt.jpg" in lines and "not an image" in lines["bad/corrupt.jpg"].reason
    assert "no eyepiece field" in lines["bad/tray.png"].reason
    assert lines["bad/gone.png"].kind == "unreadable" and "cannot open" in lines["bad/gone.png"].reason
    assert lines["empty-stone/"].kind == "empty"
    if root_reads_anyway:
        # running as root: permission bits do not stop reading, so the photo is simply read
        assert "bad/locked.png" not in lines
    else:
        assert "Permission denied" in lines["bad/locked.png"].reason
    # one line each, no line breaks inside
    assert all("\n" not in p.line() for p in res.problems)
    # the good stones are complete
    oval = next(s for s in res.stones if s.name == "oval")
    assert len(oval.usable) == 3
    bad = next(s for s in res.stones if s.name == "bad")
    assert bad.analysis.ri_low == pytest.approx(1.62)
    doc = batch_document(res)
    assert {p["photo"] for p in doc["problems"]} == set(lines)
    assert json.loads(json.dumps(doc)) == doc
    csv_text = batch_csv(res)
    assert "bad/corrupt.jpg" in csv_text and csv_text.count("\nstone,") == 3


def test_reports_are_never_overwritten_unless_told(tmp_path, fake_core):
    parcel = make_parcel(tmp_path / "parcel")
    out = tmp_path / "out"
    res = run_batch(parcel, out_dir=out, workers=1, reader=fake_reader)
    first = write_reports(res, out)
    assert first["html"].name == "report.html"
    before = first["json"].read_bytes()
    second = write_reports(res, out)
    assert second["html"].name == "report-2.html" and first["json"].read_bytes() == before
    third = write_reports(res, out, overwrite=True)
    assert third["json"].name == "report.json"
    assert not list(out.glob(".*.tmp"))


def test_a_reader_that_raises_becomes_a_rejection(tmp_path, fake_core):
    parcel = make_parcel(tmp_path / "parcel")
    res = run_batch(parcel, out_dir=tmp_path / "out", workers=2, reader=exploding_reader)
    assert res.exit_code == EXIT_REJECTED
    assert len(res.problems) == 5
    assert all("RuntimeError" in p.reason for p in res.problems)
    # a reader failure is no verdict on the photo: it is not cached, the next run tries again
    res = run_batch(parcel, out_dir=tmp_path / "out", workers=1, reader=fake_reader)
    assert res.counts["read"] == 5 and res.exit_code == EXIT_OK


def exploding_reader(path, instrument=None, calibration=None, overlay_dir=None):
    raise RuntimeError(f"boom\non {np.pi:.2f}")


def test_a_stone_the_core_refuses_does_not_stop_the_batch(tmp_path, fake_core, monkeypatch):
    from critline.batch import stones
    from critline.errors import UsageError

    def refusing(observations, liquid_ri=None):
        if any(ri > 1.7 for o in observations for ri, _ in o.edges):
            raise UsageError("edge 1.7180 above the contact liquid (impossible)")
        return fake_core.fake_analyse(observations, liquid_ri)

    monkeypatch.setattr(stones, "_core", lambda: (fake_core.FakeObservation, refusing,
                                                  fake_core.fake_identify))
    res = run_batch(make_parcel(tmp_path / "parcel"), out_dir=tmp_path / "out", workers=1,
                    reader=fake_reader)
    cushion, oval = res.stones
    assert cushion.analysis is None and oval.analysis is not None
    assert any("could not be reduced: edge 1.7180 above" in n for n in cushion.notes)
    doc = batch_document(res)
    assert doc["stones"][0]["flags"] == ["not_analysed"] and doc["stones"][1]["candidates"]
    assert res.exit_code == EXIT_OK  # every photo got a result; the finding is about the stone


def test_manifest_batch_passes_rotation_polariser_and_sg(tmp_path, fake_core):
    shots = tmp_path / "shots"
    write_fake_photo(shots / "IMG_0001.png", [1.5442])
    write_fake_photo(shots / "IMG_0002.png", [1.5532])
    write_fake_photo(shots / "IMG_0003.png", [1.7180])
    manifest = tmp_path / "parcel.csv"
    manifest.write_text("stone,photo,rotation,polariser,sg\n"
                        "violet oval,shots/IMG_0001.png,0,0,2.65\n"
                        "violet oval,shots/IMG_0002.png,0,90,2.65\n"
                        "red cushion,shots/IMG_0003.png,,none,\n")
    res = run_batch(manifest, out_dir=tmp_path / "out", workers=1, reader=fake_reader)
    cushion, oval = res.stones
    assert [(p.item.rotation, p.item.polariser) for p in oval.photos] == [(0.0, 0.0), (0.0, 90.0)]
    assert [o.polariser for o in oval.analysis.observations] == [0.0, 90.0]
    assert oval.identification.notes == ("measured sg 2.65",)
    assert cushion.identification.notes == () and cushion.photos[0].item.polariser_setting == "none"
    doc = batch_document(res)
    assert doc["grouping"] == "manifest" and doc["stones"][1]["sg"] == 2.65


def test_spot_views_of_a_cabochon_give_one_spot_reading(tmp_path):
    """Three spot photos as the head moves: the reader's series reading, through the real core."""
    cab = tmp_path / "parcel" / "cabochon"
    # the spot's centre moves up the scale; its dark fraction falls linearly and is one half
    # at graduation 36.0, i.e. 1.30 + 0.01 * 36.0 = 1.66 on the default scale
    for name, centre, frac, ri in (("h00.png", 35.5, 0.75, 1.66), ("h01.png", 36.0, 0.5, 1.66),
                                   ("h02.png", 36.6, 0.2, 1.67)):
        write_fake_photo(cab / name, [(ri, "spot")], spot={"centre": centre, "dark_fraction": frac,
                                                           "length": 2.0})
    res = run_batch(tmp_path / "parcel", out_dir=tmp_path / "out", workers=1, reader=fake_reader)
    stone = res.stones[0]
    assert stone.analysis.spot_ri == pytest.approx(1.66, abs=0.005)
    assert any("from the series of 3 spot photo(s)" in n for n in stone.notes)
    assert not any("rotation not known" in n for n in stone.notes)  # no facet photos here
    row = [r for r in batch_csv(res).splitlines() if "cabochon/h02.png" in r][0]
    assert ",1.6700,0.0100," in row
