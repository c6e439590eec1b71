"""read_photo and `critline read`: the critline.read/1 contract, bad files, non-eyepiece photos,
and readings of synthesizer photos against their truth sidecars."""

from __future__ import annotations

import io
import json
from contextlib import redirect_stdout

import numpy as np
import pytest
from PIL import Image

from critline.cli import main
from critline.photo import read_photo
from critline.readings import STATUSES


@pytest.fixture(scope="module")
def synth_photos(tmp_path_factory):
    """A few small synthesizer photos (sodium light, tuning seeds) with their truth."""
    from critline.synth import random_scene, write_photo

    folder = tmp_path_factory.mktemp("synth")
    out = []
    for seed, overrides in ((11, {"stone_ris": (1.544,)}), (12, {"stone_ris": (1.718,)}),
                            (13, {"stone_ris": ()})):
        scene = random_scene(seed, light="sodium", megapixels=1.0, field_diameter=0.8, crescent=0.0,
                             defocus=0.0, motion=0.0, field_cx=0.5, field_cy=0.5, polariser="both",
                             exposure=0.8, **overrides)
        path = folder / f"s{seed}.jpg"
        write_photo(path, scene, seed)
        out.append((path, json.loads(path.with_suffix(".json").read_text())))
    return out


def test_synth_readings_match_truth(synth_photos):
    for path, truth in synth_photos:
        r = read_photo(path)
        assert r.status == truth["status"], (path.name, r.reason)
        stones = [e["ri"] for e in truth["edges"] if e["kind"] == "stone"]
        for true_ri in stones:
            got = min(r.edges, key=lambda e: abs(e.ri - true_ri))
            # the synthesizer's truth is the onset of total reflection (Snell's law, critical angle)
            assert abs(got.ri - true_ri) <= max(3 * got.uncertainty, 0.0015), (path.name, got, true_ri)
            assert got.field_position is not None and -1 < got.field_position < 1
        assert r.field_circle is not None
        cx, cy, rad = r.field_circle
        assert abs(rad - truth["field"]["r"]) < 0.05 * truth["field"]["r"]


def test_json_contract(synth_photos, tmp_path):
    path, _ = synth_photos[0]
    d = read_photo(path).to_json()
    assert set(d) >= {"photo", "sha256", "status", "reason", "edges", "light", "mode", "quality"}
    assert d["status"] in STATUSES and d["mode"] in ("graduations", "field_frame")
    assert isinstance(d["quality"]["flags"], list)
    ris = [e["ri"] for e in d["edges"]]
    assert ris == sorted(ris)
    for e in d["edges"]:
        assert set(e) >= {"ri", "uncertainty", "kind", "scale_position", "contrast"}
        assert e["uncertainty"] > 0


def test_bad_files_rejected_with_reason(tmp_path):
    (tmp_path / "zero.jpg").write_bytes(b"")
    (tmp_path / "text.jpg").write_text("not a photo")
    buf = io.BytesIO()
    Image.fromarray(np.full((200, 300, 3), 120, np.uint8)).save(buf, "JPEG")
    (tmp_path / "cut.jpg").write_bytes(buf.getvalue()[:500])
    Image.fromarray(np.full((200, 300, 3), 120, np.uint8)).save(tmp_path / "blank.png")
    for name in ("zero.jpg", "text.jpg", "cut.jpg", "blank.png"):
        r = read_photo(tmp_path / name)
        assert r.status == "rejected" and r.reason and "\n" not in r.reason, name
        assert r.edges == ()


@pytest.mark.parametrize("name", ["astronaut", "camera", "coffee", "coins", "moon", "page", "chelsea", "rocket"])
def test_skimage_photographs_rejected(name, tmp_path):
    import skimage.data

    img = np.asarray(getattr(skimage.data, name)())
    p = tmp_path / f"{name}.png"
    Image.fromarray(img).save(p)
    r = read_photo(p)
    assert r.status == "rejected", (name, r.status, r.edges)


def test_cli_json_and_exit_codes(synth_photos, tmp_path):
    good, _ = synth_photos[0]
    bad = tmp_path / "bad.jpg"
    bad.write_text("nope")
    out = io.StringIO()
    with redirect_stdout(out):
        code = main(["read", str(good), "--json"])
    assert code == 0
    doc = json.loads(out.getvalue())
    assert doc["schema"] == "critline.read/1" and doc["calibration"] is None
    assert len(doc["photos"]) == 1
    out = io.StringIO()
    with redirect_stdout(out):
        code = main(["read", str(good), str(bad), "--json"])
    assert code == 3
    doc = json.loads(out.getvalue())
    assert [p["status"] == "rejected" for p in doc["photos"]] == [False, True]
    assert main(["read", str(good), "--instrument", str(tmp_path / "missing.toml")]) == 2


def test_overlay_written_without_overwriting(synth_photos, tmp_path):
    good, _ = synth_photos[0]
    folder = tmp_path / "marked"
    folder.mkdir()
    existing = folder / f"{good.stem}.marked.jpg"
    existing.write_bytes(b"the user's own file")
    read_photo(good, overlay_dir=folder)
    assert existing.read_bytes() == b"the user's own file"
    made = sorted(p.name for p in folder.iterdir())
    assert len(made) == 2
    assert Image.open(folder / made[0 if made[0] != existing.name else 1]).size[0] > 100


class _FieldOnlyCalibration:
    """Stand-in for a calibration with a field-frame map: the drawing's own geometry (field
    position in radii -> scale value), so the fallback can be checked against it."""

    id = "drawn-geometry"
    field_map = True

    def __init__(self, a, b, mid, radius):
        self.a, self.b, self.mid, self.radius = a, b, mid, radius

    def _value(self, f):
        u = f * self.radius
        return self.mid + (-self.a + np.sqrt(self.a * self.a + 4 * self.b * u)) / (2 * self.b)

    def field_to_ri(self, f, f_unc):
        slope = (self._value(f + 1e-4) - self._value(f - 1e-4)) / 2e-4
        return float(self._value(f)), float(np.hypot(abs(slope) * f_unc, 2e-4)), ("field_frame",)

    def scale_to_ri(self, position, unc):  # pragma: no cover - not reached without graduations
        raise AssertionError("graduations were not expected")


def test_field_frame_fallback_without_graduations(tmp_path):
    from tests.photo.drawing import draw_eyepiece

    img, truth = draw_eyepiece(size=(720, 960), angle_deg=30.0, edges=(1.62,), seed=4, ink=0.0)
    p = tmp_path / "blank-scale.png"
    Image.fromarray(img).save(p)
    assert read_photo(p).status == "rejected"  # no graduations and no field-frame map
    a, b, mid = truth["map"]
    cal = _FieldOnlyCalibration(a, b, mid, truth["field"]["r"])
    r = read_photo(p, calibration=cal)
    assert r.mode == "field_frame" and r.status == "ok", r.reason
    stone = [e for e in r.edges if e.kind == "stone"]
    assert stone and abs(stone[0].ri - 1.62) < max(3 * stone[0].uncertainty, 0.003)
