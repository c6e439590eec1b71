"""Small inline SVG charts for the HTML report (drawn here: no plotting library, no scripts).

Every text that reaches the SVG is escaped; sizes are in CSS pixels.
"""

from __future__ import annotations

import math
from html import escape

#: series colours (also used by the page's legend)
LOW = "#2f5d62"      # lower edge: deep sea-slate
HIGH = "#b0642a"     # upper edge: burnt amber
LIQUID = "#8d9096"   # contact liquid line
INK = "#26303a"
RULE = "#d9d2c3"
MUTED = "#6b7078"


def nice_step(span: float, target: int = 5) -> float:
    """A 1-2-5 step giving about ``target`` ticks over ``span``."""
    if not math.isfinite(span) or span <= 0:
        return 1.0
    raw = span / max(1, target)
    mag = 10 ** math.floor(math.log10(raw))
    # the 1-2-5 step whose tick count is nearest the target (labels stay short: no 2.5 steps)
    return min((m * mag for m in (1, 2, 5, 10)), key=lambda step: abs(span / step - target))


def ticks(lo: float, hi: float, target: int = 5) -> list[float]:
    step = nice_step(hi - lo, target)
    start = math.ceil(lo / step - 1e-9) * step
    out, v = [], start
    while v <= hi + 1e-9 * step:
        out.append(round(v, 10))
        v += step
    return out


def _decimals(step: float) -> int:
    return max(0, min(4, -int(math.floor(math.log10(step) + 1e-9)))) if step < 1 else 0


class Frame:
    """Maps data to pixels inside a plotting area with margins."""

    def __init__(self, width, height, xlim, ylim, left=52, right=12, top=12, bottom=34):
        self.w, self.h = width, height
        self.x0, self.x1 = xlim
        self.y0, self.y1 = ylim
        self.left, self.right, self.top, self.bottom = left, right, top, bottom

    def x(self, v):
        span = (self.x1 - self.x0) or 1.0
        return self.left + (v - self.x0) / span * (self.w - self.left - self.right)

    def y(self, v):
        span = (self.y1 - self.y0) or 1.0
        return self.h - self.bottom - (v - self.y0) / span * (self.h - self.top - self.bottom)

    def axes(self, xlabel: str, ylabel: str, xticks, yticks, xfmt, yfmt) -> list[str]:
        parts = [f'<rect x="{self.left}" y="{self.top}" width="{self.w - self.left - self.right}" '
                 f'height="{self.h - self.top - self.bottom}" fill="#fffdf8" stroke="{RULE}"/>']
        for t in yticks:
            yy = self.y(t)
            parts.append(f'<line x1="{self.left}" x2="{self.w - self.right}" y1="{yy:.1f}" y2="{yy:.1f}" '
                         f'stroke="{RULE}" stroke-width="0.6"/>')
            parts.append(f'<text x="{self.left - 5}" y="{yy + 3.5:.1f}" text-anchor="end" '
                         f'font-size="10" fill="{MUTED}">{escape(yfmt(t))}</text>')
        for t in xticks:
            xx = self.x(t)
            parts.append(f'<line x1="{xx:.1f}" x2="{xx:.1f}" y1="{self.h - self.bottom}" '
                         f'y2="{self.h - self.bottom + 4}" stroke="{MUTED}"/>')
            parts.append(f'<text x="{xx:.1f}" y="{self.h - self.bottom + 15}" text-anchor="middle" '
                         f'font-size="10" fill="{MUTED}">{escape(xfmt(t))}</text>')
        parts.append(f'<text x="{(self.left + self.w - self.right) / 2:.1f}" y="{self.h - 4}" '
                     f'text-anchor="middle" font-size="10.5" fill="{INK}">{escape(xlabel)}</text>')
        parts.append(f'<text transform="translate(11 {(self.top + self.h - self.bottom) / 2:.1f}) rotate(-90)" '
                     f'text-anchor="middle" font-size="10.5" fill="{INK}">{escape(ylabel)}</text>')
        return parts


def _svg(width, height, body: list[str], label: str, cls: str) -> str:
    return (f'<svg class="{cls}" xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
            f'viewBox="0 0 {width} {height}" role="img" aria-label="{escape(label)}">'
            f'<title>{escape(label)}</title>' + "".join(body) + "</svg>")


def rotation_plot(points, *, levels=(), rotation_known=True, width=440, height=230,
                  title="readings against rotation") -> str:
    """RI readings against rotation, one colour per edge.

    Parameters
    ----------
    points : list of (x, ri, uncertainty, series, marker, label)
        ``series`` ``"low"``/``"high"``; ``marker`` ``"pol"`` (filled: polariser in),
        ``"open"`` (no polariser / unknown).
    levels : list of (ri, text, colour)
        Dashed reference lines (the stone's RI range, the liquid).
    rotation_known : bool
        False: x is the photo's order number.
    """
    if not points:
        return ""
    ys = [p[1] for p in points] + [lv[0] for lv in levels]
    us = [p[2] for p in points]
    lo = min(y - u for y, u in zip([p[1] for p in points], us, strict=True))
    hi = max(y + u for y, u in zip([p[1] for p in points], us, strict=True))
    lo, hi = min(lo, *ys), max(hi, *ys)
    pad = max(0.0015, 0.08 * (hi - lo))
    ylim = (lo - pad, hi + pad)
    xs = [p[0] for p in points]
    if rotation_known:
        xlim = (min(0.0, min(xs)), max(180.0, max(xs)))
        xt = [t for t in range(0, int(xlim[1]) + 1, 45 if xlim[1] > 200 else 30)]
        xlabel, xfmt = "stone rotation (degrees)", (lambda t: f"{t:g}°")
    else:
        xlim = (0.5, max(xs) + 0.5)
        xt = list(range(1, int(max(xs)) + 1, max(1, int(max(xs)) // 8)))
        xlabel, xfmt = "photo in taking order (rotation not known)", (lambda t: f"{t:g}")
    f = Frame(width, height, xlim, ylim)
    yt = ticks(*ylim, target=5)
    dec = max(3, _decimals(nice_step(ylim[1] - ylim[0], 5)))
    body = f.axes(xlabel, "refractive index", xt, yt, xfmt, lambda t: f"{t:.{dec}f}")
    for ri, text, colour in levels:
        yy = f.y(ri)
        body.append(f'<line x1="{f.left}" x2="{width - f.right}" y1="{yy:.1f}" y2="{yy:.1f}" '
                    f'stroke="{colour}" stroke-dasharray="5 4" stroke-width="1"/>')
        body.append(f'<text x="{width - f.right - 3}" y="{yy - 3:.1f}" text-anchor="end" font-size="9.5" '
                    f'fill="{colour}">{escape(text)}</text>')
    for x, ri, u, series, marker, label in points:
        colour = HIGH if series == "high" else LOW
        cx, cy = f.x(x), f.y(ri)
        y_a, y_b = f.y(ri - u), f.y(ri + u)
        body.append(f'<line x1="{cx:.1f}" x2="{cx:.1f}" y1="{y_a:.1f}" y2="{y_b:.1f}" stroke="{colour}" '
                    f'stroke-width="1.2"/>')
        fill = colour if marker == "pol" else "#fffdf8"
        shape = (f'<rect x="{cx - 3.6:.1f}" y="{cy - 3.6:.1f}" width="7.2" height="7.2" fill="{fill}" '
                 f'stroke="{colour}" stroke-width="1.4">' if series == "high" else
                 f'<circle cx="{cx:.1f}" cy="{cy:.1f}" r="4" fill="{fill}" stroke="{colour}" '
                 f'stroke-width="1.4">')
        body.append(shape + f'<title>{escape(label)}</title>' +
                    ("</rect>" if series == "high" else "</circle>"))
    return _svg(width, height, body, title, "plot rotation-plot")


def profile_plot(positions, brightness, edges, *, window=3.0, width=270, height=140,
                 title="brightness near the edge") -> str:
    """Brightness along the scale near the edges of one photo.

    Parameters
    ----------
    positions, brightness : sequences
        The reader's profile (graduation units, brightness 0..1).
    edges : list of (scale_position, ri, kind)
    window : float
        Graduation units shown on each side of the outermost edges.
    """
    pairs = [(float(x), float(y)) for x, y in zip(positions, brightness, strict=False)
             if x is not None and y is not None and math.isfinite(x) and math.isfinite(y)]
    if len(pairs) < 3 or not edges:
        return ""
    marks = [e for e in edges if e[0] is not None and math.isfinite(e[0])]
    if not marks:
        return ""
    a = min(m[0] for m in marks) - window
    b = max(m[0] for m in marks) + window
    sel = [(x, y) for x, y in pairs if a <= x <= b]
    if len(sel) < 3:
        return ""
    ys = [y for _, y in sel]
    ylim = (min(0.0, min(ys)), max(1.0, max(ys)))
    f = Frame(width, height, (a, b), ylim, left=36, bottom=30, top=14)
    xt = ticks(a, b, target=4)
    body = f.axes("scale position (graduations)", "brightness", xt, [0.0, 0.5, 1.0],
                  lambda t: f"{t:g}", lambda t: f"{t:.1f}")
    pts = " ".join(f"{f.x(x):.1f},{f.y(y):.1f}" for x, y in sel)
    body.append(f'<polyline points="{pts}" fill="none" stroke="{INK}" stroke-width="1.3"/>')
    stones = sorted((m for m in marks if m[2] == "stone"), key=lambda m: m[1])
    for k, (pos, ri, kind) in enumerate(sorted(marks, key=lambda m: m[0])):
        if kind == "liquid":
            colour, dash = LIQUID, ' stroke-dasharray="3 3"'
        else:
            colour = HIGH if len(stones) == 2 and (pos, ri, kind) == stones[1] else LOW
            dash = ""
        xx = f.x(pos)
        body.append(f'<line x1="{xx:.1f}" x2="{xx:.1f}" y1="{f.top}" y2="{height - f.bottom}" '
                    f'stroke="{colour}" stroke-width="1.4"{dash}/>')
        # labels alternate between two rows so that close edges stay readable; near the
        # right border the label goes to the left of its line
        right = xx > width - f.right - 38
        body.append(f'<text x="{xx - 3 if right else xx + 3:.1f}" y="{f.top + 9 + 11 * (k % 2)}" '
                    f'font-size="9.5" fill="{colour}" text-anchor="{"end" if right else "start"}">'
                    f'{escape(f"{ri:.4f}")}</text>')
    return _svg(width, height, body, title, "plot profile-plot")
