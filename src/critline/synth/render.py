"""Rendering a scene: eyepiece view -> phone pose -> phone pipeline, with ground truth.

The eyepiece view is built in a square *canonical* raster whose columns run
along the scale axis (``u``) and rows across it (``v``), at about the final
pixel size: the brightness profile along the axis is computed once in 1-D
(:mod:`critline.synth.physics`) and broadcast; the graduations are rasterised
analytically (exact pixel-area coverage, so their positions are right to a
small fraction of a pixel); labels are drawn with ``cv2.putText``.  One
homography (scale, rotation, perspective tilt, placement) takes the canonical
raster into the frame (``cv2.warpPerspective``), after which the phone's
blur, exposure, noise, noise reduction, tone curve and sharpening follow.

Pixel coordinates follow OpenCV: ``(x, y)`` with ``(0, 0)`` the centre of the
top-left pixel of the image as displayed (EXIF orientation applied).
"""

from __future__ import annotations

import functools
import math

import cv2
import numpy as np
from scipy.ndimage import gaussian_filter1d

from critline.optics import SODIUM_D_NM
from critline.synth import colour_response
from critline.synth.dispersion import glass
from critline.synth.physics import ScaleMap, ray_profile
from critline.synth.scene import Scene

TRUTH_SCHEMA = "critline.synth-truth/1"
_OVERSAMPLE = 4
_MARGIN = 1.08  # canonical raster half-width in field radii


def scale_map(scene: Scene) -> ScaleMap:
    return ScaleMap(scene.instrument, scene.u_first, scene.u_last, scene.spacing_change,
                    scene.spacing_bow, scene.scale_offset, scene.scale_gain)


# --------------------------------------------------------------------------- 1-D physics
def brightness(scene: Scene, s_d, wavelength_nm=SODIUM_D_NM) -> np.ndarray:
    """Reflected brightness at D-line scale values ``s_d`` for one wavelength (all rays)."""
    g = glass(scene.prism_glass)
    rays = [(n, w) for n, w in zip(scene.stone_ris, scene.weights, strict=True) if w > 0]
    if not rays:
        # no stone: the wetted part of the table shows the liquid, the rest reflects totally
        return 1.0 - scene.liquid_line * (1.0 - ray_profile(
            s_d, 9.0, scene.liquid_ri, g, wavelength_nm, liquid_abbe=scene.liquid_abbe))
    total = sum(rays_w for _, rays_w in rays)
    out = np.zeros(np.shape(s_d))
    for n, w in rays:
        out += (w / total) * ray_profile(s_d, n, scene.liquid_ri, g, wavelength_nm,
                                          stone_abbe=scene.stone_abbe, liquid_abbe=scene.liquid_abbe,
                                          material=scene.stone_material,
                                          liquid_line=scene.liquid_line)
    return out


def channel_profiles(scene: Scene, s_d) -> np.ndarray:
    """Linear brightness per camera channel along the scale, shape ``(channels, len)``.

    Sodium light gives one channel (coloured later); white light three,
    integrated over :data:`colour_response.WAVELENGTHS_NM`.
    """
    if scene.light == "sodium":
        return brightness(scene, s_d)[None, :]
    weights = colour_response.white_weights()
    spectra = np.stack([brightness(scene, s_d, lam) for lam in colour_response.WAVELENGTHS_NM])
    return (weights @ spectra) / weights.sum(axis=1, keepdims=True)


# --------------------------------------------------------------------------- geometry
def _rotation(axis_deg: float, angle_deg: float) -> np.ndarray:
    a = math.radians(axis_deg)
    k = np.array([math.cos(a), math.sin(a), 0.0])
    t = math.radians(angle_deg)
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + math.sin(t) * kx + (1 - math.cos(t)) * kx @ kx


def eyepiece_to_frame(scene: Scene) -> np.ndarray:
    """Homography from eyepiece coordinates ``(u, v, 1)`` (field radii) to frame pixels."""
    r = scene.field_radius_px
    a = math.radians(scene.axis_angle_deg)
    place = np.array([[r * math.cos(a), -r * math.sin(a), 0.0],
                      [r * math.sin(a), r * math.cos(a), 0.0],
                      [0.0, 0.0, 1.0]])
    f = scene.focal_ratio * max(scene.width, scene.height)
    k = np.diag([f, f, 1.0])
    tilt = k @ _rotation(scene.tilt_axis_deg, scene.tilt_deg) @ np.linalg.inv(k)
    centre = tilt @ np.array([0.0, 0.0, 1.0])
    cx, cy = scene.field_cx * (scene.width - 1), scene.field_cy * (scene.height - 1)
    shift = np.array([[1.0, 0, cx - centre[0] / centre[2]], [0, 1.0, cy - centre[1] / centre[2]],
                      [0, 0, 1.0]])
    return shift @ tilt @ place


def project(h: np.ndarray, u, v) -> np.ndarray:
    """Apply homography ``h`` to points ``(u, v)``; returns ``(len, 2)``."""
    pts = np.stack([np.ravel(u), np.ravel(v), np.ones(np.size(u))])
    out = h @ pts
    return (out[:2] / out[2]).T


def _coverage(centres_px, lo, hi):
    """Fraction of each pixel ``[c - 0.5, c + 0.5]`` covered by the interval ``[lo, hi]``."""
    return np.clip(np.minimum(centres_px + 0.5, hi) - np.maximum(centres_px - 0.5, lo), 0.0, 1.0)


# --------------------------------------------------------------------------- eyepiece raster
def _ink(scene: Scene, smap: ScaleMap, size: int, ppu: float, c0: float) -> np.ndarray:
    """Opacity of the printed reticle (graduations, base line, labels) on the canonical raster."""
    ink = np.zeros((size, size), np.float32)
    idx, printed, _, u = smap.graduations()
    inst = scene.instrument
    half_w = 0.5 * max(scene.tick_width * ppu, 0.6)
    side = 1 if scene.tick_side >= 0 else -1
    base = c0 + scene.axis_v * ppu
    lengths = dict(zip(("short", "medium", "long"), scene.tick_lengths, strict=True))
    for i, ui in zip(idx, u, strict=True):
        x = c0 + ui * ppu
        length = lengths[inst.kind(int(i))] * ppu
        lo, hi = sorted((base, base + side * length))
        lo -= half_w if side < 0 else 0.0
        hi += half_w if side > 0 else 0.0
        c_lo, c_hi = int(math.floor(x - half_w - 1)), int(math.ceil(x + half_w + 2))
        r_lo, r_hi = int(math.floor(lo - 1)), int(math.ceil(hi + 2))
        if c_hi <= 0 or c_lo >= size or r_hi <= 0 or r_lo >= size:
            continue
        c_lo, r_lo = max(c_lo, 0), max(r_lo, 0)
        c_hi, r_hi = min(c_hi, size), min(r_hi, size)
        cols = _coverage(np.arange(c_lo, c_hi, dtype=float), x - half_w, x + half_w)
        rows = _coverage(np.arange(r_lo, r_hi, dtype=float), lo, hi)
        patch = ink[r_lo:r_hi, c_lo:c_hi]
        np.maximum(patch, np.outer(rows, cols).astype(np.float32), out=patch)
    if scene.spine and len(u):
        x0, x1 = c0 + u[0] * ppu - half_w, c0 + u[-1] * ppu + half_w
        rows_idx = np.arange(size, dtype=float)
        rows = _coverage(rows_idx, base - half_w, base + half_w)
        cols = _coverage(rows_idx, x0, x1)
        r_sel = rows > 0
        ink[r_sel, :] = np.maximum(ink[r_sel, :], np.outer(rows[r_sel], cols).astype(np.float32))
    text_px = scene.label_height * ppu
    if scene.labels and inst.labelled_every and text_px >= 5:
        font = cv2.FONT_HERSHEY_SIMPLEX
        scale = text_px / 22.0
        thick = max(1, int(round(text_px / 9)))
        long_len = scene.tick_lengths[2] * ppu
        for i, value, ui in zip(idx, printed, u, strict=True):
            absolute = int(round(inst.first / inst.step)) + int(i)
            if absolute % inst.labelled_every:
                continue
            text = f"{value:.2f}"
            (tw, th), bl = cv2.getTextSize(text, font, scale, thick)
            patch = np.zeros((th + bl + 2 * thick, tw + 2 * thick), np.uint8)
            cv2.putText(patch, text, (thick, th + thick), font, scale, 255, thick, cv2.LINE_AA)
            patch = np.rot90(patch, k=side)  # text reads across the axis, away from the scale
            ph, pw = patch.shape
            x = c0 + ui * ppu
            gap = 0.3 * text_px
            v_near = base + side * (long_len + gap)
            r0 = int(round(v_near if side > 0 else v_near - ph))
            c0_ = int(round(x - pw / 2))
            if r0 < 0 or c0_ < 0 or r0 + ph > size or c0_ + pw > size:
                continue
            region = ink[r0:r0 + ph, c0_:c0_ + pw]
            np.maximum(region, patch.astype(np.float32) / 255.0, out=region)
    return ink * np.float32(scene.ink)


def _dust(scene: Scene, rng: np.random.Generator, img: np.ndarray, ppu: float, c0: float) -> list:
    """Dark specks on the reticle (sharp, small) or the lens (soft, larger); returns their truth."""
    specks = []
    size = img.shape[-1]
    for _ in range(scene.dust):
        rho, phi = math.sqrt(rng.uniform(0, 1)) * 0.95, rng.uniform(0, 2 * math.pi)
        u, v = rho * math.cos(phi), rho * math.sin(phi)
        sigma = rng.uniform(0.002, 0.015) * ppu + 0.5
        opacity = rng.uniform(0.2, 0.85)
        x, y = c0 + u * ppu, c0 + v * ppu
        rad = int(math.ceil(4 * sigma))
        c_lo, c_hi = max(int(x) - rad, 0), min(int(x) + rad + 1, size)
        r_lo, r_hi = max(int(y) - rad, 0), min(int(y) + rad + 1, size)
        yy, xx = np.mgrid[r_lo:r_hi, c_lo:c_hi]
        blob = opacity * np.exp(-((xx - x) ** 2 + (yy - y) ** 2) / (2 * sigma**2))
        img[..., r_lo:r_hi, c_lo:c_hi] *= (1.0 - blob).astype(np.float32)
        specks.append({"u": u, "v": v, "sigma": sigma / ppu, "opacity": opacity})
    return specks


def canvas(ppu: float) -> tuple[int, float, np.ndarray]:
    """Size, centre pixel and ``u`` (field radii) of each column of the canonical raster."""
    size = 2 * int(math.ceil(_MARGIN * ppu)) + 1
    c0 = (size - 1) / 2.0
    u = ((np.arange(size) - c0) / ppu).astype(np.float32)
    return size, c0, u


def axis_profiles(scene: Scene, smap: ScaleMap, size: int, ppu: float, c0: float,
                  illuminate: bool = True) -> np.ndarray:
    """Linear brightness per channel along ``u`` for each raster column, shape ``(channels, size)``.

    The physics profile (oversampled, box-averaged), the instrument's blur, the
    stray light and, with ``illuminate``, the uneven lamp.
    """
    sub = (np.arange(size * _OVERSAMPLE) + 0.5) / _OVERSAMPLE - 0.5
    u_sub = (sub - c0) / ppu
    profiles = channel_profiles(scene, smap.value(u_sub))
    if scene.edge_blur > 0:
        profiles = gaussian_filter1d(profiles, scene.edge_blur * ppu * _OVERSAMPLE, axis=-1, mode="nearest")
    profiles = profiles.reshape(profiles.shape[0], size, _OVERSAMPLE).mean(axis=-1)
    u = ((np.arange(size) - c0) / ppu).astype(np.float32)
    if scene.stray_light > 0:
        # light scattered inside the instrument lifts the dark side evenly
        inside = np.abs(u) <= 1.0
        profiles = (1.0 - scene.stray_light) * profiles + scene.stray_light * profiles[:, inside].mean(
            axis=1, keepdims=True)
    if illuminate:
        profiles = profiles * illumination(scene, u)[None, :]
    return profiles


def illumination(scene: Scene, u: np.ndarray) -> np.ndarray:
    """Relative lamp brightness along ``u`` (slope and curvature of an uneven lamp)."""
    return 1.0 + 0.5 * scene.illumination_slope * u + scene.illumination_curve * (u * u - 1 / 3)


def field_mask(scene: Scene, smap: ScaleMap, u: np.ndarray, ppu: float, c0: float):
    """Field stop (``stop``) and its transmission with rim falloff, crescent and printed reticle (``field``)."""
    size = len(u)
    rho2 = (u * u)[None, :] + (u * u)[:, None]
    soft = max(scene.field_softness * ppu, 0.7) / ppu
    stop = cv2.sqrt(rho2)
    stop -= np.float32(1.0)
    stop *= np.float32(-1.0 / (2 * soft))
    stop += np.float32(0.5)
    np.clip(stop, 0.0, 1.0, out=stop)
    stop = stop * stop * (np.float32(3.0) - np.float32(2.0) * stop)  # smoothstep
    field = stop * (np.float32(1.0) - np.float32(scene.field_falloff) * rho2) if scene.field_falloff else stop.copy()
    del rho2
    if scene.crescent > 0:
        ang = math.radians(scene.crescent_angle_deg - scene.axis_angle_deg)
        du, dv = scene.crescent * math.cos(ang), scene.crescent * math.sin(ang)
        lit = cv2.sqrt(((u - np.float32(du)) ** 2)[None, :] + ((u - np.float32(dv)) ** 2)[:, None])
        lit = np.clip((np.float32(1.0) - lit) / np.float32(0.15) + np.float32(0.5), 0.0, 1.0)
        field *= np.float32(0.06) + np.float32(0.94) * lit * lit * (np.float32(3.0) - np.float32(2.0) * lit)
        del lit
    ink = _ink(scene, smap, size, ppu, c0)
    field *= np.float32(1.0) - ink
    return stop, field


def finish_view(scene: Scene, img: np.ndarray, stop: np.ndarray, rng, ppu: float, c0: float) -> dict:
    """Dust specks, then the dim housing around the field stop; returns the extras (truth)."""
    extras = {"dust": _dust(scene, rng, img, ppu, c0) if (scene.dust and rng is not None) else []}
    stop *= np.float32(-scene.surround)
    stop += np.float32(scene.surround)
    img += stop[None]
    return extras


def eyepiece_view(scene: Scene, ppu: float, rng: np.random.Generator | None = None):
    """Linear-light canonical raster of the eyepiece view (flat facet: a shadow edge across the field).

    Returns
    -------
    img : ndarray, float32, shape ``(channels, size, size)``
        Columns along ``u``, rows along ``v``; the field stop's surround is 0.
    c0 : float
        Pixel index of ``u = v = 0``.
    extras : dict
        Dust specks drawn (truth).
    """
    smap = scale_map(scene)
    size, c0, u = canvas(ppu)
    profiles = axis_profiles(scene, smap, size, ppu, c0)
    # field stop, rim falloff and off-axis crescent (radially symmetric terms, 2-D)
    stop, field = field_mask(scene, smap, u, ppu, c0)
    img = np.empty((profiles.shape[0], size, size), np.float32)
    for ch in range(profiles.shape[0]):
        cv2.multiply(field, np.broadcast_to(profiles[ch].astype(np.float32)[None, :], field.shape).copy(),
                     dst=img[ch])
    extras = finish_view(scene, img, stop, rng, ppu, c0)
    return img, c0, extras


#: Canonical-raster renderer for each ``Scene.view`` ('spot' is registered by critline.synth.spot).
VIEW_RENDERERS = {"facet": eyepiece_view}
#: Per-view rewrite of the ground truth ``(scene, truth) -> truth`` (the facet view needs none).
TRUTH_HOOKS: dict = {}


def _renderer(view: str):
    if view not in VIEW_RENDERERS:
        import critline.synth.spot  # noqa: F401  (registers the spot view)
    return VIEW_RENDERERS[view]


# --------------------------------------------------------------------------- the phone
def _motion_kernel(length: float, angle_deg: float) -> np.ndarray:
    n = int(math.ceil(length)) | 1
    k = np.zeros((n, n), np.float32)
    c = (n - 1) / 2
    a = math.radians(angle_deg)
    for t in np.linspace(-length / 2, length / 2, 4 * n):
        x, y = c + t * math.cos(a), c + t * math.sin(a)
        x0, y0 = int(math.floor(x)), int(math.floor(y))
        fx, fy = x - x0, y - y0
        for dx, dy, w in ((0, 0, (1 - fx) * (1 - fy)), (1, 0, fx * (1 - fy)),
                          (0, 1, (1 - fx) * fy), (1, 1, fx * fy)):
            if 0 <= x0 + dx < n and 0 <= y0 + dy < n:
                k[y0 + dy, x0 + dx] += w
    return k / k.sum()


@functools.cache
def _tone_lut() -> np.ndarray:
    lin = np.linspace(0.0, 1.0, 65536)
    return np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * np.power(lin, 1 / 2.4) - 0.055).astype(np.float32)


def _tone(x: np.ndarray) -> np.ndarray:
    """sRGB transfer function (IEC 61966-2-1) through a 16-bit lookup table; ``x`` in 0..1."""
    return _tone_lut()[(x * np.float32(65535.0) + np.float32(0.5)).astype(np.uint16)]


@functools.cache
def _normal_lut() -> np.ndarray:
    from scipy.special import ndtri

    return ndtri((np.arange(65536) + 0.5) / 65536.0).astype(np.float32)


def _standard_normal(rng: np.random.Generator, shape) -> np.ndarray:
    """Standard normal samples by inverse CDF of 16-bit uniforms (5x faster than ``rng.normal``)."""
    return _normal_lut()[rng.integers(0, 65536, shape, dtype=np.uint16)]


def phone_capture(linear: np.ndarray, scene: Scene, rng: np.random.Generator, colour: np.ndarray,
                  region: tuple[int, int, int, int] | None = None) -> np.ndarray:
    """The phone's pipeline on the frame's linear light ``(channels, h, w)`` -> RGB uint8.

    Lens vignetting, veiling glare, lateral chromatic aberration, defocus
    (Gaussian), motion blur (line kernel), colour filter mosaic, exposure,
    sensor noise in linear light (shot noise ~ sqrt(electrons), read noise),
    clipping, edge-aware noise reduction, the sRGB tone curve and unsharp
    masking, in that order.  ``region`` ``(x0, x1, y0, y1)``: where the field is (the
    optical blur is applied around it only).
    """
    r = scene.field_radius_px
    h, w = linear.shape[1:]
    if scene.vignetting > 0:
        x = (np.arange(w, dtype=np.float32) - (w - 1) / 2) / np.float32(0.5 * math.hypot(w, h))
        y = (np.arange(h, dtype=np.float32) - (h - 1) / 2) / np.float32(0.5 * math.hypot(w, h))
        fall = 1.0 - np.float32(scene.vignetting) * (y[:, None] ** 2 + x[None, :] ** 2)
        for ch in range(linear.shape[0]):
            cv2.multiply(linear[ch], fall, dst=linear[ch])
        del fall
    if scene.glare > 0:
        # veiling glare: a little of the field's light spread widely by the lenses
        small = cv2.resize(linear.mean(axis=0), (max(w // 8, 1), max(h // 8, 1)), interpolation=cv2.INTER_AREA)
        small = cv2.GaussianBlur(small, (0, 0), max(r / 8 * 0.6, 1.0))
        halo = cv2.resize(small, (w, h), interpolation=cv2.INTER_LINEAR) * np.float32(scene.glare)
        for ch in range(linear.shape[0]):
            linear[ch] += halo
        del small, halo
    if scene.lateral_ca > 0:
        # lateral chromatic aberration: red imaged slightly larger, blue slightly smaller
        # than green, about the lens axis (frame centre)
        if linear.shape[0] == 1:
            linear = np.repeat(linear, 3, axis=0)
        for ch, sign in ((0, 1.0), (2, -1.0)):
            k = 1.0 + sign * scene.lateral_ca
            cx_, cy_ = (w - 1) / 2, (h - 1) / 2
            m = np.array([[k, 0, cx_ * (1 - k)], [0, k, cy_ * (1 - k)]], np.float64)
            linear[ch] = cv2.warpAffine(linear[ch], m, (w, h), flags=cv2.INTER_LINEAR,
                                        borderMode=cv2.BORDER_REPLICATE)
    out = np.empty((h, w, 3), np.uint8)
    mono = linear.shape[0] == 1
    blurred = []
    # blur only around the field: elsewhere the frame is the smooth, dim surround, which
    # blurring leaves as it is
    reach = int(math.ceil(4 * scene.defocus * r + scene.motion * r)) + 2
    if region is None:
        region = (0, w, 0, h)
    x0, x1 = max(region[0] - reach, 0), min(region[1] + reach, w)
    y0, y1 = max(region[2] - reach, 0), min(region[3] + reach, h)
    for ch in range(linear.shape[0]):
        img = linear[ch]
        if x1 > x0 and y1 > y0 and (scene.defocus > 0 or scene.motion * r >= 1.0):
            roi = np.ascontiguousarray(img[y0:y1, x0:x1])
            if scene.defocus > 0:
                roi = cv2.GaussianBlur(roi, (0, 0), scene.defocus * r, borderType=cv2.BORDER_REFLECT)
            if scene.motion * r >= 1.0:
                roi = cv2.filter2D(roi, -1, _motion_kernel(scene.motion * r, scene.motion_angle_deg),
                                   borderType=cv2.BORDER_REFLECT)
            img[y0:y1, x0:x1] = roi
        blurred.append(img)
    full_well = float(scene.full_well)
    electrons_per_unit = np.float32(max(full_well, 1.0))
    gains = [np.float32(scene.exposure * colour[c]) * electrons_per_unit for c in range(3)]

    def exposed(c):
        return blurred[0 if mono else c] * gains[c]

    def add_noise(img):  # img in electrons -> normalised 0..1 with shot and read noise
        if full_well > 0:
            sigma = cv2.sqrt(cv2.max(img, 0.0) + np.float32(scene.read_noise**2))
            img += sigma * _standard_normal(rng, img.shape)
        img *= np.float32(1.0) / electrons_per_unit
        return np.clip(img, 0.0, 1.0, out=img)

    if scene.bayer:
        # RGGB colour filter mosaic: one channel per photosite, noise per photosite, then the
        # phone's demosaicing (bilinear, OpenCV) on 16-bit raw values
        mosaic = np.empty((h, w), np.float32)
        mosaic[0::2, 0::2] = blurred[0][0::2, 0::2] * gains[0]
        mosaic[0::2, 1::2] = blurred[0 if mono else 1][0::2, 1::2] * gains[1]
        mosaic[1::2, 0::2] = blurred[0 if mono else 1][1::2, 0::2] * gains[1]
        mosaic[1::2, 1::2] = blurred[0 if mono else 2][1::2, 1::2] * gains[2]
        raw = (add_noise(mosaic) * np.float32(65535.0) + np.float32(0.5)).astype(np.uint16)
        del mosaic
        rgb = cv2.demosaicing(raw, cv2.COLOR_BayerBG2RGB)  # R at even rows and columns
        del raw
        planes = [rgb[..., c] for c in range(3)]
    else:
        planes = None
    for c in range(3):
        if planes is not None:
            img = planes[c].astype(np.float32) * np.float32(1.0 / 65535.0)
        else:
            img = add_noise(exposed(c))
        if scene.denoise > 0:
            smooth = cv2.GaussianBlur(img, (0, 0), 0.8 + 1.5 * scene.denoise)
            diff = img - smooth
            scale = np.float32(3.0 * math.sqrt(scene.read_noise**2 + 0.25 * max(full_well, 1))
                               / max(full_well, 1) + 1e-3)
            # keep differences well above the noise (edges, graduations), smooth the rest
            ratio = diff * np.float32(1.0 / scale)
            ratio *= ratio
            ratio += np.float32(1.0)
            keep = np.float32(1.0) - np.float32(scene.denoise) / ratio
            diff *= keep
            img = smooth
            img += diff
            del diff, ratio, keep
            np.clip(img, 0.0, 1.0, out=img)
        tone = _tone(img)
        del img
        if scene.sharpen > 0:
            tone = cv2.addWeighted(tone, 1.0 + scene.sharpen, cv2.GaussianBlur(tone, (0, 0), 1.2),
                                   -scene.sharpen, 0.0)
            np.clip(tone, 0.0, 1.0, out=tone)
        out[..., c] = cv2.convertScaleAbs(tone, alpha=255.0)
    return out


# --------------------------------------------------------------------------- render
def render(scene: Scene, seed: int) -> tuple[np.ndarray, dict]:
    """Render ``scene`` as the phone would capture it.

    Parameters
    ----------
    scene : Scene
    seed : int
        Seeds every random element (noise, dust); same seed, same pixels.

    Returns
    -------
    image : ndarray, uint8, shape ``(height, width, 3)``
        RGB image as displayed.
    truth : dict
        Ground truth (schema ``critline.synth-truth/1``), see :func:`ground_truth`.
    """
    rng = np.random.default_rng([seed, 0xE7E])
    to_frame = eyepiece_to_frame(scene)
    # canonical pixel size: about one frame pixel, so no detail is lost or invented
    ppu = scene.field_radius_px
    # one renderer per kind of view (VIEW_RENDERERS): the flat facet's shadow edge, or the
    # spot (distance) view of a droplet on a curved stone (critline.synth.spot)
    view, c0, extras = _renderer(scene.view)(scene, ppu, rng)
    canon_to_uv = np.array([[1 / ppu, 0, -c0 / ppu], [0, 1 / ppu, -c0 / ppu], [0, 0, 1.0]])
    h_total = to_frame @ canon_to_uv
    size = view.shape[-1]
    corners = project(h_total, np.array([0, size - 1, size - 1, 0.0]), np.array([0, 0, size - 1, size - 1.0]))
    x0 = int(np.clip(math.floor(corners[:, 0].min()) - 2, 0, scene.width))
    x1 = int(np.clip(math.ceil(corners[:, 0].max()) + 3, 0, scene.width))
    y0 = int(np.clip(math.floor(corners[:, 1].min()) - 2, 0, scene.height))
    y1 = int(np.clip(math.ceil(corners[:, 1].max()) + 3, 0, scene.height))
    linear = np.full((view.shape[0], scene.height, scene.width), np.float32(scene.surround), np.float32)
    if x1 > x0 and y1 > y0:
        h_box = np.array([[1.0, 0, -x0], [0, 1.0, -y0], [0, 0, 1.0]]) @ h_total
        for ch in range(view.shape[0]):
            linear[ch, y0:y1, x0:x1] = cv2.warpPerspective(
                view[ch], h_box, (x1 - x0, y1 - y0), flags=cv2.INTER_LINEAR,
                borderMode=cv2.BORDER_CONSTANT, borderValue=float(scene.surround))
    del view
    colour = colour_response.light_colour(scene.light, scene.white_balance)
    image = phone_capture(linear, scene, rng, colour, region=(x0, x1, y0, y1))
    return image, ground_truth(scene, extras)


def ground_truth(scene: Scene, extras: dict | None = None) -> dict:
    """The truth sidecar of a rendered scene (pixel positions in the displayed image).

    Keys
    ----
    schema : ``"critline.synth-truth/1"``
    view : ``facet`` or ``spot``; a spot view's truth has a ``spot`` entry and its own
        edges and status (:func:`critline.synth.spot.spot_truth`).
    edges : list of dict, sorted by ``ri``
        Edges in the field: ``ri`` (true index at 589.3 nm), ``kind`` (``stone`` or
        ``liquid``), ``scale_position`` (graduation units from the first graduation of
        the *printed* scale, where the onset of total reflection falls), ``field_position``
        (``u``: distance from the field centre along the axis / field radius), ``pixel``
        (where the edge crosses the scale's base line), ``contrast`` (1 - brightness 0.02
        below the edge / brightness just above it, sodium light), ``weight`` (share of
        the light in this ray), ``in_field``, ``on_scale``.
    status : ``ok`` (a stone edge in the field), ``over_limit`` (only the liquid edge,
        stone above the liquid) or ``no_edge``.
    field : ``cx, cy`` (centroid of the projected field stop), ``r`` (radius of the circle
        of equal area), ``clipped`` (the frame cuts the field).
    axis_angle_deg : direction of increasing values at the field centre, degrees
        (x right, y down).
    graduations : per printed graduation ``index, printed, value`` (true value), ``kind``,
        ``u``, ``base`` and ``tip`` pixels, ``in_field``.
    homography : 3x3, eyepiece ``(u, v, 1)`` to frame pixels.
    light, instrument, scale_error, prism, spacing_ratio, dust, size, params (the whole
    :class:`Scene`; ``Scene.from_dict`` rebuilds it).
    """
    smap = scale_map(scene)
    h = eyepiece_to_frame(scene)
    inst = scene.instrument
    # field outline -> centre and equivalent radius (exact under tilt: polygon of the projected circle)
    t = np.linspace(0, 2 * np.pi, 721)[:-1]
    outline = project(h, np.cos(t), np.sin(t))
    xs, ys = outline[:, 0], outline[:, 1]
    xs2, ys2 = np.roll(xs, -1), np.roll(ys, -1)
    cross = xs * ys2 - xs2 * ys
    area = 0.5 * cross.sum()
    cx = float(((xs + xs2) * cross).sum() / (6 * area))
    cy = float(((ys + ys2) * cross).sum() / (6 * area))
    clipped = bool((xs < 0).any() or (ys < 0).any() or (xs > scene.width - 1).any() or (ys > scene.height - 1).any())

    def at(u):
        return [round(float(c), 3) for c in project(h, np.array([u]), np.array([scene.axis_v]))[0]]

    idx, printed, true, u = smap.graduations()
    lengths = dict(zip(("short", "medium", "long"), scene.tick_lengths, strict=True))
    side = 1 if scene.tick_side >= 0 else -1
    graduations = []
    for i, p, tv, ui in zip(idx, printed, true, u, strict=True):
        kind = inst.kind(int(i))
        tip = project(h, np.array([ui]), np.array([scene.axis_v + side * lengths[kind]]))[0]
        graduations.append({"index": int(i), "printed": round(float(p), 4), "value": round(float(tv), 6),
                            "kind": kind, "u": round(float(ui), 6), "base": at(ui),
                            "tip": [round(float(c), 3) for c in tip],
                            "in_field": bool(ui**2 + scene.axis_v**2 < 0.98)})

    def edge(value, kind):
        ue = float(smap.position(value))
        lo = float(brightness(scene, np.array([value - 0.02]))[0])
        hi = float(brightness(scene, np.array([value + 0.002]))[0])
        return {"ri": round(float(value), 6), "kind": kind,
                "scale_position": round(float(smap.scale_position(value)), 5),
                "field_position": round(ue, 6), "pixel": at(ue),
                "contrast": round((hi - lo) / hi, 4) if hi > 0 else 0.0,
                "in_field": bool(ue**2 + scene.axis_v**2 < 0.98),
                "on_scale": bool(smap.position(smap.true_value(inst.first)) <= ue
                                 <= smap.position(smap.true_value(inst.last)))}

    edges = []
    over = False
    for n, w in sorted(zip(scene.stone_ris, scene.weights, strict=True)):
        if w <= 0:
            continue
        if n < scene.liquid_ri:
            e = edge(n, "stone")
            e["weight"] = round(float(w), 4)
            if e["in_field"]:
                edges.append(e)
        else:
            over = True
    if over or scene.liquid_line > 0 or not scene.stone_ris:
        e = edge(scene.liquid_ri, "liquid")
        if e["in_field"] and (over or e["contrast"] > 0):
            edges.append(e)
    stones = [e for e in edges if e["kind"] == "stone"]
    liquid_seen = any(e["kind"] == "liquid" for e in edges)
    status = "ok" if stones else ("over_limit" if over and liquid_seen else "no_edge")
    axis_dir = project(h, np.array([0.0, 0.01]), np.array([scene.axis_v] * 2))
    d = axis_dir[1] - axis_dir[0]
    g = glass(scene.prism_glass)
    truth = {
        "schema": TRUTH_SCHEMA,
        "view": scene.view,
        "edges": edges,
        "status": status,
        "field": {"cx": round(cx, 3), "cy": round(cy, 3), "r": round(math.sqrt(abs(area) / math.pi), 3),
                  "clipped": clipped},
        "axis_angle_deg": round(math.degrees(math.atan2(d[1], d[0])) % 360.0, 4),
        "light": scene.light,
        "instrument": inst.to_dict(),
        "scale_error": {"offset": scene.scale_offset, "gain": scene.scale_gain},
        "prism": {"glass": g.name, "index_d": round(float(g.index(SODIUM_D_NM)), 6), "source": g.source},
        "spacing_ratio": round(smap.spacing_ratio(), 5),
        "graduations": graduations,
        "homography": [[float(x) for x in row] for row in h],
        "dust": (extras or {}).get("dust", []),
        "size": {"width": scene.width, "height": scene.height},
        "params": scene.to_dict(),
    }
    if scene.view != "facet":
        _renderer(scene.view)
    hook = TRUTH_HOOKS.get(scene.view)
    return hook(scene, truth) if hook else truth
