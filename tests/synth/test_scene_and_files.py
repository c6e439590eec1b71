"""Seeds, the photo envelope of random scenes, file formats and sidecars."""

import hashlib
import io
import json

import numpy as np
import pytest
from PIL import Image, ImageOps

from critline.errors import UsageError
from critline.synth import Scene, random_scene, render, write_photo
from critline.synth.photo_io import encode


def _small(seed, **kw):
    return random_scene(seed, megapixels=0.12, **kw)


def test_same_seed_same_bytes(tmp_path):
    for seed in (1, 2, 7):
        scene = _small(seed)
        a = write_photo(tmp_path / f"a{seed}.jpg", scene, seed).with_suffix(".json")
        b = write_photo(tmp_path / f"b{seed}.jpg", _small(seed), seed).with_suffix(".json")
        assert (tmp_path / f"a{seed}.jpg").read_bytes() == (tmp_path / f"b{seed}.jpg").read_bytes()
        ta, tb = json.loads(a.read_text()), json.loads(b.read_text())
        ta.pop("photo"), tb.pop("photo")
        assert ta == tb


def test_different_seed_different_noise():
    scene = _small(3, full_well=500.0)
    a, _ = render(scene, 1)
    b, _ = render(scene, 2)
    assert not np.array_equal(a, b)
    # same scene, only the noise differs: smoothed images agree
    import cv2

    sa, sb = (cv2.GaussianBlur(x.astype(np.float32), (0, 0), 6) for x in (a, b))
    assert np.abs(sa - sb).mean() < 2.0


def test_random_scenes_cover_the_envelope():
    # design.md, "What a photo can look like": the ranges below are the envelope.
    scenes = [random_scene(seed) for seed in range(400)]
    mp = np.array([s.width * s.height / 1e6 for s in scenes])
    assert mp.min() < 1.3 and mp.max() > 40 and mp.min() > 0.95 and mp.max() < 49
    d = np.array([s.field_diameter for s in scenes])
    assert d.min() >= 0.25 and d.max() <= 0.95 and d.min() < 0.3 and d.max() > 0.9
    rot = np.array([s.axis_angle_deg for s in scenes])
    assert rot.min() < 20 and rot.max() > 340
    tilt = np.array([s.tilt_deg for s in scenes])
    assert tilt.max() <= 10 and tilt.max() > 9
    q = np.array([s.jpeg_quality for s in scenes])
    assert q.min() == 70 and q.max() == 95
    assert {s.light for s in scenes} == {"sodium", "white"}
    assert {len(s.stone_ris) for s in scenes} == {0, 1, 2}
    assert any(s.stone_ris and min(s.stone_ris) > s.liquid_ri for s in scenes)  # over the limit
    assert {s.polariser for s in scenes if len(s.stone_ris) == 2} == {"both", "low", "high"}
    assert any(s.exposure > 1.3 for s in scenes) and any(s.exposure < 0.5 for s in scenes)
    assert any(s.crescent > 0 for s in scenes) and any(s.dust > 0 for s in scenes)
    assert any(s.defocus > 0 for s in scenes) and any(s.motion > 0 for s in scenes)
    assert {s.orientation for s in scenes} >= {1, 3, 6, 8}
    assert all(1.78 <= s.liquid_ri <= 1.81 for s in scenes)
    ratios = [abs(s.spacing_change) for s in scenes]
    assert min(ratios) >= 0.06 and max(ratios) <= 0.17
    clipped = [render_truth_field(s) for s in scenes[:60]]
    assert any(clipped) and not all(clipped)


def render_truth_field(scene):
    from critline.synth.render import ground_truth

    return ground_truth(scene)["field"]["clipped"]


@pytest.mark.parametrize("suffix", [".png", ".tif", ".heic", ".jpg"])
def test_formats_and_orientation(tmp_path, suffix):
    scene = _small(11, orientation=6, full_well=0.0, jpeg_quality=90)
    image, _ = render(scene, 11)
    path = tmp_path / f"p{suffix}"
    write_photo(path, scene, 11)
    if suffix == ".heic":
        import pillow_heif

        pillow_heif.register_heif_opener()
    with Image.open(path) as im:
        # HEIF carries the orientation as its own transform, which libheif applies on decoding
        assert im.getexif().get(0x0112, 1) == (1 if suffix == ".heic" else 6)
        stored = np.asarray(im.convert("RGB"))
        shown = np.asarray(ImageOps.exif_transpose(im).convert("RGB"))
    if suffix in (".png", ".jpg"):  # Pillow's TIFF loader and libheif apply the orientation themselves
        assert stored.shape == (image.shape[1], image.shape[0], 3)
    assert shown.shape == image.shape
    if suffix in (".png", ".tif"):
        assert np.array_equal(shown, image)  # lossless: exactly what the truth describes
    else:
        import cv2

        sa, sb = (cv2.GaussianBlur(x.astype(np.float32), (0, 0), 2) for x in (shown, image))
        assert np.abs(sa - sb).mean() < 2.0


@pytest.mark.parametrize("orientation", range(1, 9))
def test_every_orientation_displays_the_rendered_frame(orientation):
    image = np.random.default_rng(0).integers(0, 255, (5, 7, 3), dtype=np.uint8)
    data = encode(image, "png", orientation=orientation)
    shown = ImageOps.exif_transpose(Image.open(io.BytesIO(data)))
    assert np.array_equal(np.asarray(shown), image)


def test_sidecar_complete(tmp_path):
    scene = Scene(stone_ris=(1.544, 1.553), width=400, height=300, scale_offset=0.002)
    photo = write_photo(tmp_path / "x.jpg", scene, 5)
    assert photo == tmp_path / "x.jpg"
    sidecar = photo.with_suffix(".json")
    truth = json.loads(sidecar.read_text())
    assert truth["schema"] == "critline.synth-truth/1"
    assert truth["status"] == "ok" and truth["light"] == "sodium"
    assert [e["kind"] for e in truth["edges"]] == ["stone", "stone", "liquid"]
    for e in truth["edges"]:
        assert {"ri", "kind", "scale_position", "field_position", "pixel", "contrast"} <= set(e)
    assert set(truth["field"]) >= {"cx", "cy", "r"}
    assert truth["scale_error"] == {"offset": 0.002, "gain": 0.0}
    assert truth["params"]["stone_ris"] == [1.544, 1.553]
    assert Scene.from_dict(truth["params"]) == scene
    assert truth["photo"] == "x.jpg" and truth["seed"] == 5
    assert len(truth["graduations"]) == 51
    digest = hashlib.sha256((tmp_path / "x.jpg").read_bytes()).hexdigest()
    assert len(digest) == 64


def test_refuses_to_overwrite(tmp_path):
    scene = _small(1)
    write_photo(tmp_path / "x.png", scene, 1)
    before = (tmp_path / "x.png").read_bytes()
    with pytest.raises(UsageError, match="already exists"):
        write_photo(tmp_path / "x.png", _small(2), 2, overwrite=False)
    assert (tmp_path / "x.png").read_bytes() == before
    with pytest.raises(UsageError, match="unknown image suffix"):
        write_photo(tmp_path / "x.gif", scene, 1)
