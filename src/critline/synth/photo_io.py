"""Writing a rendered scene as a photo file with its truth sidecar."""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np
from PIL import Image

from critline.errors import UsageError
from critline.fileio import atomic_write_bytes, atomic_write_text
from critline.synth.render import render
from critline.synth.scene import Scene

SUFFIX_FORMATS = {".jpg": "jpeg", ".jpeg": "jpeg", ".png": "png", ".tif": "tiff", ".tiff": "tiff",
                  ".heic": "heic"}
_EXIF_ORIENTATION = 0x0112
# stored pixels = inverse of what a viewer applies for each EXIF orientation tag
_STORE_TRANSPOSE = {
    2: Image.Transpose.FLIP_LEFT_RIGHT, 3: Image.Transpose.ROTATE_180,
    4: Image.Transpose.FLIP_TOP_BOTTOM, 5: Image.Transpose.TRANSPOSE,
    6: Image.Transpose.ROTATE_90, 7: Image.Transpose.TRANSVERSE, 8: Image.Transpose.ROTATE_270,
}


def encode(image: np.ndarray, fmt: str, quality: int = 88, orientation: int = 1) -> bytes:
    """Encode an RGB uint8 image (as displayed) to file bytes.

    With ``orientation`` other than 1 the pixels are stored transposed and the
    EXIF orientation tag says how to show them, as phones do.
    """
    pil = Image.fromarray(image, "RGB")
    exif = Image.Exif()
    if orientation != 1:
        pil = pil.transpose(_STORE_TRANSPOSE[orientation])
        exif[_EXIF_ORIENTATION] = orientation
    buf = io.BytesIO()
    if fmt == "jpeg":
        pil.save(buf, "JPEG", quality=int(quality), exif=exif.tobytes())
    elif fmt == "png":
        pil.save(buf, "PNG", exif=exif.tobytes(), compress_level=6)
    elif fmt == "tiff":
        pil.save(buf, "TIFF", exif=exif.tobytes(), compression="tiff_deflate")
    elif fmt == "heic":
        import pillow_heif

        pillow_heif.register_heif_opener()
        pil.save(buf, "HEIF", quality=int(quality), exif=exif.tobytes())
    else:
        raise UsageError(f"unknown image format {fmt!r} (have {sorted(set(SUFFIX_FORMATS.values()))})")
    return buf.getvalue()


def write_photo(path, scene: Scene, seed: int, fmt: str | None = None, overwrite: bool = True) -> Path:
    """Render ``scene`` with ``seed`` and write it to ``path`` plus the truth sidecar.

    The format follows the suffix (``.jpg .png .tif .heic``) unless ``fmt`` is
    given; the sidecar is ``path.with_suffix('.json')``.  Both files are
    written atomically.

    Returns
    -------
    Path
        The image's path (the sidecar is ``path.with_suffix('.json')``).
    """
    path = Path(path)
    fmt = fmt or SUFFIX_FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise UsageError(f"{path}: unknown image suffix (use one of {sorted(SUFFIX_FORMATS)})")
    sidecar = path.with_suffix(".json")
    if not overwrite:
        for p in (path, sidecar):
            if p.exists():
                raise UsageError(f"{p}: already exists (refusing to overwrite)")
    image, truth = render(scene, seed)
    data = encode(image, fmt, scene.jpeg_quality, scene.orientation)
    truth["photo"] = path.name
    truth["seed"] = int(seed)
    truth["format"] = fmt
    atomic_write_bytes(path, data, overwrite=overwrite)
    atomic_write_text(sidecar, json.dumps(truth, separators=(",", ":")) + "\n", overwrite=overwrite)
    return path
