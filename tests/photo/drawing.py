"""A plain eyepiece-view drawing for the reader's unit tests (independent of critline.synth).

Geometry (invented for the tests): the scale value s maps to the position along the
axis through a quadratic whose spacing grows by 15 % toward high values; the field is dim below the edge by the
Fresnel reflectance (critline.optics) and bright above it.
"""

from __future__ import annotations

import cv2
import numpy as np

from critline.optics import unpolarised_reflectance


def draw_eyepiece(size=(720, 960), centre=None, radius=None, angle_deg=0.0, edges=(1.544,),
                  prism=1.88, first=1.30, last=1.80, span=1.7, blur=1.2, noise=0.01,
                  line_width=None, seed=0, grad_offset=-0.35, ink=0.75):
    """Return (uint8 RGB image, truth dict)."""
    rng = np.random.default_rng(seed)
    h, w = size
    if centre is None:
        centre = (w / 2, h / 2)
    if radius is None:
        radius = 0.42 * min(h, w)
    cx, cy = centre
    mid, half = (first + last) / 2, (last - first) / 2
    a = span * radius / (last - first)
    b = 0.07 * a / half  # spacing a + 2 b (s - mid): 15 % more at the top than at the bottom
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float64)
    th = np.deg2rad(angle_deg)
    dx, dy = xx - cx, yy - cy
    u = dx * np.cos(th) + dy * np.sin(th)  # along the axis, toward high values
    v = -dx * np.sin(th) + dy * np.cos(th)
    # invert u = a (s - mid) + b (s - mid)**2
    s = mid + (-a + np.sqrt(np.clip(a * a + 4 * b * u, 0, None))) / (2 * b)
    refl = np.ones_like(s)
    for n in edges:
        refl_n = unpolarised_reflectance(np.clip(s, 0, prism * 0.999), n, prism)
        refl = refl * 0 + refl_n if len(edges) == 1 else refl + refl_n / len(edges) - 1 / len(edges)
    bright = 0.08 + 0.82 * refl
    step = 0.01
    count = int(round((last - first) / step)) + 1
    values = first + step * np.arange(count)
    pos = a * (values - mid) + b * (values - mid) ** 2
    lw = line_width if line_width is not None else max(1.0, radius / 220)
    ink_strength = ink
    ink = np.zeros_like(s)
    v0 = grad_offset * radius
    for k, p in enumerate(pos):
        absolute = int(round(values[k] / step))
        length = 0.12 if absolute % 10 == 0 else 0.085 if absolute % 5 == 0 else 0.06
        near = np.abs(u - p) < 3 * lw
        if not near.any():
            continue
        prof = np.clip(lw / 2 + 0.5 - np.abs(u[near] - p), 0, 1)
        inside = (v[near] > v0) & (v[near] < v0 + length * radius)
        ink[near] = np.maximum(ink[near], prof * inside)
    bright = bright * (1 - ink_strength * ink)
    r = np.hypot(dx, dy)
    stop = np.clip(radius - r + 0.5, 0, 1)
    lin = bright * stop + 0.003
    lin = cv2.GaussianBlur(lin.astype(np.float32), (0, 0), blur)
    lin = lin + rng.normal(0, noise, lin.shape).astype(np.float32) * np.sqrt(np.clip(lin, 0, 1))
    lin = np.clip(lin, 0, 1)
    enc = np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * lin ** (1 / 2.4) - 0.055)
    img = np.repeat((enc * 255 + 0.5).astype(np.uint8)[..., None], 3, axis=2)
    img[..., 0] = np.clip(img[..., 0].astype(int) + 8, 0, 255)  # yellowish light
    img[..., 2] = (img[..., 2] * 0.7).astype(np.uint8)
    truth = {"field": {"cx": cx, "cy": cy, "r": radius}, "edges": list(edges), "axis_angle_deg": angle_deg,
             "graduation_positions": pos, "map": (a, b, mid)}
    return img, truth
