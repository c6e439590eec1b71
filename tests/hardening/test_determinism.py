"""Determinism: the same photos and calibration give byte-identical JSON.

=============================================================  ==========================================
run                                                            behaviour
=============================================================  ==========================================
``critline read PHOTOS --calibration FILE --json`` twice, in   byte-identical stdout (no field of the
two processes with different hash seeds                        read/1 document is a timestamp)
``critline batch FOLDER --json --fresh --workers 2`` twice     byte-identical stdout (the batch/1 document
(photos read anew by worker processes each time)               has no timestamp either)
=============================================================  ==========================================
"""

from __future__ import annotations

from hardening_helpers import cli, cli_process, write_image

from critline.calibration.fitting import ReferencePair, fit_calibration
from critline.calibration.record import make_calibration
from critline.calibration.store import dumps_calibration


def _calibration(path):
    """An invented calibration: a scale reading 0.003 high, references at known indices (from memory)."""
    known = (1.434, 1.544, 1.621, 1.718, 1.762)
    pairs = [ReferencePair((ri - 0.003 - 1.30) / 0.01, 0.03, ri, label=f"invented {ri}") for ri in known]
    cal = make_calibration(fit_calibration(pairs), photos=tuple((f"ref-{i}.jpg", "", "") for i in range(5)),
                           created="2026-01-01T00:00:00+00:00")
    path.write_text(dumps_calibration(cal))
    return path


def test_read_json_is_byte_identical_across_processes(tmp_path, quartz_view, spinel_view):
    photos = [write_image(tmp_path / "a.jpg", quartz_view[0]), write_image(tmp_path / "b.png", spinel_view[0], "png")]
    cal = _calibration(tmp_path / "cal.toml")
    runs = [cli_process("read", *photos, "--calibration", cal, "--json", env={"PYTHONHASHSEED": seed})
            for seed in ("1", "2")]
    assert runs[0].code == 0, runs[0].err
    assert runs[0].out == runs[1].out
    doc = runs[0].json()
    assert doc["calibration"].startswith("cal-")
    assert [p["status"] for p in doc["photos"]] == ["ok", "ok"]


def test_batch_json_is_byte_identical_when_read_fresh(tmp_path, quartz_view, spinel_view, fluorite_like_view):
    parcel = tmp_path / "parcel"
    write_image(parcel / "stone-1" / "r000_none.jpg", quartz_view[0])
    write_image(parcel / "stone-1" / "r045_none.jpg", spinel_view[0])  # an odd stone: both readings kept
    write_image(parcel / "stone-2" / "r000_none.jpg", fluorite_like_view[0])
    out = tmp_path / "out"
    args = ("batch", parcel, "--out", out, "--json", "--fresh", "--workers", "2", "--no-overlays")
    first, second = cli(*args), cli(*args)
    assert first.code == 0, first.err
    assert first.json()["counts"]["read"] == 3 and second.json()["counts"]["read"] == 3
    assert first.out == second.out
