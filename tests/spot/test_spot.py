"""Spot (distance) view: synthesizer physics, detector, single-photo and series readings.

Outside references: the onset of total reflection at s = n is Snell's law (Born and Wolf,
*Principles of Optics*, 1.5); jadeite RI about 1.66 and nephrite about 1.61-1.62 (from memory,
standard gemmology texts, e.g. Webster, *Gems*); a spot reading is good to about +-0.01 (common
practice, no source).
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest

from critline.instrument import DEFAULT
from critline.photo.field import find_field
from critline.photo.load import decode, load_photo
from critline.photo.spot import (
    SPOT_PRECISION,
    looks_like_spot_view,
    read_spot_series,
    read_spot_view,
    spot_frame,
)
from critline.readings import EDGE_KINDS
from critline.synth import random_scene, render, write_photo
from critline.synth.render import scale_map
from critline.synth.scene import Scene, clean_overrides
from critline.synth.spot import (
    random_spot_scene,
    series_values,
    spot_axes,
    spot_view,
    write_spot_series,
)

JADEITE = 1.66   # from memory (standard gemmology texts)
NEPHRITE = 1.615  # from memory: 1.61-1.62


def _field(path):
    photo = load_photo(path)
    short = min(photo.width, photo.height)
    rc = next((r for r in (8, 4, 2) if short / r >= 300), 1)
    fr = find_field(decode(photo, rc, grey=True), rc)
    assert fr.circle is not None, fr.reason
    return photo, fr.circle


@pytest.mark.parametrize("ri", [JADEITE, NEPHRITE])
def test_split_sits_at_the_index_on_a_clean_render(ri):
    # Snell's law: total reflection from s = n on; the spot is bright from there on
    scene = Scene(view="spot", stone_ris=(ri,), spot_value=ri + 0.01, spot_length=0.08, spot_v=0.0,
                  edge_blur=0.0, stray_light=0.0, illumination_slope=0.0, field_falloff=0.0, spot_rim=0.0)
    ppu = 400.0
    img, c0, _ = spot_view(scene, ppu)
    row = img[0, int(round(c0 + scene.spot_v * ppu))]
    uc, a, _ = spot_axes(scene)
    u = (np.arange(img.shape[-1]) - c0) / ppu
    inside = np.abs(u - uc) < 0.8 * a
    top = row[inside].max()
    onset = u[inside][np.argmax(row[inside] >= 0.999 * top)]
    value = float(scale_map(scene).value(onset))
    # within a fifth of a graduation (0.01 per graduation)
    assert abs(value - ri) < 0.2 * DEFAULT.step
    # below the split the spot is dim (Fresnel reflectance well under 1), above it bright
    below = row[inside & (u < float(scale_map(scene).position(ri - 0.02)))]
    assert below.max() < 0.5 * top


def test_spot_moves_with_the_head_but_not_its_split():
    base = Scene(view="spot", stone_ris=(JADEITE,), spot_length=0.08, edge_blur=0.0)
    a = render(dataclasses.replace(base, spot_value=JADEITE - 0.02, **clean_overrides()), 1)[1]["spot"]
    b = render(dataclasses.replace(base, spot_value=JADEITE + 0.02, **clean_overrides()), 1)[1]["spot"]
    assert b["centre_scale_position"] - a["centre_scale_position"] == pytest.approx(4.0, abs=0.01)
    assert a["split_scale_position"] == pytest.approx(b["split_scale_position"])
    assert a["dark_fraction"] > 0.5 > b["dark_fraction"]


def test_truth_sidecar_of_a_spot_view(tmp_path):
    scene = random_spot_scene(3, megapixels=0.5)
    path = write_photo(tmp_path / "s.jpg", scene, 3)
    truth = json.loads(path.with_suffix(".json").read_text())
    assert truth["view"] == "spot"
    assert truth["spot"]["ri"] == pytest.approx(scene.stone_ris[0], abs=1e-6)
    assert truth["status"] in ("ok", "no_edge", "over_limit")
    assert all(e["kind"] == "spot" for e in truth["edges"])
    assert Scene.from_dict(truth["params"]) == scene


@pytest.mark.parametrize("seed", [2, 4, 8])
def test_detector_takes_spot_photos(tmp_path, seed):
    path = write_photo(tmp_path / f"s{seed}.jpg", random_spot_scene(seed, megapixels=1.0), seed)
    photo, circle = _field(path)
    assert looks_like_spot_view(spot_frame(photo, circle)).is_spot


@pytest.mark.parametrize("seed", [101, 102, 103, 104, 105, 106])
def test_detector_never_takes_facet_photos(tmp_path, seed):
    path = write_photo(tmp_path / f"f{seed}.jpg", random_scene(seed, megapixels=0.8), seed)
    photo = load_photo(path)
    short = min(photo.width, photo.height)
    rc = next((r for r in (8, 4, 2) if short / r >= 300), 1)
    fr = find_field(decode(photo, rc, grey=True), rc)
    if fr.circle is None:
        pytest.skip("no field found in this facet photo")
    decision = looks_like_spot_view(spot_frame(photo, fr.circle))
    assert not decision.is_spot, decision.figures
    assert read_spot_view(photo, fr.circle) is None


# development seeds (the held-out figures are in bench/bench_spot.py)
def test_single_photo_readings_within_spot_precision(tmp_path):
    got = []
    for seed in (4, 6, 10, 20, 22, 24):
        scene = random_spot_scene(seed, megapixels=1.0)
        path = write_photo(tmp_path / f"s{seed}.jpg", scene, seed)
        truth = json.loads(path.with_suffix(".json").read_text())
        assert truth["status"] == "ok"  # the split lies in the spot in every one of these
        photo, circle = _field(path)
        reading = read_spot_view(photo, circle, name=path.name)
        assert reading is not None  # detected as a spot view
        json.dumps(reading.to_json(include_profile=True), allow_nan=False)  # no NaN anywhere
        if reading.status != "ok":
            assert reading.reason  # no reading, but said why (e.g. doubtful graduation values)
            continue
        (edge,) = reading.edges
        assert edge.kind == "spot" and "spot" in EDGE_KINDS
        assert abs(edge.ri - truth["spot"]["ri"]) <= SPOT_PRECISION, seed
        assert edge.uncertainty >= SPOT_PRECISION
        assert "spot_reading" in reading.quality.flags
        got.append(seed)
    assert len(got) >= 4, got


def test_series_of_head_positions(tmp_path):
    base = random_spot_scene(21, megapixels=1.0)
    ri = base.stone_ris[0]
    written = write_spot_series(tmp_path / "HL", base, 500, series_values(ri, base.spot_length, 4, 0.3))
    readings = []
    for path in written:
        photo, circle = _field(path)
        r = read_spot_view(photo, circle, name=path.name)
        if r is not None:
            readings.append(r)
    assert len(readings) >= 2
    series = read_spot_series(readings)
    assert series.status == "ok", series.reason
    assert abs(series.ri - ri) <= SPOT_PRECISION
    assert math.isfinite(series.uncertainty) and series.uncertainty >= SPOT_PRECISION
    assert series.edge().kind == "spot"


def test_series_without_a_split_gives_no_reading():
    assert read_spot_series([]).status == "no_edge"


def test_cli_writes_a_series_and_refuses_to_overwrite(tmp_path):
    from critline.cli import main

    args = ["synth", "spot", str(tmp_path / "HL"), "--ri", "1.66", "--photos", "2", "--megapixels", "0.3"]
    assert main(args) == 0
    truth = json.loads((tmp_path / "HL" / "h01.json").read_text())
    assert truth["view"] == "spot" and truth["spot"]["ri"] == pytest.approx(1.66)
    assert main(args) == 2  # usage error: refuses to overwrite
    assert main(["synth", "spot", str(tmp_path / "X"), "--ri", "7"]) == 2


def test_demo_cabochon_reads_and_demo_facets_are_not_spots():
    # samples/parcel/HL-07: invented jadeite cabochon (about 1.66, from memory), instrument reading
    # about 0.003 low uncorrected (samples/README.md)
    from pathlib import Path

    from critline.photo.spot import read_spot_photo
    from critline.synth.demo import demo_instrument

    root = Path(__file__).resolve().parents[2] / "samples"
    cab = sorted((root / "parcel" / "HL-07").glob("*.jpg"))
    if not cab:
        pytest.skip("demo samples not present")
    inst = demo_instrument()
    readings = [read_spot_photo(p, inst) for p in cab]
    assert all(r is not None for r in readings)
    ok = [r for r in readings if r.status == "ok"]
    assert len(ok) >= 3
    truth = json.loads(cab[0].with_suffix(".json").read_text())["spot"]["ri"]
    assert all(abs(r.edges[0].ri - truth) <= SPOT_PRECISION for r in ok)
    assert abs(read_spot_series(readings, inst).ri - truth) <= SPOT_PRECISION
    facets = sorted((root / "parcel" / "HL-01").glob("*.jpg"))[:3]
    assert facets and all(read_spot_photo(p, inst) is None for p in facets)


def test_read_photo_dispatches_spot_views_automatically():
    """The demo cabochon (invented jadeite, about 1.66 from memory) reads through read_photo as a
    spot reading, and a demo facet photo stays a flat-facet reading."""
    from pathlib import Path

    from critline.photo import read_photo

    root = Path(__file__).resolve().parents[2] / "samples" / "parcel"
    spot = read_photo(root / "HL-07" / "h01.jpg")
    assert spot.status == "ok" and [e.kind for e in spot.edges] == ["spot"]
    assert abs(spot.edges[0].ri - 1.656) <= 0.01 + 0.003  # +-0.01 (common practice) plus the demo scale's 0.003 offset
    facet = read_photo(root / "HL-01" / "r000_pol0.jpg")
    assert all(e.kind != "spot" for e in facet.edges)
