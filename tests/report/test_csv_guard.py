"""CSV formula-injection guard: text a spreadsheet would run as a formula gets a leading apostrophe.

Source of the rule: OWASP, "CSV Injection" (cells starting with = + - @ tab or carriage return).
Numbers, negative ones included, stay numbers.
"""

import csv
import io

import pytest

from critline.batch import run_batch
from critline.report import batch_csv
from critline.report.table import guard_cell


@pytest.mark.parametrize("text, expected", [
    ("=HYPERLINK(\"http://x\")", "'=HYPERLINK(\"http://x\")"),
    ("+cmd|' /C calc'!A0", "'+cmd|' /C calc'!A0"),
    ("-2+3", "'-2+3"),
    ("@SUM(A1:A2)", "'@SUM(A1:A2)"),
    ("\t=1", "'\t=1"),
    ("\r=1", "'\r=1"),
    ("\t5", "'\t5"),          # padded: not a plain number
    ("-", "-"),               # the optic sign: a lone operator runs nothing
    ("+", "+"),
    ("-x", "'-x"),
    ("-0.0030", "-0.0030"),   # numbers unchanged
    ("-30", "-30"),
    ("+1.5", "+1.5"),
    ("1.5442", "1.5442"),
    ("oval/r000_pol0.png", "oval/r000_pol0.png"),
    ("", ""),
])
def test_guard_cell(text, expected):
    assert guard_cell(text) == expected


def test_names_from_the_disk_cannot_become_formulas(tmp_path, fake_core):
    w = fake_core.write_fake_photo
    parcel = tmp_path / "parcel"
    w(parcel / "=1+1" / "@x.png", [1.5442])
    w(parcel / "=1+1" / "r010_pol0.png", [1.5440])
    manifest = parcel / "m.csv"
    manifest.write_text("stone,photo,rotation\n-cmd,=1+1/@x.png,-30\n-cmd,=1+1/r010_pol0.png,\n")
    for source, stone in ((parcel, "=1+1"), (manifest, "-cmd")):
        res = run_batch(source, out_dir=tmp_path / "out", workers=1, reader=fake_core.fake_reader)
        rows = list(csv.DictReader(io.StringIO(batch_csv(res))))
        assert {r["stone"] for r in rows} == {"'" + stone}
        photo = next(r for r in rows if r["photo"].endswith("@x.png"))
        assert photo["photo"] == "'=1+1/@x.png"  # the path starts with "="
        assert photo["edge_1"] == "1.5442"
        if source == manifest:
            assert photo["rotation"] == "-30"  # a negative number stays a number
        for r in rows:
            for value in r.values():
                assert not value.startswith(("=", "+", "@", "\t", "\r")) or value.startswith("'")
                assert not value.startswith("-") or value.lstrip("-").replace(".", "").isdigit()
