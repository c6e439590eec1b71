"""Stage 1: open a photo file safely and decode it at the resolution a stage needs.

The file is read once into memory (its sha256 is the photo's identity).  The
header is inspected before any pixel is decoded, so a decompression bomb or a
file that is not an image is refused cheaply.  JPEG files are decoded with
OpenCV, which can decode directly at 1/2, 1/4 or 1/8 size (DCT scaling) and
honours the EXIF orientation; other formats (PNG, TIFF, HEIC, CMYK JPEG) go
through Pillow (``ImageOps.exif_transpose``), 16-bit PNG/TIFF through OpenCV
so that their depth survives.
"""

from __future__ import annotations

import hashlib
import io
import warnings
from dataclasses import dataclass
from pathlib import Path

import cv2
import numpy as np
from PIL import Image, ImageOps

try:  # HEIC/HEIF support registers itself on Pillow
    import pillow_heif

    pillow_heif.register_heif_opener()
except ImportError:  # pragma: no cover - optional at run time
    pillow_heif = None

#: Default limit on decoded pixels (width * height), against decompression bombs.
MAX_PIXELS = 120_000_000

_REDUCED_GREY = {1: cv2.IMREAD_GRAYSCALE, 2: cv2.IMREAD_REDUCED_GRAYSCALE_2,
                 4: cv2.IMREAD_REDUCED_GRAYSCALE_4, 8: cv2.IMREAD_REDUCED_GRAYSCALE_8}
_REDUCED_COLOUR = {1: cv2.IMREAD_COLOR, 2: cv2.IMREAD_REDUCED_COLOR_2,
                   4: cv2.IMREAD_REDUCED_COLOR_4, 8: cv2.IMREAD_REDUCED_COLOR_8}
#: OpenCV 4.10 and later decode straight to RGB order (the same pixels, no channel swap pass)
_RGB_ORDER = getattr(cv2, "IMREAD_COLOR_RGB", None)


#: ISO base media file brands of HEIC/HEIF still images (ISO/IEC 23008-12)
_HEIF_BRANDS = frozenset({b"heic", b"heix", b"heim", b"heis", b"hevc", b"hevx", b"mif1", b"msf1"})


class PhotoRejected(Exception):
    """A photo that cannot give a reading; the message is the one-line reason."""


@dataclass(frozen=True)
class LoadedPhoto:
    """A photo file held in memory, its header checked.

    Attributes
    ----------
    data : bytes
        The file's bytes.
    sha256 : str
        Hex digest of ``data``.
    format : str
        Pillow's format name ('JPEG', 'PNG', 'TIFF', 'HEIF', ...).
    width, height : int
        Size after the EXIF orientation is applied.
    mode : str
        Pillow mode of the stored image ('RGB', 'L', 'CMYK', 'I;16', ...).
    fast_jpeg : bool
        True when OpenCV decodes the file directly (reduced-size decoding available).
    pixels : ndarray or None
        Full-size decoded pixels (RGB or grey, uint8 or uint16) for files that
        are not decoded lazily by OpenCV.
    """

    data: bytes
    sha256: str
    format: str
    width: int
    height: int
    mode: str
    fast_jpeg: bool
    pixels: np.ndarray | None = None

    @property
    def megapixels(self) -> float:
        return self.width * self.height / 1e6


def _jpeg_is_complete(data: bytes) -> bool:
    """True when the main image of a JPEG has its end-of-image marker.

    Walks the marker segments to the first start-of-scan (so an EXIF
    thumbnail, which carries its own end marker inside APP1, is skipped) and
    looks for the end-of-image marker after it.
    """
    pos, n = 2, len(data)
    while pos + 4 <= n:
        if data[pos] != 0xFF:
            return False
        marker = data[pos + 1]
        if marker == 0xFF:  # fill byte
            pos += 1
            continue
        if marker == 0xDA:  # start of scan
            return data.rfind(b"\xff\xd9", pos) > pos
        if marker in (0x01,) or 0xD0 <= marker <= 0xD7:
            pos += 2
            continue
        length = int.from_bytes(data[pos + 2:pos + 4], "big")
        pos += 2 + length
    return False


def _orient(array: np.ndarray, orientation: int) -> np.ndarray:
    """Apply an EXIF orientation tag (1..8) to a decoded array."""
    ops = {2: lambda a: a[:, ::-1], 3: lambda a: a[::-1, ::-1], 4: lambda a: a[::-1],
           5: lambda a: np.swapaxes(a, 0, 1), 6: lambda a: np.rot90(a, -1),
           7: lambda a: np.swapaxes(a[::-1, ::-1], 0, 1),
           8: lambda a: np.rot90(a, 1)}
    op = ops.get(orientation)
    return np.ascontiguousarray(op(array)) if op else array


def load_photo(path: str | Path, max_pixels: int = MAX_PIXELS) -> LoadedPhoto:
    """Read a photo file and check it before decoding.

    Parameters
    ----------
    path : path-like
        JPEG, PNG, TIFF or HEIC file.
    max_pixels : int
        Refuse images with more pixels than this (decompression bombs).

    Returns
    -------
    LoadedPhoto

    Raises
    ------
    PhotoRejected
        With a one-line reason: unreadable, empty, not an image, too large,
        truncated or corrupt.
    """
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise PhotoRejected(f"cannot read file ({exc.strerror or exc})") from None
    digest = hashlib.sha256(data).hexdigest()
    if not data:
        raise PhotoRejected("empty file")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            image = Image.open(io.BytesIO(data))
            fmt, mode = image.format or "?", image.mode
            w, h = image.size
            orientation = int(image.getexif().get(0x0112, 1) or 1)
    except Image.DecompressionBombError:
        raise PhotoRejected(f"image too large (more than {max_pixels / 1e6:.0f} megapixels)") from None
    except Exception:
        if pillow_heif is None and data[4:8] == b"ftyp" and data[8:12] in _HEIF_BRANDS:
            raise PhotoRejected("HEIC/HEIF photo, but the optional pillow-heif library that reads it "
                                "is not installed") from None
        raise PhotoRejected("not an image file that can be read (JPEG, PNG, TIFF or HEIC expected)") from None
    try:
        frames = int(getattr(image, "n_frames", 1) or 1)
    except Exception:  # a damaged animation: the decoder below says so
        frames = 1
    if fmt in ("GIF", "PNG", "WEBP") and frames > 1:  # (a phone's MPO JPEG has extra frames too: kept)
        raise PhotoRejected(f"animated image ({frames} frames): one still photo of the eyepiece expected")
    if orientation in (5, 6, 7, 8):
        w, h = h, w
    if w * h > max_pixels:
        raise PhotoRejected(f"image too large ({w * h / 1e6:.0f} megapixels, limit {max_pixels / 1e6:.0f})")
    if w < 64 or h < 64:
        raise PhotoRejected(f"image too small ({w}x{h} pixels)")
    if fmt == "JPEG":
        if not _jpeg_is_complete(data):
            raise PhotoRejected("truncated or corrupt JPEG (no end-of-image marker)")
        if mode in ("RGB", "L", "YCbCr"):
            return LoadedPhoto(data, digest, fmt, w, h, mode, True)
    pixels = None
    if fmt in ("PNG", "TIFF") and mode not in ("CMYK", "P", "PA", "LA", "1"):
        # OpenCV keeps 16-bit depth; orientation applied by hand
        buf = np.frombuffer(data, np.uint8)
        arr = cv2.imdecode(buf, cv2.IMREAD_UNCHANGED | cv2.IMREAD_ANYDEPTH | cv2.IMREAD_IGNORE_ORIENTATION)
        if arr is not None and arr.dtype in (np.uint8, np.uint16):
            if arr.ndim == 3:
                arr = arr[..., 2::-1] if arr.shape[2] >= 3 else arr[..., 0]
            pixels = _orient(arr, orientation)
    if pixels is None:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                image = Image.open(io.BytesIO(data))
                image.load()
                image = ImageOps.exif_transpose(image)
                if image.mode in ("I;16", "I;16B", "I;16L", "I"):
                    pixels = np.clip(np.asarray(image, dtype=np.int64), 0, 65535).astype(np.uint16)
                elif image.mode == "L":
                    pixels = np.asarray(image, dtype=np.uint8)
                elif image.mode == "F":
                    arr = np.asarray(image, dtype=np.float32)
                    top = max(float(np.nanmax(arr)), 1e-12)
                    pixels = (np.clip(arr / top, 0, 1) * 65535).astype(np.uint16)
                else:
                    pixels = np.asarray(image.convert("RGB"), dtype=np.uint8)
        except Exception as exc:
            raise PhotoRejected(f"truncated or corrupt image data ({type(exc).__name__})") from None
    pixels = np.ascontiguousarray(pixels)
    h, w = pixels.shape[:2]
    return LoadedPhoto(data, digest, fmt, w, h, mode, False, pixels)


def decode(photo: LoadedPhoto, reduce: int = 1, grey: bool = False, raw: bool = False) -> np.ndarray:
    """Decode the photo at 1/``reduce`` size as float32, non-linear (as stored) values in 0..1.

    Parameters
    ----------
    photo : LoadedPhoto
    reduce : {1, 2, 4, 8}
        Linear reduction factor (area averaging).
    grey : bool
        Return luma (Rec. 601 weights, as JPEG stores it) instead of RGB.
    raw : bool
        Return the stored integers (uint8 or uint16) instead of float32 0..1.

    Returns
    -------
    ndarray, float32
        ``(H, W)`` when ``grey`` else ``(H, W, 3)`` in RGB order.
    """
    if photo.fast_jpeg:
        flags = (_REDUCED_GREY if grey else _REDUCED_COLOUR)[reduce]
        rgb_direct = not grey and _RGB_ORDER is not None
        if rgb_direct:
            flags = (flags & ~cv2.IMREAD_COLOR) | _RGB_ORDER
        arr = cv2.imdecode(np.frombuffer(photo.data, np.uint8), flags)
        if arr is None:
            raise PhotoRejected("corrupt JPEG data (decoder failed)")
        scale = 1.0 / 255.0
        if not grey and not rgb_direct:
            arr = cv2.cvtColor(arr, cv2.COLOR_BGR2RGB)
    else:
        arr = photo.pixels
        scale = 1.0 / (65535.0 if arr.dtype == np.uint16 else 255.0)
        if grey and arr.ndim == 3:
            arr = cv2.cvtColor(arr, cv2.COLOR_RGB2GRAY)
        elif not grey and arr.ndim == 2:
            arr = cv2.cvtColor(arr, cv2.COLOR_GRAY2RGB)
        if reduce > 1:
            h, w = arr.shape[:2]
            arr = cv2.resize(arr, (max(1, w // reduce), max(1, h // reduce)), interpolation=cv2.INTER_AREA)
    if raw:
        return arr
    out = arr.astype(np.float32)
    out *= scale
    return out


def to_float(arr: np.ndarray) -> np.ndarray:
    """Stored integers (uint8/uint16) as float32 0..1."""
    scale = 1.0 / (65535.0 if arr.dtype == np.uint16 else 255.0)
    out = arr.astype(np.float32)
    out *= scale
    return out


def srgb_to_linear(values: np.ndarray) -> np.ndarray:
    """Undo the sRGB transfer curve (IEC 61966-2-1), float32 in and out."""
    v = np.asarray(values, dtype=np.float32)
    if v.size == 0:
        return v.copy()
    # OpenCV's vectorised pow: about nine times numpy's float32 power on a working frame
    flat = np.ascontiguousarray(v).reshape(-1, 1)
    base = flat + np.float32(0.055)
    base *= np.float32(1.0 / 1.055)
    out = cv2.pow(base, 2.4)
    np.copyto(out, flat * np.float32(1.0 / 12.92), where=flat <= 0.04045)
    return out.reshape(v.shape)
