"""Axis direction of the scale, and the field resampled into the scale's own frame.

Method
------
The graduations are parallel dark lines and the shadow edge runs parallel to
them, so inside the field the image gradients point along the scale axis.
The dominant gradient orientation is the mode of the gradient-energy
weighted density of doubled gradient angles over the field interior (the
structure tensor's doubled-angle mean, Bigun and Granlund 1987; Jahne,
*Digital Image Processing*, ch. 13, taken under a Gaussian kernel that a
mean shift re-centres until it settles), started from the peak of their
histogram, on a high-passed image so that broad shading does not count.  The field stop's own rim is
excluded because its gradients point every way.  The field is then resampled
(``cv2.warpAffine``) so that the scale axis runs down the rows: row ``i`` is
the position ``u = i - half`` along the axis from the field centre, column
``j`` the position ``v = j - half`` across it.  The 180-degree ambiguity of
the orientation is resolved later, from the physics (see
:mod:`critline.photo.graduations`).
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from critline.photo.percentile import percentile

#: shortest phone focal length allowed for, as a fraction of the frame's long side: about a
#: 24 mm-equivalent lens, the widest main camera phones use (from memory)
PHONE_FOCAL_MIN = 0.67
#: largest tilt of the phone against the eyepiece allowed for, radians (the photo envelope of
#: design.md: "perspective tilt up to about 10 degrees")
PHONE_TILT_MAX = float(np.deg2rad(10.0))
#: RMS of ``tan(t) cos(phi) / tan(t_max)`` for a tilt ``t`` uniform in ``[0, t_max]`` in a direction
#: ``phi`` uniform around the circle: ``(1/3 * 1/2) ** 0.5`` (tan t ~ t below 10 degrees)
TILT_RMS_FRACTION = float(np.sqrt(1 / 6))


@dataclass(frozen=True)
class AxisEstimate:
    """Direction of the scale axis in the working image.

    angle : radians, direction of increasing ``u`` measured from the image x axis
        toward the image y axis (mod pi until resolved).
    coherence : 0..1, how strongly one orientation dominates.
    """

    angle: float
    coherence: float


@dataclass(frozen=True)
class FieldFrame:
    """The field resampled with the scale axis along the rows.

    Attributes
    ----------
    grey : ndarray (n, n) float32
        Stored (non-linear) luma, for finding the graduations.
    rgb : ndarray (n, n, 3) float32
        Stored (sRGB-encoded) RGB; :func:`critline.photo.load.srgb_to_linear` gives linear
        light for the columns a profile needs.
    inside : ndarray (n, n) bool
        Pixels inside the field stop and inside the photo frame.
    angle, cx, cy, half, reduce :
        The resampling: working-image point of frame pixel (i, j) is
        ``(cx, cy) + (i - half) * (cos a, sin a) + (j - half) * (-sin a, cos a)``;
        the working image is the photo at 1/``reduce`` size.
    """

    grey: np.ndarray
    rgb: np.ndarray
    inside: np.ndarray
    angle: float
    cx: float
    cy: float
    half: int
    reduce: int
    radius: float
    #: the field stop refined at working resolution (:func:`critline.photo.field.refine_stop`),
    #: working pixels; None when not refined (then ``cx, cy, radius`` stand for it)
    stop: tuple[float, float, float] | None = None
    #: standard uncertainty (stop radii) of a field position at the stop's centre from the phone's
    #: unknown tilt (see :func:`perspective_sigma`); scaled by ``1 - u**2`` across the field
    perspective: float = 0.0
    #: covariance of the refined stop's ``(cx, cy, r)`` (working pixels squared), None if not refined
    stop_cov: tuple[tuple[float, ...], ...] | None = None
    #: fraction of the stop's circumference whose edge took part in the refined fit (0 if not refined)
    stop_seen: float = 0.0
    #: the stored 8-bit integers ``rgb`` was made from (``rgb = stored / 255``), for table
    #: look-ups of their linear light; None for other sources
    stored: np.ndarray | None = None

    def field_position(self, row):
        """Signed position of frame row(s) along the axis from the field-stop centre, in stop radii.

        This is the ``field_position`` of :class:`critline.readings.Edge` and what the field-frame
        calibration maps to RI: a line across the axis (a shadow edge) at frame row ``row`` lies
        ``u`` stop radii from the stop's centre, positive in the direction of increasing rows.
        It is measured from the refined stop (sub-pixel centre and radius), so it does not depend
        on where the coarse search put the frame's own centre, nor on zoom, shift or rotation of
        the photo.
        """
        cx, cy, r = self.stop if self.stop is not None else (self.cx, self.cy, self.radius)
        c, s = np.cos(self.angle), np.sin(self.angle)
        along = (self.cx - cx) * c + (self.cy - cy) * s  # frame centre ahead of the stop centre
        return (np.asarray(row, float) - self.half + along) / r

    def position_sigma(self, position):
        """Standard uncertainty (stop radii) of :meth:`field_position` value(s) ``position``.

        Two parts in quadrature: the refined stop's own fit (its centre along the axis and its
        radius, from :attr:`stop_cov`; 0 when the stop was not refined, which the field-frame
        fallback does not read on) and the phone's tilt, ``perspective * (1 - u**2)``: to first order
        a tilt moves a line at ``u`` by ``delta (1 - u**2)`` relative to the stop's outline,
        ``delta`` the shift of the projected stop's centre (see :func:`perspective_sigma`).
        """
        u = np.asarray(position, float)
        var = (self.perspective * (1.0 - np.clip(u * u, 0.0, 1.0))) ** 2
        if self.stop is not None and self.stop_cov is not None:
            r = self.stop[2]
            c, s = np.cos(self.angle), np.sin(self.angle)
            cov = np.asarray(self.stop_cov, float)
            # d field_position / d (cx, cy, r)
            g = np.stack(np.broadcast_arrays(-c / r, -s / r, -u / r), axis=-1)
            var = var + np.einsum("...i,ij,...j->...", g, cov, g)
        return np.sqrt(var)

    def to_photo(self, i, j):
        """Full-size photo (x, y) of frame coordinates (row i, column j)."""
        u = np.asarray(i, float) - self.half
        v = np.asarray(j, float) - self.half
        c, s = np.cos(self.angle), np.sin(self.angle)
        x = self.cx + u * c - v * s
        y = self.cy + u * s + v * c
        r = self.reduce
        return x * r + (r - 1) / 2, y * r + (r - 1) / 2

    def from_photo(self, x, y):
        """Frame coordinates (row i, column j) of full-size photo point(s) (x, y)."""
        r = self.reduce
        xw = (np.asarray(x, float) - (r - 1) / 2) / r - self.cx
        yw = (np.asarray(y, float) - (r - 1) / 2) / r - self.cy
        c, s = np.cos(self.angle), np.sin(self.angle)
        return xw * c + yw * s + self.half, -xw * s + yw * c + self.half

    def flipped(self) -> FieldFrame:
        """The same frame with the axis direction reversed (u -> -u, v -> -v)."""
        return FieldFrame(self.grey[::-1, ::-1], self.rgb[::-1, ::-1], self.inside[::-1, ::-1],
                          self.angle + np.pi, self.cx, self.cy, self.half, self.reduce, self.radius, self.stop,
                          self.perspective, self.stop_cov, self.stop_seen,
                          None if self.stored is None else self.stored[::-1, ::-1])


#: Gaussian kernel of the orientation mean shift, radians of doubled angle (6 degrees of axis
#: direction): wide enough to take in the spread that noise gives single gradients on a weak
#: field, narrow enough to leave out labels and a crescent's curved rim (tuning 110000-110199 and
#: 120000-120199)
AXIS_KERNEL = float(np.deg2rad(12.0))
#: bins of the doubled-angle sums the mean shift runs on (samples shared linearly between the two
#: nearest, so the sums move smoothly with the data)
AXIS_BINS = 1024


def axis_angle(grey: np.ndarray, cx: float, cy: float, r: float) -> AxisEstimate:
    """Dominant gradient orientation inside the field.

    Method
    ------
    Doubled-angle (structure-tensor) averaging of gradient orientation (Bigun and Granlund 1987;
    Jahne, *Digital Image Processing*, ch. 13), made robust by a mean shift (Fukunaga and
    Hostetler 1975; Comaniciu and Meer 2002): the gradient-energy weighted mean of the doubled
    angles is taken under a Gaussian kernel centred on the current estimate, and the kernel is
    re-centred on that mean until it settles.  This is the mode of the kernel-smoothed orientation
    density, started from the peak of a coarse orientation histogram.  Every gradient counts with
    a weight that varies smoothly with its angle, so a small change of the image moves the
    estimate a little (a hard window around a histogram bin made it jump by bins).  The
    derivatives are Scharr's rotation-optimised ones (Scharr 2000; Jahne ch. 12) of a Gaussian
    smoothing of about 1/200 of the field radius: Sobel's kernels pulled thin lines' orientation
    by up to 0.9 degree toward the pixel axes.

    Parameters
    ----------
    grey : ndarray float32
        Working image luma.
    cx, cy, r : float
        Field circle in working pixels.

    Returns
    -------
    AxisEstimate
        ``coherence`` is the share of the interior's gradient energy within 4 degrees of the
        found direction.
    """
    h, w = grey.shape
    x0, x1 = max(0, int(cx - r)), min(w, int(cx + r) + 1)
    y0, y1 = max(0, int(cy - r)), min(h, int(cy + r) + 1)
    crop = grey[y0:y1, x0:x1]
    if crop.dtype != np.float32:
        scale = 65535.0 if crop.dtype == np.uint16 else 255.0
        crop = crop.astype(np.float32)
        crop /= scale
    # lines a few pixels wide are enough: work on at most ~500 px across the field
    shrink = max(1, int(r // 250))
    if shrink > 1:
        crop = cv2.resize(crop, (max(1, crop.shape[1] // shrink), max(1, crop.shape[0] // shrink)),
                          interpolation=cv2.INTER_AREA)
        cx, cy, r = (cx - x0) / shrink, (cy - y0) / shrink, r / shrink
        x0 = y0 = 0
        y1, x1 = crop.shape[0], crop.shape[1]
    # high-pass first: thin graduations and the sharp shadow edge stay, the broad gradients of a
    # vignetting crescent or of uneven light do not.  The smoothing (graduation spacing is about
    # r / 30) averages noise on weak fields; a small field keeps a one-pixel smoothing so that its
    # fine ticks survive.
    sigma = max(1.0, r / 200)
    sm = cv2.GaussianBlur(crop, (0, 0), sigma)
    hp = sm - _broad(sm, sigma)
    gx = cv2.Scharr(hp, cv2.CV_32F, 1, 0)
    gy = cv2.Scharr(hp, cv2.CV_32F, 0, 1)
    yy, xx = np.ogrid[y0:y1, x0:x1]
    inner = ((xx - cx) ** 2 + (yy - cy) ** 2) < (0.85 * r) ** 2
    # the gradients of the interior only (in row order), and their energy there
    gx_in, gy_in = gx[inner], gy[inner]
    e_in = gx_in * gx_in + gy_in * gy_in
    if not e_in.size or not np.any(e_in > 0):
        return AxisEstimate(0.0, 0.0)  # no field interior in the photo (or a flat one): no direction
    # the strongest fifth of the gradients carries nearly all the weight: use only those
    strong = e_in >= percentile(e_in, 80)
    gxs, gys = gx_in[strong], gy_in[strong]
    wgt = e_in[strong]
    # energy-weighted cosine and sine of the doubled angle: the structure tensor's own terms
    c2, s2 = gxs * gxs - gys * gys, 2 * gxs * gys
    doubled = np.arctan2(s2, c2)
    # orientation histogram (doubled angle): its peak starts the mean shift, so that other
    # structure (labels, dust, a curved crescent) spreads out instead of pulling the estimate
    nb = 360
    hist = np.bincount(((doubled + np.pi) / (2 * np.pi) * nb).astype(int) % nb, weights=wgt, minlength=nb)
    kern = np.exp(-0.5 * (np.arange(-6, 7) / 2.0) ** 2)
    smooth = np.convolve(np.concatenate([hist[-6:], hist, hist[:6]]), kern, mode="same")[6:-6]
    peak = (np.argmax(smooth) + 0.5) / nb * 2 * np.pi - np.pi
    angle, share = _orientation_mode(doubled, c2, s2, wgt, peak)
    return AxisEstimate(angle, share / max(float(e_in.sum()), 1e-12))


def _broad(sm: np.ndarray, sigma: float) -> np.ndarray:
    """``sm`` blurred on to a Gaussian of ``4 sigma`` (the high-pass's lower cut), on a quarter-size
    copy: the broad shading needs no full resolution, and a wide kernel at full size cost several
    milliseconds."""
    q = 4
    small = cv2.resize(sm, (max(1, sm.shape[1] // q), max(1, sm.shape[0] // q)), interpolation=cv2.INTER_AREA)
    small = cv2.GaussianBlur(small, (0, 0), float(np.sqrt(15.0)) * sigma / q)
    return cv2.resize(small, (sm.shape[1], sm.shape[0]), interpolation=cv2.INTER_LINEAR)


def _orientation_mode(doubled, c2, s2, wgt, start, kernel=AXIS_KERNEL, bins=AXIS_BINS):
    """Where a mean shift of weighted doubled angles (Comaniciu and Meer 2002) from ``start`` settles.

    ``c2, s2`` are each sample's weight times the cosine and sine of its doubled angle.  The
    samples are summed into ``bins`` bins of doubled angle, each shared linearly between the two
    nearest bin centres.  The mean-shift step ``m(t) - t`` (``m(t)``: the direction of the
    kernel-weighted resultant about ``t``) is found at every bin centre at once by circular
    convolution (FFT); the shift climbs from ``start`` in the direction of its step to the first
    zero crossing, which is interpolated linearly between bin centres.  (Iterating the shift itself
    took over 100 steps on weak fields, whose orientation density is flat on top.)  Returns the
    axis angle (half the settled doubled angle, radians) and the weight within 8 degrees of doubled
    angle of it.
    """
    width = 2 * np.pi / bins
    pos = (doubled + np.pi) / width - 0.5
    lo = np.floor(pos)
    frac = pos - lo
    lo = lo.astype(np.intp) % bins
    hi = (lo + 1) % bins

    def binned(v):
        return np.bincount(lo, v * (1 - frac), bins) + np.bincount(hi, v * frac, bins)

    cs, ss, ws = binned(c2), binned(s2), binned(wgt)
    centres = (np.arange(bins) + 0.5) * width - np.pi
    offsets = (np.arange(bins) + bins // 2) % bins - bins // 2  # circular lag in bins
    k_hat = np.fft.rfft(np.exp(-0.5 * (offsets * width / kernel) ** 2))
    kc = np.fft.irfft(np.fft.rfft(cs) * k_hat, bins)
    ks = np.fft.irfft(np.fft.rfft(ss) * k_hat, bins)
    shift = np.mod(np.arctan2(ks, kc) - centres + np.pi, 2 * np.pi) - np.pi
    # from the start bin, walk uphill (the way the shift points) to where it changes sign
    j = int(np.floor((start + np.pi) / width)) % bins
    way = 1 if shift[j] >= 0 else -1
    for _ in range(bins):
        nxt = (j + way) % bins
        if (shift[nxt] >= 0) != (way > 0):
            break
        j = nxt
    # the zero between bin centres j and nxt, by linear interpolation of the shift
    t = shift[j] / (shift[j] - shift[nxt])
    centre = centres[j] + way * t * width
    d = np.mod(centres - centre + np.pi, 2 * np.pi) - np.pi
    return float(np.mod(centre + np.pi, 2 * np.pi) - np.pi) / 2, float(ws[np.abs(d) < np.deg2rad(8)].sum())


def perspective_sigma(r: float, shape) -> float:
    """Standard uncertainty (stop radii) of where the eyepiece's centre lies relative to the
    projected field stop, from a phone tilt that the stop's outline cannot sign.

    Method
    ------
    The eyepiece shows the stop as a cone of directions of half-angle ``a``; a camera turned by
    ``t`` against its axis images it as an ellipse whose centre lies ``tan t tan a`` stop radii
    (first order in ``t``) from the image of the axis, along the tilt.  Turning the camera the
    other way about the same outline gives the same ellipse (its point reflection), so the
    outline gives neither the sign nor, at small tilts, the size (the ellipse's elongation is of
    second order).  What is known: ``tan a = r / f`` with the focal length ``f`` at least
    :data:`PHONE_FOCAL_MIN` of the frame's long side, and the tilt at most :data:`PHONE_TILT_MAX`
    in any direction; the shift along the scale axis then has RMS
    ``TILT_RMS_FRACTION * tan(PHONE_TILT_MAX) * r / f_min``.

    Parameters
    ----------
    r : float
        Stop radius (pixels of the image of shape ``shape``).
    shape : tuple
        Image shape (rows, columns, ...).

    References
    ----------
    Hartley, R. and Zisserman, A. (2004) *Multiple View Geometry in Computer Vision*, 2nd ed.,
    Cambridge University Press: sec. 8.4 (a camera rotating about its centre is a homography
    ``K R K^-1``) and sec. 2.2.3 (conics under a homography).
    """
    tan_a = r / (PHONE_FOCAL_MIN * max(shape[:2]))
    return float(TILT_RMS_FRACTION * np.tan(PHONE_TILT_MAX) * tan_a)


def make_frame(rgb: np.ndarray, cx: float, cy: float, r: float, angle: float, reduce: int,
               refine: bool = True, origin: tuple[float, float] = (0.0, 0.0), shape=None) -> FieldFrame:
    """Resample the field so the scale axis runs down the rows.

    The frame keeps the given circle for its own geometry (centre row, ``inside``); the field
    stop refined at this resolution (:func:`critline.photo.field.refine_stop`) is kept beside
    it for :meth:`FieldFrame.field_position`.

    Parameters
    ----------
    rgb : ndarray (H, W, 3)
        Working image, or the part of it around the field (see ``origin``), stored (sRGB-encoded)
        values: float32 0..1, or uint8/uint16.
    cx, cy, r : float
        Field circle in working pixels (of the whole working image).
    angle : float
        Axis direction (radians).
    reduce : int
        Reduction factor of the working image relative to the photo.
    refine : bool
        Refine the field stop's outline (sub-pixel) for field positions.
    origin : (float, float)
        Working-image point ``(x, y)`` of ``rgb``'s pixel (0, 0) when ``rgb`` is only a part of
        the working image; its edges count as the photo's edges.
    shape : tuple, optional
        The whole working image's shape (for :func:`perspective_sigma`); ``rgb.shape`` if None.
    """
    from critline.photo.field import refine_stop

    ox, oy = origin
    lx, ly = cx - ox, cy - oy  # the circle's centre in ``rgb``'s pixels
    outline = refine_stop(rgb, lx, ly, r) if refine else None
    stop = None if outline is None else (outline.cx + ox, outline.cy + oy, outline.r)
    stop_cov = None if outline is None else outline.cov
    stop_seen = 0.0 if outline is None else outline.rays / outline.n_rays
    perspective = perspective_sigma(r if outline is None else outline.r, rgb.shape if shape is None else shape)
    half = int(np.ceil(r)) + 2
    n = 2 * half + 1
    c, s = np.cos(angle), np.sin(angle)
    # output (col j, row i) -> input (x, y): x = cx + (i-half) c - (j-half) s, y = cy + (i-half) s + (j-half) c
    m = np.array([[-s, c, lx - half * c + half * s],
                  [c, s, ly - half * s - half * c]], dtype=np.float64)
    warped = cv2.warpAffine(rgb, m, (n, n), flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                            borderMode=cv2.BORDER_CONSTANT, borderValue=(0, 0, 0))
    stored = warped if warped.dtype == np.uint8 else None
    if warped.dtype != np.float32:
        warped = warped.astype(np.float32)
        warped *= np.float32(1.0 / (65535.0 if rgb.dtype == np.uint16 else 255.0))  # in place: one pass
    h, w = rgb.shape[:2]
    # Rec. 601 luma (OpenCV's weights 0.299, 0.587, 0.114)
    grey = cv2.cvtColor(warped, cv2.COLOR_RGB2GRAY)
    ii, jj = np.ogrid[0:n, 0:n]
    inside = ((ii - half) ** 2 + (jj - half) ** 2) < (0.97 * r) ** 2
    if not (lx - r >= 1 and ly - r >= 1 and lx + r <= w - 2 and ly + r <= h - 2):
        # part of the field lies outside the photo: those pixels are not inside (the rotation keeps
        # distances, so with the whole circle in the photo every pixel within 0.97 r maps into it)
        valid = cv2.warpAffine(np.ones((h, w), np.uint8), m, (n, n),
                               flags=cv2.INTER_NEAREST | cv2.WARP_INVERSE_MAP,
                               borderMode=cv2.BORDER_CONSTANT, borderValue=0) > 0
        inside &= valid
    return FieldFrame(grey, warped, inside, float(angle), float(cx), float(cy), half, reduce, float(r), stop,
                      float(perspective), stop_cov, float(stop_seen), stored)
