"""Stage 1 (loading): formats, depths, orientation, and bad files."""

from __future__ import annotations

import hashlib
import io

import numpy as np
import pytest
from PIL import Image

from critline.photo.load import PhotoRejected, decode, load_photo, srgb_to_linear


def _gradient(h=96, w=128):
    y, x = np.mgrid[0:h, 0:w]
    return np.stack([x * 2, y * 2, (x + y)], axis=2).astype(np.uint8)


def test_zero_byte_file_rejected(tmp_path):
    p = tmp_path / "empty.jpg"
    p.write_bytes(b"")
    with pytest.raises(PhotoRejected, match="empty"):
        load_photo(p)


def test_text_named_jpg_rejected(tmp_path):
    p = tmp_path / "notes.jpg"
    p.write_text("this is not a photo\n")
    with pytest.raises(PhotoRejected, match="not an image"):
        load_photo(p)


def test_missing_file_rejected(tmp_path):
    with pytest.raises(PhotoRejected, match="cannot read"):
        load_photo(tmp_path / "nope.jpg")


def test_truncated_jpeg_rejected(tmp_path):
    buf = io.BytesIO()
    Image.fromarray(_gradient()).save(buf, "JPEG", quality=90)
    data = buf.getvalue()
    p = tmp_path / "cut.jpg"
    p.write_bytes(data[: len(data) * 2 // 3])
    with pytest.raises(PhotoRejected, match="truncated"):
        load_photo(p)


def test_jpeg_sha256_and_size(tmp_path):
    p = tmp_path / "a.jpg"
    Image.fromarray(_gradient()).save(p, "JPEG", quality=95)
    photo = load_photo(p)
    assert photo.sha256 == hashlib.sha256(p.read_bytes()).hexdigest()
    assert (photo.width, photo.height) == (128, 96)
    assert photo.fast_jpeg
    rgb = decode(photo)
    assert rgb.shape == (96, 128, 3) and rgb.dtype == np.float32
    # JPEG at quality 95 keeps a smooth gradient within a few levels
    assert np.abs(rgb[..., 0] * 255 - _gradient()[..., 0]).mean() < 3


def test_sixteen_bit_png_keeps_depth(tmp_path):
    ramp = (np.linspace(0, 65535, 128)[None, :] * np.ones((80, 1))).astype(np.uint16)
    p = tmp_path / "deep.png"
    Image.fromarray(ramp).save(p)
    photo = load_photo(p)
    grey = decode(photo, grey=True)
    # 16-bit steps survive: 65535/127 per column, far finer than 8-bit could hold at the low end
    assert grey.shape == (80, 128)
    assert np.allclose(grey[0], ramp[0] / 65535.0, atol=1e-5)


def test_cmyk_jpeg_decodes_to_rgb(tmp_path):
    rgb = np.zeros((64, 96, 3), np.uint8)
    rgb[:, :48] = (200, 30, 30)
    rgb[:, 48:] = (30, 30, 200)
    p = tmp_path / "cmyk.jpg"
    Image.fromarray(rgb).convert("CMYK").save(p, "JPEG", quality=95)
    photo = load_photo(p)
    assert photo.mode == "CMYK"
    out = decode(photo)
    assert out.shape == (64, 96, 3)
    left, right = out[:, :40].mean(axis=(0, 1)), out[:, 56:].mean(axis=(0, 1))
    assert left[0] > left[2] + 0.3 and right[2] > right[0] + 0.3


@pytest.mark.parametrize("orientation, expect", [(6, (128, 96)), (8, (128, 96)), (3, (96, 128))])
def test_exif_orientation_honoured(tmp_path, orientation, expect):
    img = np.zeros((96, 128, 3), np.uint8)
    img[:20, :30] = 255  # bright patch in the stored top-left corner
    pil = Image.fromarray(img)
    exif = pil.getexif()
    exif[0x0112] = orientation
    p = tmp_path / f"o{orientation}.jpg"
    pil.save(p, "JPEG", quality=95, exif=exif.tobytes())
    photo = load_photo(p)
    out = decode(photo, grey=True)
    assert (photo.height, photo.width) == expect
    assert out.shape == expect
    # the patch moves where the EXIF tag says (Pillow's exif_transpose is the reference)
    ref = np.asarray(Image.open(p).convert("L").transpose(
        {3: Image.Transpose.ROTATE_180, 6: Image.Transpose.ROTATE_270, 8: Image.Transpose.ROTATE_90}[orientation]))
    assert np.abs(out * 255 - ref).mean() < 4


def test_pixel_limit(tmp_path):
    p = tmp_path / "big.png"
    Image.fromarray(np.zeros((400, 500), np.uint8)).save(p)
    with pytest.raises(PhotoRejected, match="too large"):
        load_photo(p, max_pixels=100_000)


def test_srgb_to_linear_matches_colour_science():
    # reference: IEC 61966-2-1 sRGB decoding as implemented by colour-science
    import colour

    v = np.linspace(0, 1, 11)
    assert np.allclose(srgb_to_linear(v), colour.cctf_decoding(v, function="sRGB"), atol=1e-6)
