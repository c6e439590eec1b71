"""Forward model and least-squares fit of blurred Fresnel shadow edges (private).

Before the blur, the brightness at scale value ``t`` near ``K`` edges is::

    B(t) = low + p * tau + sum_k a_k * E_k(t) + q * tau * sum_k E_k(t),
    E_k(t) = R(t; n_k, N) ** g

where ``R`` is the unpolarised Fresnel reflectance of the prism/stone interface
(Fresnel equations, Born and Wolf, *Principles of Optics*, section 1.5; see
:mod:`critline.optics`) which reaches 1 at the onset of total reflection
``t = n_k`` (Snell's law), ``g`` absorbs what is left of the camera's tone curve,
and ``p``, ``q`` are additive and multiplicative linear vignetting trends across
the window (``tau`` runs from -1 to 1).  The observed profile is ``B`` convolved
with a Gaussian of width ``sigma`` (optics, focus, the phone's processing), in
scale units.

The model is linear in ``(low, p, a_1..a_K, q)`` and non-linear in
``(n_1..n_K, sigma, g)``.  The fit is a separable (variable projection) least
squares: for given non-linear parameters the linear ones are solved exactly by
weighted linear least squares, and :func:`scipy.optimize.least_squares` works on
the projected residual only (Golub and Pereyra, "The differentiation of
pseudo-inverses and nonlinear least squares problems whose variables separate",
SIAM J. Numer. Anal. 10, 1973).  The inverse Gauss-Newton matrix of the projected
problem is the non-linear block of the full covariance, so the onset uncertainty
already accounts for the unknown brightness levels and trends.

The convolution runs by FFT on a uniform grid, fixed for one fit so that the
model is a smooth function of its parameters, with a step of at most a quarter of
the smallest blur allowed in that fit so that the square-root cusp of ``R`` at the
onset is resolved; the grid is padded by four blur widths so that the periodic
wrap of the FFT never reaches a sample.  Blurred values are interpolated at the
samples.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.fft import irfft, next_fast_len, rfft, rfftfreq
from scipy.optimize import least_squares

#: Bounds of the tone exponent ``g``.  Linear light gives g near 1; the range
#: leaves room for a residual camera tone curve without letting g mimic a
#: second edge.
G_BOUNDS = (0.4, 3.0)


def reflectance(s, n, prism_index):
    """Unpolarised Fresnel reflectance, the formulas of :func:`critline.optics.fresnel_reflectance`.

    A lean copy for the inner loop of the fit (the caller keeps ``s < N``); the
    tests check it against the shared function.
    """
    big2 = prism_index * prism_index
    ss = s * s
    a = np.sqrt(np.maximum(big2 - ss, 0.0))
    b = np.sqrt(np.maximum(n * n - ss, 0.0))
    n2 = n * n
    with np.errstate(invalid="ignore", divide="ignore"):
        rs = ((a - b) / (a + b)) ** 2
        rp = ((n2 * a - big2 * b) / (n2 * a + big2 * b)) ** 2
    return np.where(s >= n, 1.0, 0.5 * (rs + rp))


@dataclass(frozen=True)
class Window:
    """Samples of one fit window and the fine grid the model is evaluated on."""

    values: np.ndarray
    brightness: np.ndarray
    weight: np.ndarray  # 1 / noise, 0 for masked samples (outliers)
    clipped: np.ndarray  # bool: sample at the clip level, a lower bound only
    clip_level: float
    grid: np.ndarray
    step: float
    centre: float
    half_span: float
    spacing: float  # median sample spacing in the window
    freq: np.ndarray  # rfft frequencies of the padded grid
    fft_len: int
    prism_index: float
    grid_sq: np.ndarray  # grid ** 2
    grid_cos: np.ndarray  # sqrt(N**2 - grid**2), the prism side of the Fresnel equations

    @property
    def tau_grid(self):
        return (self.grid - self.centre) / self.half_span

    @property
    def tau(self):
        return (self.values - self.centre) / self.half_span


def make_window(values, brightness, weight, clipped, clip_level, lo, hi, sigma_lo, sigma_hi,
                prism_index):
    """Samples in ``[lo, hi]``, on a grid fine enough for ``sigma_lo`` and padded for ``sigma_hi``.

    A grid step of a third of the smallest blur (never finer than a sixth of the
    sample spacing, below which the samples cannot tell) keeps the discretisation
    error of the onset under 1e-5 (measured on noise-free profiles against a
    twenty-times finer reference).
    """
    sel = (values >= lo) & (values <= hi)
    v = values[sel]
    spacing = float(np.median(np.diff(v))) if v.size > 1 else 1e-3
    step = max(sigma_lo / 3.0, spacing / 6.0, 1e-7)
    pad = 4.0 * sigma_hi + 3 * step
    count = int(np.ceil((v[-1] - v[0] + 2 * pad) / step)) + 1
    if count > 8000:  # bounded time and memory for extreme inputs
        step = (v[-1] - v[0] + 2 * pad) / 7999
        count = 8000
    grid = v[0] - pad + step * np.arange(count)
    fft_len = next_fast_len(count, real=True)
    grid_sq = grid * grid
    return Window(values=v, brightness=brightness[sel], weight=weight[sel], clipped=clipped[sel],
                  clip_level=clip_level, grid=grid, step=step, centre=0.5 * (v[0] + v[-1]),
                  half_span=max(0.5 * (v[-1] - v[0]), 1e-9), spacing=spacing,
                  freq=rfftfreq(fft_len, d=step), fft_len=fft_len, prism_index=float(prism_index),
                  grid_sq=grid_sq, grid_cos=np.sqrt(np.maximum(prism_index**2 - grid_sq, 0.0)))


def _dark(window: Window, n, g):
    """``1 - R(t; n, N) ** g`` on the grid: the same Fresnel equations as :func:`reflectance`."""
    big2 = window.prism_index**2
    a = window.grid_cos
    b = np.sqrt(np.maximum(n * n - window.grid_sq, 0.0))
    n2 = n * n
    rs = ((a - b) / (a + b)) ** 2
    rp = ((n2 * a - big2 * b) / (n2 * a + big2 * b)) ** 2
    r = 0.5 * (rs + rp)
    # b == 0 on the bright side, where both ratios are exactly 1 already
    return 1.0 - r**g if g != 1.0 else 1.0 - r


def _blur(window: Window, f, sigma, shape_rows=0):
    """Gaussian blur of grid values ``f`` (several rows at once) by FFT.

    The first ``shape_rows`` rows are also returned convolved with the
    fourth-order Gram-Charlier kernel ``phi(x) He4(x / sigma)`` (transfer
    ``G(f) (2 pi sigma f)**4``), appended after the plain rows.
    """
    omega2 = (2.0 * np.pi * sigma * window.freq) ** 2
    transfer = np.exp(-0.5 * omega2)
    spectrum = rfft(f, n=window.fft_len, axis=-1)
    if shape_rows:
        spectrum = np.concatenate([spectrum * transfer,
                                   spectrum[:shape_rows] * (transfer * omega2 * omega2)])
    else:
        spectrum = spectrum * transfer
    return irfft(spectrum, n=window.fft_len, axis=-1)[..., : window.grid.size]


def n_linear(count):
    """Linear parameters: low, p, a_1..a_K, q, and one blur-shape coefficient per term."""
    return 2 * count + 3


def design(window: Window, onsets, sigma, g, at=None):
    """Blurred basis functions at the samples (or at ``at``).

    Columns: low, p, a_1..a_K, q, then c_1..c_K.  The ``c_k`` columns are the
    edge terms blurred by the fourth-order Gram-Charlier kernel: with them the
    blur is a Gaussian corrected for kurtosis (Gram-Charlier A series), which
    takes up a box-like motion blur, a disc-like defocus or the phone's
    sharpening overshoot without a change of the onset, and without which such
    an edge would pass for two.
    """
    t = window.grid
    x_at = window.values if at is None else np.asarray(at, float)
    tau_at = (x_at - window.centre) / window.half_span
    count = len(onsets)
    # Work with the dark parts 1 - E_k, which vanish on the bright side: the padded
    # grid then wraps quietly, and tau * sum E_k = K tau - tau * sum(1 - E_k) where
    # the blur of the linear tau is tau itself.
    rows = np.empty((count + 1, t.size))
    for k, n in enumerate(onsets):
        rows[k] = _dark(window, n, g)
    rows[count] = window.tau_grid * rows[:count].sum(axis=0)
    blurred = _blur(window, rows, sigma, shape_rows=count)
    cols = [np.ones_like(x_at), tau_at]
    for k in range(count):
        cols.append(1.0 - np.interp(x_at, t, blurred[k]))
    cols.append(count * tau_at - np.interp(x_at, t, blurred[count]))
    for k in range(count):
        cols.append(-np.interp(x_at, t, blurred[count + 1 + k]))
    return np.stack(cols, axis=1)


def solve_linear(basis, window: Window):
    """Weighted linear least squares for the linear parameters.

    Clipped samples are censored: they count, at the clip level, only while the
    model would fall below it (a few active-set passes).
    """
    w = window.weight
    y = np.where(window.clipped, window.clip_level, window.brightness) if window.clipped.any() \
        else window.brightness
    coef = _weighted_solve(basis, y, w)
    if window.clipped.any():
        for _ in range(4):
            model = basis @ coef
            w_new = np.where(window.clipped & (model >= window.clip_level), 0.0, window.weight)
            if np.array_equal(w_new, w):
                break
            w = w_new
            coef = _weighted_solve(basis, y, w)
    return coef


def _weighted_solve(basis, y, w):
    a = basis * w[:, None]
    b = y * w
    normal = a.T @ a
    scale = np.sqrt(np.maximum(np.diag(normal), 1e-300))
    normal = normal / np.outer(scale, scale) + 1e-12 * np.eye(len(scale))
    try:
        return np.linalg.solve(normal, (a.T @ b) / scale) / scale
    except np.linalg.LinAlgError:
        return np.linalg.lstsq(a, b, rcond=1e-10)[0]


def unpack(theta, count):
    """Non-linear vector ``[n_1, d_2.., log sigma, log g]`` to onsets, sigma, g."""
    onsets = np.cumsum(theta[:count])
    return onsets, float(np.exp(theta[count])), float(np.exp(theta[count + 1]))


def residuals(theta, window: Window, count):
    onsets, sigma, g = unpack(theta, count)
    basis = design(window, onsets, sigma, g)
    coef = solve_linear(basis, window)
    model = basis @ coef
    r = (window.brightness - model) * window.weight
    if window.clipped.any():
        # A clipped sample says only "at least the clip level": no penalty when the
        # model is above it (censored residual).
        r = np.where(window.clipped, np.maximum(window.clip_level - model, 0.0) * window.weight, r)
    return r


@dataclass(frozen=True)
class Fit:
    """Result of one fit of ``count`` edge terms in one window."""

    count: int
    theta: np.ndarray
    coef: np.ndarray  # low, p, a_1..a_K, q
    cov_theta: np.ndarray  # covariance of theta, scaled by the residual variance
    chi2: float  # sum of squared normalised residuals
    used: int  # samples carrying information
    scale2: float  # residual variance factor applied to the covariance
    autocorr: float  # lag-1 autocorrelation of the residuals
    residual: np.ndarray
    success: bool

    @property
    def onsets(self):
        return unpack(self.theta, self.count)[0]

    @property
    def sigma(self):
        return unpack(self.theta, self.count)[1]

    @property
    def g(self):
        return unpack(self.theta, self.count)[2]

    @property
    def low(self):
        return float(self.coef[0])

    @property
    def amplitudes(self):
        return np.asarray(self.coef[2 : 2 + self.count])

    @property
    def params(self):
        return self.count + 2 + n_linear(self.count)

    def onset_cov(self):
        jac = np.tril(np.ones((self.count, self.count)))
        return jac @ self.cov_theta[: self.count, : self.count] @ jac.T

    def curve(self, window: Window, at):
        onsets, sigma, g = unpack(self.theta, self.count)
        return design(window, onsets, sigma, g, at=at) @ self.coef

    def level(self, window: Window, at, edges="all"):
        """Unblurred model level at ``at`` with all terms dark (edges='none') or bright ('all')."""
        tau = (np.asarray(at, float) - window.centre) / window.half_span
        lin = self.coef[0] + self.coef[1] * tau
        if edges == "none":
            return lin
        return lin + self.amplitudes.sum() + self.count * self.trend * tau

    @property
    def trend(self):
        """Multiplicative vignetting coefficient q."""
        return float(self.coef[2 + self.count])


def fit(window: Window, count, theta0, lower, upper, *, max_nfev=60):
    """Separable non-linear least squares (``scipy.optimize.least_squares``, 'trf')."""
    theta0 = np.clip(np.asarray(theta0, float), lower + 1e-12, upper - 1e-12)
    res = least_squares(residuals, theta0, bounds=(lower, upper),
                        args=(window, count), x_scale="jac", method="trf",
                        max_nfev=max_nfev, diff_step=1e-4, ftol=1e-7, xtol=1e-7)
    theta = res.x
    onsets, sigma, g = unpack(theta, count)
    basis = design(window, onsets, sigma, g)
    coef = solve_linear(basis, window)
    r = res.fun
    used = int(np.count_nonzero(window.weight > 0) - np.count_nonzero((r == 0) & window.clipped))
    used = max(used, 1)
    params = count + 2 + n_linear(count)
    chi2 = float(np.sum(r * r))
    scale2 = max(chi2 / max(used - params, 1), 1e-6)
    nz = r[window.weight > 0]
    if nz.size > 3:
        rc = nz - nz.mean()
        denom = float(np.dot(rc, rc))
        rho = float(np.dot(rc[1:], rc[:-1]) / denom) if denom > 0 else 0.0
    else:
        rho = 0.0
    jac = res.jac
    cov = np.linalg.pinv(jac.T @ jac, rcond=1e-12) * scale2
    return Fit(count=count, theta=theta, coef=coef, cov_theta=cov, chi2=chi2, used=used,
               scale2=scale2, autocorr=rho, residual=r, success=bool(res.status > 0))
