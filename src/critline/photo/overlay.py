"""Stage 7: the photo marked up as evidence of what was read.

Drawn on a reduced copy of the photo (long side at most 1600 px, JPEG
quality 85): the field circle found; the graduations located, with the
fitted map's values written beside every 10th; each edge as a line across
the field with its value and uncertainty; the brightness profile against
the scale as an inset plot with the edges marked; the status line.  Files
are never overwritten: ``<photo stem>.marked.jpg``, then ``-2``, ``-3``...
"""

from __future__ import annotations

from pathlib import Path

import cv2
import numpy as np

from critline.errors import UsageError
from critline.fileio import atomic_write_bytes
from critline.photo.load import LoadedPhoto, decode

MAX_SIDE = 1600
_GREEN, _CYAN, _MAGENTA, _YELLOW, _WHITE = (60, 220, 60), (230, 200, 40), (220, 60, 220), (40, 220, 240), (255, 255, 255)
_BLUE = (255, 90, 70)


def _text(img, text, org, scale, colour):
    x, y = int(org[0]), int(org[1])
    cv2.putText(img, text, (x, y), cv2.FONT_HERSHEY_SIMPLEX, scale, (0, 0, 0), max(2, int(3 * scale)), cv2.LINE_AA)
    cv2.putText(img, text, (x, y), cv2.FONT_HERSHEY_SIMPLEX, scale, colour, max(1, int(1.2 * scale)), cv2.LINE_AA)


def render_overlay(photo: LoadedPhoto, reading, evidence: dict | None) -> np.ndarray:
    """The marked-up image (BGR uint8) for one reading."""
    reduce = 1
    while max(photo.width, photo.height) / reduce > MAX_SIDE and reduce < 8:
        reduce *= 2
    rgb = decode(photo, reduce)
    img = cv2.cvtColor((np.clip(rgb, 0, 1) * 255).astype(np.uint8), cv2.COLOR_RGB2BGR)
    h, w = img.shape[:2]
    sx, sy = w / photo.width, h / photo.height
    fs = max(0.45, min(w, h) / 1400)

    def to_img(x, y):
        return np.asarray(x) * sx, np.asarray(y) * sy

    ev = evidence or {}
    circle = ev.get("circle")
    if circle is not None:
        cx, cy = to_img(circle.cx, circle.cy)
        cv2.circle(img, (int(cx), int(cy)), int(circle.r * sx), _GREEN, max(1, int(2 * fs)), cv2.LINE_AA)
    crescent, cframe = ev.get("crescent"), ev.get("crescent_frame")
    if crescent is not None and cframe is not None:
        # the lit circle's boundary inside the field: where the crescent's dimming was divided out
        t = np.linspace(0, 2 * np.pi, 361)
        rows, cols = crescent.cy + crescent.r * np.sin(t), crescent.cx + crescent.r * np.cos(t)
        seen = np.hypot(rows - cframe.half, cols - cframe.half) < cframe.radius
        xs, ys = to_img(*cframe.to_photo(rows, cols))
        pts = np.stack([xs, ys], axis=1).astype(np.int32)
        for a, b, keep in zip(pts[:-1], pts[1:], seen[:-1] & seen[1:], strict=True):
            if keep:
                cv2.line(img, (int(a[0]), int(a[1])), (int(b[0]), int(b[1])), _BLUE, max(2, int(2 * fs)), cv2.LINE_AA)
    frame, grads = ev.get("frame"), ev.get("graduations")
    if frame is not None and grads is not None:
        col = grads.column
        for row in grads.positions:
            x0, y0 = frame.to_photo(row, col.v_lo - 2)
            x1, y1 = frame.to_photo(row, col.v_hi + 2)
            a, b = to_img([x0, x1], [y0, y1])
            cv2.line(img, (int(a[0]), int(b[0])), (int(a[1]), int(b[1])), _CYAN, 1, cv2.LINE_AA)
        inst_first = ev.get("first", 1.30)
        inst_step = ev.get("step", 0.01)
        for k in range(0, int(grads.indices.max()) + 1, 10):
            row = float(grads.row_of(k))
            xt, yt = frame.to_photo(row, col.v_hi + 0.25 * frame.radius)
            xt, yt = to_img(xt, yt)
            _text(img, f"{inst_first + inst_step * k:.2f}", (xt, yt), 0.8 * fs, _CYAN)
        for e in reading.edges:
            row = float(grads.row_of(e.scale_position))
            u = row - frame.half
            chord = np.sqrt(max(frame.radius ** 2 - u ** 2, 0.0))
            x0, y0 = frame.to_photo(row, frame.half - chord)
            x1, y1 = frame.to_photo(row, frame.half + chord)
            a, b = to_img([x0, x1], [y0, y1])
            colour = _MAGENTA if e.kind == "stone" else _YELLOW
            cv2.line(img, (int(a[0]), int(b[0])), (int(a[1]), int(b[1])), colour, max(1, int(2 * fs)), cv2.LINE_AA)
            _text(img, f"{e.ri:.4f} +- {e.uncertainty:.4f}" + ("" if e.kind == "stone" else " liquid"),
                  (a[1] + 5, b[1]), fs, colour)
    prof = ev.get("profile")
    if prof is not None:
        centre = to_img(circle.cx, circle.cy) if circle is not None else None
        _inset(img, prof, reading, fs, ev.get("first", 1.30), ev.get("step", 0.01), centre)
    status = f"{reading.status}" + (f": {reading.reason}" if reading.reason else "")
    if reading.quality.flags:
        status += "  [" + ", ".join(reading.quality.flags) + "]"
    _text(img, status, (10, h - 12), fs, _WHITE)
    return img


def _inset(img, prof, reading, fs, first, step, centre):
    """Brightness against scale value, in the corner farthest from the field."""
    values, bright = (np.asarray(a, float) for a in prof)
    h, w = img.shape[:2]
    pw, ph = int(w * 0.32), int(h * 0.22)
    cx, cy = centre if centre is not None else (w / 2, h / 2)
    x0 = 10 if cx > w / 2 else w - pw - 10
    y0 = 10 if cy > h / 2 else h - ph - 40
    box = img[y0:y0 + ph, x0:x0 + pw]
    box[:] = (box * 0.25).astype(np.uint8)
    cv2.rectangle(img, (x0, y0), (x0 + pw, y0 + ph), _WHITE, 1)
    if len(values) < 2:
        return
    vmin, vmax = float(values.min()), float(values.max())
    top = float(np.percentile(bright, 99)) or 1.0
    xs = x0 + (values - vmin) / max(vmax - vmin, 1e-9) * (pw - 1)
    ys = y0 + ph - 1 - np.clip(bright / top, 0, 1.05) * (ph - 12)
    pts = np.stack([xs, ys], axis=1).astype(np.int32)
    cv2.polylines(img, [pts], False, _GREEN, 1, cv2.LINE_AA)
    for e in reading.edges:
        nominal = first + step * e.scale_position
        x = x0 + (nominal - vmin) / max(vmax - vmin, 1e-9) * (pw - 1)
        cv2.line(img, (int(x), y0), (int(x), y0 + ph), _MAGENTA if e.kind == "stone" else _YELLOW, 1)
    _text(img, f"{vmin:.2f}", (x0 + 2, y0 + ph - 4), 0.6 * fs, _WHITE)
    _text(img, f"{vmax:.2f}", (x0 + pw - 50 * fs, y0 + ph - 4), 0.6 * fs, _WHITE)


def overlay_path(folder: Path, photo_name: str) -> Path:
    stem = Path(photo_name).stem or "photo"
    return Path(folder) / f"{stem}.marked.jpg"


def write_overlay(photo: LoadedPhoto, reading, evidence, folder, photo_name) -> Path | None:
    """Write the marked-up photo into ``folder`` under a name no existing file has."""
    folder = Path(folder)
    img = render_overlay(photo, reading, evidence)
    ok, buf = cv2.imencode(".jpg", img, [cv2.IMWRITE_JPEG_QUALITY, 85])
    if not ok:
        return None
    base = overlay_path(folder, photo_name)
    for i in range(1, 1000):
        path = base if i == 1 else base.with_name(f"{base.stem}-{i}{base.suffix}")
        if path.exists():
            continue
        try:
            return atomic_write_bytes(path, buf.tobytes(), overwrite=False)
        except UsageError:
            continue
    return None
