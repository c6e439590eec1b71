"""Bad and unusual photo files through `critline read --json`: each a named, documented behaviour.

The corpus is generated here (tmp_path), never downloaded.  Exit codes follow
design.md: 0 every photo got a result (``ok``, ``no_edge``, ``over_limit``),
3 at least one photo rejected (the others still read), 2 usage error.  Every
rejection carries a one-line reason naming what is wrong, the file is named on
stderr in one line, and there is never a traceback.

==========================  ==================================================  ==========  ========================
file                        what it is                                          status      reason says
==========================  ==================================================  ==========  ========================
zero.jpg                    zero bytes                                          rejected    "empty file"
truncated.jpg               an eyepiece JPEG cut at 60 % of its bytes           rejected    "truncated"
notes.jpg                   a text file named .jpg                              rejected    "not an image"
huge-200mp.png              PNG header declaring 20000 x 10000 (200 MP), no     rejected    "too large", refused
                            pixel data worth the name                                       before any decoding
huge-200mp.jpg              JPEG whose frame header declares 20000 x 10000      rejected    "too large"
one-pixel.png               1 x 1                                               rejected    "too small"
strip-30000x10.png          30000 x 10                                          rejected    "too small"
animated.gif                three frames                                        rejected    "animated"
photo.heic (no library)     HEIC while pillow-heif cannot be imported           rejected    "pillow-heif"
missing.jpg                 no such file                                        rejected    "cannot read"
a-folder.jpg                a folder given as a photo                           rejected    "cannot read"
black.jpg, white.jpg        blank frames                                        rejected    "blank"
astronaut/coffee/camera     scikit-image's sample photographs (not eyepiece)    rejected    a one-line reason
deep-16bit.png              the eyepiece view stored with 16 bits per channel   ok          edge at the truth
cmyk.jpg                    the eyepiece view as a CMYK JPEG                    ok          edge at the truth
upright.png, rotated-6.png  the same view, stored turned with EXIF              ok          identical readings
                            orientation 6 (lossless)
upright.jpg, rotated-8.jpg  the same view, JPEG, orientation 8                  ok          agree within their
                                                                                            uncertainties
no-edge.jpg                 scale in the field, no stone and no liquid line     no_edge     (none)
==========================  ==================================================  ==========  ========================

Usage errors (exit 2, one line): no photo given, an unknown option, a missing
instrument file, a calibration file that is not one.
"""

from __future__ import annotations

import io
import struct
import zlib

import numpy as np
import pytest
from hardening_helpers import assert_clean_stderr, cli, cli_process, write_image
from PIL import Image

# the synthesizer's truth is the onset of total reflection (Snell's law at the critical angle)
TRUE_RI = 1.544


def _png_with_header(width: int, height: int) -> bytes:
    """A PNG whose IHDR declares width x height (PNG spec, ISO/IEC 15948) with a token IDAT."""

    def chunk(kind: bytes, data: bytes) -> bytes:
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))

    ihdr = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(b"\0" * 64))
            + chunk(b"IEND", b""))


def _jpeg_declaring(width: int, height: int) -> bytes:
    """A small JPEG whose baseline frame header (SOF0, ITU-T T.81 B.2.2) claims width x height."""
    buf = io.BytesIO()
    Image.fromarray(np.full((64, 64, 3), 128, np.uint8)).save(buf, "JPEG")
    data = bytearray(buf.getvalue())
    sof = data.find(b"\xff\xc0")
    data[sof + 5:sof + 7] = struct.pack(">H", height)
    data[sof + 7:sof + 9] = struct.pack(">H", width)
    return bytes(data)


REJECTED = {
    "zero.jpg": "empty file",
    "truncated.jpg": "truncated",
    "notes.jpg": "not an image",
    "huge-200mp.png": "too large",
    "huge-200mp.jpg": "too large",
    "one-pixel.png": "too small",
    "strip-30000x10.png": "too small",
    "animated.gif": "animated",
    "missing.jpg": "cannot read",
    "a-folder.jpg": "cannot read",
    "black.jpg": "blank",
    "white.jpg": "blank",
    "astronaut.png": "",
    "coffee.png": "",
    "camera.png": "",
}
READ = {"deep-16bit.png": "ok", "cmyk.jpg": "ok", "upright.png": "ok", "rotated-6.png": "ok",
        "upright.jpg": "ok", "rotated-8.jpg": "ok", "no-edge.jpg": "no_edge"}


@pytest.fixture(scope="module")
def corpus(tmp_path_factory, quartz_view, no_edge_view):
    import cv2
    import skimage.data

    d = tmp_path_factory.mktemp("corpus")
    image, truth = quartz_view
    assert [e["ri"] for e in truth["edges"] if e["kind"] == "stone"] == [TRUE_RI]
    (d / "zero.jpg").write_bytes(b"")
    jpeg = write_image(d / "upright.jpg", image).read_bytes()
    (d / "truncated.jpg").write_bytes(jpeg[: len(jpeg) * 6 // 10])
    (d / "notes.jpg").write_text("stone 14: looked at it under the lamp, see photo tomorrow\n")
    (d / "huge-200mp.png").write_bytes(_png_with_header(20000, 10000))
    (d / "huge-200mp.jpg").write_bytes(_jpeg_declaring(20000, 10000))
    Image.fromarray(np.full((1, 1, 3), 128, np.uint8)).save(d / "one-pixel.png")
    Image.fromarray(np.full((10, 30000, 3), 128, np.uint8)).save(d / "strip-30000x10.png")
    frames = [Image.fromarray(image), Image.fromarray(255 - image), Image.fromarray(image // 2)]
    frames[0].save(d / "animated.gif", save_all=True, append_images=frames[1:], duration=100, loop=0)
    (d / "a-folder.jpg").mkdir()
    Image.fromarray(np.zeros((480, 640, 3), np.uint8)).save(d / "black.jpg", quality=90)
    Image.fromarray(np.full((480, 640, 3), 255, np.uint8)).save(d / "white.jpg", quality=90)
    for name in ("astronaut", "coffee", "camera"):
        Image.fromarray(np.asarray(getattr(skimage.data, name)())).save(d / f"{name}.png")
    # 16 bits per channel: the 8-bit view times 257 spans the full 16-bit range (OpenCV writes BGR)
    cv2.imwrite(str(d / "deep-16bit.png"), image[..., ::-1].astype(np.uint16) * 257)
    Image.fromarray(image).convert("CMYK").save(d / "cmyk.jpg", quality=92)
    write_image(d / "upright.png", image, "png")
    write_image(d / "rotated-6.png", image, "png", orientation=6)
    write_image(d / "rotated-8.jpg", image, "jpeg", orientation=8)
    write_image(d / "no-edge.jpg", no_edge_view[0])
    return d


@pytest.fixture(scope="module")
def corpus_run(corpus):
    """The whole corpus through the real console script in one child process."""
    names = list(REJECTED) + list(READ)
    return names, cli_process("read", *[corpus / n for n in names], "--json", cwd=corpus)


def _by_name(doc):
    return {p["photo"].rsplit("/", 1)[-1]: p for p in doc["photos"]}


def test_corpus_exit_code_three_and_one_document(corpus_run):
    names, run = corpus_run
    assert run.code == 3, run.err
    doc = run.json()  # exactly one strict JSON document on stdout
    assert doc["schema"] == "critline.read/1"
    assert [p["photo"].rsplit("/", 1)[-1] for p in doc["photos"]] == names  # nothing lost, order kept
    assert_clean_stderr(run.err)


@pytest.mark.parametrize("name", sorted(REJECTED))
def test_rejected_with_one_line_reason(corpus_run, name):
    _, run = corpus_run
    photo = _by_name(run.json())[name]
    assert photo["status"] == "rejected"
    assert photo["reason"] and "\n" not in photo["reason"]
    assert REJECTED[name] in photo["reason"]
    assert photo["edges"] == []  # a rejection never carries a reading
    lines = [ln for ln in run.err.splitlines() if name in ln]
    assert len(lines) == 1 and "rejected" in lines[0] and photo["reason"] in lines[0]


@pytest.mark.parametrize("name", sorted(READ))
def test_readable_files_get_their_status(corpus_run, name):
    _, run = corpus_run
    photo = _by_name(run.json())[name]
    assert photo["status"] == READ[name], photo["reason"]
    if READ[name] == "ok":
        stones = [e for e in photo["edges"] if e["kind"] == "stone"]
        assert len(stones) == 1
        # within three standard uncertainties of the synthesizer's truth (floor 0.0015: a third-decimal reading)
        assert abs(stones[0]["ri"] - TRUE_RI) <= max(3 * stones[0]["uncertainty"], 0.0015), stones
    else:
        assert [e for e in photo["edges"] if e["kind"] == "stone"] == []


def test_exif_orientation_reads_the_same(corpus_run):
    _, run = corpus_run
    photos = _by_name(run.json())

    def reading(name):
        return {k: v for k, v in photos[name].items() if k not in ("photo", "sha256")}

    # lossless: the decoded view is the same array, so the reading is identical to the last bit
    assert reading("rotated-6.png") == reading("upright.png")
    # JPEG stores different blocks when turned: the two readings agree within their uncertainties
    a, b = photos["upright.jpg"]["edges"][0], photos["rotated-8.jpg"]["edges"][0]
    assert abs(a["ri"] - b["ri"]) <= 2 * np.hypot(a["uncertainty"], b["uncertainty"])


def test_all_got_a_result_exits_zero_including_no_edge(corpus):
    run = cli("read", corpus / "no-edge.jpg", corpus / "deep-16bit.png", "--json")
    assert run.code == 0, run.err
    assert [p["status"] for p in run.json()["photos"]] == ["no_edge", "ok"]
    assert run.err == ""


@pytest.mark.parametrize("name", ["zero.jpg", "truncated.jpg", "notes.jpg", "huge-200mp.png", "one-pixel.png",
                                  "strip-30000x10.png", "animated.gif", "missing.jpg"])
def test_single_rejected_file_exits_three(corpus, name):
    run = cli("read", corpus / name, "--json")
    assert run.code == 3
    assert run.json()["photos"][0]["status"] == "rejected"
    assert_clean_stderr(run.err)
    assert len(run.err.strip().splitlines()) == 1


def test_declared_200_megapixels_refused_before_decoding(corpus, monkeypatch):
    """Only the header is looked at: any attempt to decode pixels fails the test."""
    import cv2
    from PIL import ImageFile

    from critline.photo import read_photo

    def no_decoding(*args, **kwargs):
        raise AssertionError("pixels decoded for a file declaring 200 megapixels")

    monkeypatch.setattr(ImageFile.ImageFile, "load", no_decoding)
    monkeypatch.setattr(cv2, "imdecode", no_decoding)
    for name in ("huge-200mp.png", "huge-200mp.jpg"):
        reading = read_photo(corpus / name)
        assert reading.status == "rejected" and "too large" in reading.reason, reading.reason


def test_heic_without_the_optional_library(tmp_path, quartz_view):
    """pillow-heif made unimportable in a child process: the HEIC photo is refused with the reason."""
    pytest.importorskip("pillow_heif")
    photo = write_image(tmp_path / "phone photo.heic", quartz_view[0], "heic")
    run = cli_process("read", photo, "--json", prelude="import sys; sys.modules['pillow_heif'] = None")
    assert run.code == 3, run.err
    (p,) = run.json()["photos"]
    assert p["status"] == "rejected" and "pillow-heif" in p["reason"] and "\n" not in p["reason"]
    assert_clean_stderr(run.err)


@pytest.mark.parametrize("args, says", [
    ((), "Missing argument"),
    (("x.jpg", "--frobnicate"), "No such option"),
    (("x.jpg", "--instrument", "missing-instrument.toml"), "missing-instrument.toml"),
    (("x.jpg", "--calibration", "not-a-calibration.toml"), "not-a-calibration.toml"),
])
def test_usage_errors_exit_two_in_one_line(tmp_path, monkeypatch, args, says):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "not-a-calibration.toml").write_text("this = is not [ a calibration\n")
    run = cli("read", *args)
    assert run.code == 2
    assert run.out == ""
    lines = run.err.strip().splitlines()
    assert len(lines) == 1 and says in lines[0], run.err
    assert_clean_stderr(run.err)
