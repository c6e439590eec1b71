"""The report files without a browser: JSON contract fields, CSV rows, self-contained HTML, SVG helpers."""

import csv
import io
import json
import re
from types import SimpleNamespace

import pytest

from critline.report import batch_csv, batch_document, batch_html
from critline.report.document import candidate_name, r4
from critline.report.svg import nice_step, profile_plot, rotation_plot, ticks


def test_document_fields(sample_result):
    doc = batch_document(sample_result)
    assert doc["schema"] == "critline.batch/1"
    json.dumps(doc)  # plain JSON
    oval = next(s for s in doc["stones"] if s["stone"] == "oval")
    # the contract's fields (design.md), RI to four decimals
    for key in ("stone", "photos", "ri_low", "ri_high", "birefringence", "uncertainty",
                "optic_character", "optic_sign", "over_limit", "candidates", "flags"):
        assert key in oval
    assert oval["photos"] == 5 and oval["photos_used"] == 4
    assert oval["ri_low"] == 1.544 and oval["ri_high"] == 1.5532 and oval["birefringence"] == 0.0092
    assert oval["candidates"][0] == {"material": "quartz", "aliases": ["amethyst"], "score": 0.9,
                                     "agrees": ["RI 1.544-1.553 fits"], "conflicts": []}
    assert [r["rotation"] for r in oval["readings"]][:3] == [0.0, 0.0, 90.0]
    assert {p["photo"] for p in doc["problems"]} == {"oval/<script>.jpg", "empty/"}


def test_csv_one_row_per_stone_and_per_reading(sample_result):
    rows = list(csv.DictReader(io.StringIO(batch_csv(sample_result))))
    stones = [r for r in rows if r["row"] == "stone"]
    readings = [r for r in rows if r["row"] == "reading"]
    assert len(stones) == 2 and len(readings) == 7
    oval = next(r for r in stones if r["stone"] == "oval")
    assert (oval["ri_low"], oval["ri_high"], oval["leading_candidate"]) == ("1.5440", "1.5532", "quartz")
    liquid = next(r for r in readings if r["photo"] == "oval/r000_pol0.png")
    assert (liquid["edge_1"], liquid["liquid_edge"], liquid["rotation"], liquid["polariser"]) == (
        "1.5442", "1.7900", "0", "0")
    bad = next(r for r in readings if r["photo"] == "oval/<script>.jpg")
    assert bad["status"] == "rejected" and "not an image" in bad["reason"]


def test_html_is_self_contained_and_escapes_names(sample_result):
    html = batch_html(sample_result)
    # nothing to fetch: every src/href is a data URI or an anchor in the page
    for attr in re.findall(r'(?:src|href)="([^"]*)"', html):
        assert attr.startswith(("data:", "#")), attr
    assert "<script" not in html.lower().replace("&lt;script", "")
    assert "oval/&lt;script&gt;.jpg" in html
    assert "&lt;img src=x onerror=window.__pwned=1&gt;.png" in html
    assert "Content-Security-Policy" in html


def test_candidate_name_takes_the_core_material_key():
    material = SimpleNamespace(key="corundum")
    assert candidate_name(SimpleNamespace(material=material)) == "corundum"
    assert candidate_name(SimpleNamespace(material="beryl")) == "beryl"
    assert r4(1.54424) == 1.5442
    assert r4(float("nan")) is None and r4(None) is None


def test_svg_helpers():
    assert nice_step(0.01, 5) == pytest.approx(0.002)
    assert ticks(1.5435, 1.5545, 5) == pytest.approx([1.544, 1.546, 1.548, 1.55, 1.552, 1.554])
    pts = [(0.0, 1.5442, 0.0004, "low", "pol", "a <b>"), (90.0, 1.5533, 0.0004, "high", "open", "b")]
    svg = rotation_plot(pts, levels=[(1.5442, "low", "#000")])
    assert svg.count("<circle") == 1 and svg.count("<rect") >= 2 and "a &lt;b&gt;" in svg
    svg = rotation_plot([(1, 1.6, 0.001, "low", "open", "x"), (2, 1.6, 0.001, "low", "open", "y")],
                        rotation_known=False)
    assert "rotation not known" in svg
    xs = [i * 0.1 for i in range(500)]
    ys = [0.1 if x < 24.4 else 0.9 for x in xs]
    svg = profile_plot(xs, ys, [(24.4, 1.544, "stone")])
    assert "<polyline" in svg and "1.5440" in svg
    assert profile_plot(xs, ys, []) == "" and profile_plot([0, 1], [0, 1], [(0.5, 1.3, "stone")]) == ""
