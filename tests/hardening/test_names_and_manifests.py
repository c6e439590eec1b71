"""Manifests and folders: paths that climb out are refused; awkward names survive every command.

==============================================  ============================================================
input                                           behaviour
==============================================  ============================================================
calibrate manifest row ``../outside.jpg``,      exit 2, one line naming the manifest, the line and the
``sub/../../outside.jpg`` or an absolute path   photo ("outside the manifest's folder" / "relative"); no
                                                calibration file written
batch manifest row with the same paths          exit 2, one line ("climbs out" / "absolute"); no report
photo names with spaces, unicode, quotes        read: the JSON names them as given; calibrate: the
(``quartz ref 1.jpg``, ``spinelle № 2 –         references keep the names; batch (folder and manifest):
ü日本.jpg``, ``fluorite "lab" it's.jpg``)        the stone and photo names come back unchanged, exit 0
a photo named ``<script>.jpg`` in a batch       the HTML report shows the name as text in headless
                                                Chromium; nothing injected or executed
==============================================  ============================================================
"""

from __future__ import annotations

import csv
import importlib.util
from pathlib import Path

import pytest
from hardening_helpers import assert_clean_stderr, cli, variant, write_image

# known indices of the invented reference set (values from memory: quartz omega, spinel, fluorite)
NAMES = {"quartz ref 1.jpg": 1.544, "spinelle № 2 – ü日本.jpg": 1.718, 'fluorite "lab" it\'s.jpg': 1.434}
STONE = "Stone № 7 – 'oval' (invented)"


def _load_report_browser():
    """The headless-browser fixture of the report tests (tests/report/conftest.py), reused."""
    path = Path(__file__).resolve().parents[1] / "report" / "conftest.py"
    spec = importlib.util.spec_from_file_location("report_conftest_for_hardening", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.browser


browser = _load_report_browser()


@pytest.fixture(scope="module")
def named_photos(tmp_path_factory, quartz_view, spinel_view, fluorite_like_view):
    d = tmp_path_factory.mktemp("names")
    views = dict(zip(NAMES, (quartz_view, spinel_view, fluorite_like_view), strict=True))
    for name, (image, _) in views.items():
        write_image(d / "refs" / name, image)
        write_image(d / "parcel" / STONE / name, image)
    # a hostile name on a real eyepiece photo (different bytes: a reading of its own)
    write_image(d / "parcel" / STONE / "<script>.jpg", variant(quartz_view[0], 3))
    write_image(d / "outside.jpg", quartz_view[0])
    return d


def _manifest(path: Path, header, rows) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        w.writerows(rows)
    return path


CLIMBING = ["../outside.jpg", "refs/../../outside.jpg"]


@pytest.mark.parametrize("bad", CLIMBING + ["ABSOLUTE"])
def test_calibrate_manifest_refuses_paths_outside(named_photos, bad):
    d = named_photos
    bad = str(d / "outside.jpg") if bad == "ABSOLUTE" else bad
    rows = [(name, ri) for name, ri in NAMES.items()] + [(bad, 1.544)]
    manifest = _manifest(d / "refs" / "manifest.csv", ("photo", "known_ri"), rows)
    out = d / "refused-cal.toml"
    run = cli("calibrate", manifest, "--out", out)
    assert run.code == 2
    lines = run.err.strip().splitlines()
    assert len(lines) == 1 and "manifest.csv" in lines[0] and "line 5" in lines[0], run.err
    assert "outside the manifest's folder" in lines[0] or "relative to the manifest" in lines[0]
    assert not out.exists()  # nothing written
    assert_clean_stderr(run.err)


@pytest.mark.parametrize("bad", CLIMBING + ["ABSOLUTE"])
def test_batch_manifest_refuses_paths_outside(named_photos, bad):
    d = named_photos
    bad = str(d / "outside.jpg") if bad == "ABSOLUTE" else bad
    manifest = _manifest(d / "refs" / "batch.csv", ("stone", "photo"),
                         [("a", n) for n in NAMES] + [("a", bad)])
    out = d / "refused-batch"
    run = cli("batch", manifest, "--out", out, "--json")
    assert run.code == 2 and run.out == ""
    lines = run.err.strip().splitlines()
    assert len(lines) == 1 and "batch.csv:5" in lines[0], run.err
    assert "climbs out" in lines[0] or "absolute" in lines[0]
    assert not (out / "report.json").exists()
    assert_clean_stderr(run.err)


@pytest.fixture(scope="module")
def calibration(named_photos):
    d = named_photos
    manifest = _manifest(d / "refs" / "manifest.csv", ("photo", "known_ri", "material"),
                         [(name, ri, f"invented reference {i}") for i, (name, ri) in enumerate(NAMES.items())])
    out = d / "calibrations" / "bench A.toml"
    run = cli("calibrate", manifest, "--out", out, "--json")
    return run, out


def test_calibrate_keeps_awkward_names(calibration):
    run, out = calibration
    assert run.code == 0, run.err
    doc = run.json()
    assert sorted(r["photo"] for r in doc["references"]) == sorted(NAMES)
    assert out.is_file()
    # written atomically: no temporary file left beside it
    assert [p.name for p in out.parent.iterdir()] == [out.name]


def test_read_keeps_awkward_names(named_photos, calibration):
    _, cal = calibration
    photos = [named_photos / "refs" / n for n in NAMES]
    run = cli("read", *photos, "--calibration", cal, "--json")
    assert run.code == 0, run.err
    doc = run.json()
    assert [Path(p["photo"]).name for p in doc["photos"]] == list(NAMES)
    assert doc["calibration"] and doc["calibration"].startswith("cal-")
    for p, ri in zip(doc["photos"], NAMES.values(), strict=True):
        (edge,) = [e for e in p["edges"] if e["kind"] == "stone"]
        # calibrated on these very photos: each reads back its known index within 3 sigma (floor 0.002)
        assert abs(edge["ri"] - ri) <= max(3 * edge["uncertainty"], 0.002)


@pytest.fixture(scope="module")
def named_batch(named_photos):
    out = named_photos / "batch out"
    run = cli("batch", named_photos / "parcel", "--out", out, "--json", "--workers", "1")
    return run, out


def test_batch_folder_keeps_awkward_names(named_batch):
    run, out = named_batch
    assert run.code == 0, run.err
    doc = run.json()
    (stone,) = doc["stones"]
    assert stone["stone"] == STONE
    assert sorted(Path(r["photo"]).name for r in stone["readings"]) == sorted([*NAMES, "<script>.jpg"])
    assert all(r["status"] == "ok" for r in stone["readings"])
    assert_clean_stderr(run.err)


def test_batch_manifest_keeps_awkward_names(named_photos, named_batch):
    _, out = named_batch
    manifest = _manifest(named_photos / "parcel" / "parcel.csv", ("stone", "photo"),
                         [(STONE, f"{STONE}/{n}") for n in [*NAMES, "<script>.jpg"]])
    run = cli("batch", manifest, "--out", out, "--json", "--workers", "1")
    assert run.code == 0, run.err
    doc = run.json()
    (stone,) = doc["stones"]
    assert stone["stone"] == STONE
    assert sorted(Path(r["photo"]).name for r in stone["readings"]) == sorted([*NAMES, "<script>.jpg"])
    # the same bytes were read by the folder run: all four come from the cache under their names
    assert doc["counts"]["cached"] == 4 and doc["counts"]["read"] == 0


@pytest.mark.browser
def test_html_report_shows_script_name_as_text(named_batch, browser):
    from selenium.webdriver.common.by import By

    run, out = named_batch
    assert run.code == 0
    html = out / "report.html"
    browser.get(html.resolve().as_uri())
    body = browser.find_element(By.TAG_NAME, "body").text
    assert "<script>.jpg" in body  # the name, shown as text
    assert STONE in body
    for name in NAMES:
        assert name in body
    assert browser.execute_script("return document.getElementsByTagName('script').length") == 0
    source = html.read_text(encoding="utf-8")
    assert "<script>.jpg" not in source and "&lt;script&gt;.jpg" in source
