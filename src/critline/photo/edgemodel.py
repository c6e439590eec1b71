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

The blur also carries one fourth-order Gram-Charlier term per edge, with a free
linear coefficient ``c_k`` (see :func:`design`), so that a non-Gaussian blur
(defocus disc, motion box, sharpening) does not move the onset.

The model is linear in ``(low, p, a_1..a_K, q, c_1..c_K)`` and non-linear in
``(n_1..n_K, sigma, g)``.  The fit is a separable (variable projection) least
squares: for given non-linear parameters the linear ones are solved exactly by
weighted linear least squares, and :func:`scipy.optimize.least_squares` works on
the projected residual only (Golub and Pereyra, "The differentiation of
pseudo-inverses and nonlinear least squares problems whose variables separate",
SIAM J. Numer. Anal. 10, 1973).  The inverse Gauss-Newton matrix of the projected
problem is the non-linear block of the full covariance, so the onset uncertainty
already accounts for the unknown brightness levels and trends.

The convolution runs by FFT on a uniform grid, fixed for one fit so that the
model is a smooth function of its parameters, with a step of a third of the
smallest blur allowed in that fit (never coarser than the sample spacing, never
finer than a sixth of it) so that the square-root cusp of ``R`` at the onset is
resolved; the grid is padded by four blur widths so that the periodic
wrap of the FFT never reaches a sample.  Blurred values are interpolated at the
samples.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.fft import next_fast_len, rfftfreq
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
    interp_index: np.ndarray  # grid cell of each sample (linear interpolation)
    interp_frac: np.ndarray
    #: censored samples bound the model from below at their own level (capped at the clip
    #: level) and the censored fit is solved exactly (see :func:`solve_linear`)
    exact_censoring: bool = False

    @property
    def tau_grid(self):
        return (self.grid - self.centre) / self.half_span

    @property
    def tau(self):
        return (self.values - self.centre) / self.half_span


def make_window(values, brightness, weight, clipped, clip_level, lo, hi, sigma_lo, sigma_hi,
                prism_index, exact_censoring=False):
    """Samples in ``[lo, hi]``, on a grid fine enough for ``sigma_lo`` and padded for ``sigma_hi``.

    A grid step of a third of the smallest blur (never finer than a sixth of the
    sample spacing, below which the samples cannot tell) keeps the discretisation
    error of the onset under 1e-5 (measured on noise-free profiles against a
    twenty-times finer reference).
    """
    sel = (values >= lo) & (values <= hi)
    v = values[sel]
    spacing = float(np.median(np.diff(v))) if v.size > 1 else 1e-3
    step = max(min(sigma_lo / 3.0, spacing), spacing / 6.0, 1e-7)
    pad = 4.0 * sigma_hi + 3 * step
    count = int(np.ceil((v[-1] - v[0] + 2 * pad) / step)) + 1
    if count > 8000:  # bounded time and memory for extreme inputs
        step = (v[-1] - v[0] + 2 * pad) / 7999
        count = 8000
    grid = v[0] - pad + step * np.arange(count)
    fft_len = next_fast_len(count, real=True)
    grid_sq = grid * grid
    index, frac = _interp_weights(grid, v)
    return Window(values=v, brightness=brightness[sel], weight=weight[sel], clipped=clipped[sel],
                  clip_level=clip_level, grid=grid, step=step, centre=0.5 * (v[0] + v[-1]),
                  half_span=max(0.5 * (v[-1] - v[0]), 1e-9), spacing=spacing,
                  freq=rfftfreq(fft_len, d=step), fft_len=fft_len, prism_index=float(prism_index),
                  grid_sq=grid_sq,
                  # kept above zero so that the ratios stay 1 (not 0/0) beyond the prism index
                  grid_cos=np.sqrt(np.maximum(prism_index**2 - grid_sq, 1e-18)),
                  interp_index=index, interp_frac=frac, exact_censoring=bool(exact_censoring))


def _interp_weights(grid, at):
    """Cell index and fraction of each point of ``at`` on the uniform ``grid``."""
    pos = np.clip((np.asarray(at, float) - grid[0]) / (grid[1] - grid[0]), 0.0, grid.size - 1.000001)
    index = pos.astype(int)
    return index, pos - index


def _dark(window: Window, n, g, with_tone=False, out=None, tone=None):
    """``1 - R(t; n, N) ** g`` on the grid: the same Fresnel equations as :func:`reflectance`.

    Zero from the onset up (total reflection), so only the grid below ``n`` is
    computed.  With ``with_tone`` also returns its derivative with respect to
    ``log g``, ``-g R**g log R``.  ``out`` and ``tone``, zero-filled rows of the
    grid's length, are written in place when given (no new arrays in the fit's loop).
    """
    if out is None:
        out = np.zeros(window.grid.size)
    if with_tone and tone is None:
        tone = np.zeros(window.grid.size)
    stop = int(np.searchsorted(window.grid, n))
    if stop == 0:
        return (out, tone) if with_tone else out
    big2 = window.prism_index**2
    a = window.grid_cos[:stop]
    b = np.sqrt(np.maximum(n * n - window.grid_sq[:stop], 0.0))
    n2 = n * n
    rs = ((a - b) / (a + b)) ** 2
    rp = ((n2 * a - big2 * b) / (n2 * a + big2 * b)) ** 2
    r = 0.5 * (rs + rp)
    if with_tone:
        # one logarithm for both the power and its derivative (r ** g = exp(g log r))
        log_r = np.log(np.maximum(r, 1e-300))
        rg = np.exp(g * log_r) if g != 1.0 else r
        out[:stop] = 1.0 - rg
        tone[:stop] = -g * rg * log_r
        return out, tone
    rg = r**g if g != 1.0 else r
    out[:stop] = 1.0 - rg
    return out


def _blur(window: Window, f, sigma, shape_rows=0):
    """Gaussian blur of grid values ``f`` (several rows at once) by FFT.

    The first ``shape_rows`` rows are also returned convolved with the
    fourth-order Gram-Charlier kernel ``phi(x) He4(x / sigma)`` (transfer
    ``G(f) (2 pi sigma f)**4``), appended after the plain rows.
    """
    omega2 = (2.0 * np.pi * sigma * window.freq) ** 2
    transfer = np.exp(-0.5 * omega2)
    spectrum = np.fft.rfft(f, n=window.fft_len, axis=-1)
    if shape_rows:
        spectrum = np.concatenate([spectrum * transfer,
                                   spectrum[:shape_rows] * (transfer * omega2 * omega2)])
    else:
        spectrum = spectrum * transfer
    return np.fft.irfft(spectrum, n=window.fft_len, axis=-1)[..., : window.grid.size]


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
    if at is None:
        x_at, index, frac = window.values, window.interp_index, window.interp_frac
    else:
        x_at = np.asarray(at, float)
        index, frac = _interp_weights(window.grid, x_at)
    tau_at = (x_at - window.centre) / window.half_span
    count = len(onsets)
    # Work with the dark parts 1 - E_k, which vanish on the bright side: the padded
    # grid then wraps quietly, and tau * sum E_k = K tau - tau * sum(1 - E_k) where
    # the blur of the linear tau is tau itself.
    rows = np.empty((count + 1, window.grid.size))
    for k, n in enumerate(onsets):
        rows[k] = _dark(window, n, g)
    rows[count] = window.tau_grid * rows[:count].sum(axis=0)
    blurred = _blur(window, rows, sigma, shape_rows=count)
    at_samples = blurred[:, index] * (1.0 - frac) + blurred[:, index + 1] * frac
    basis = np.empty((x_at.size, n_linear(count)))
    basis[:, 0] = 1.0
    basis[:, 1] = tau_at
    basis[:, 2 : 2 + count] = (1.0 - at_samples[:count]).T
    basis[:, 2 + count] = count * tau_at - at_samples[count]
    basis[:, 3 + count :] = -at_samples[count + 1 :].T
    return basis


def censor_levels(window: Window):
    """Lower bound each censored (clipped) sample puts on the model.

    The clip level; with ``exact_censoring`` each sample's own brightness capped at
    the clip level (a sample on the rounded corner next to the clipped plateau is
    the smoothed clipped profile, which lies below the smoothed unclipped one).
    """
    if window.exact_censoring:
        return np.minimum(window.brightness, window.clip_level)
    return window.clip_level


def solve_linear(basis, window: Window, return_weights=False):
    """Weighted linear least squares for the linear parameters.

    Clipped samples are censored: they count, at the clip level, only while the
    model would fall below it (a few active-set passes).  With
    ``window.exact_censoring`` the censored problem is solved to its optimum by
    :func:`censored_solve`.
    """
    if window.exact_censoring and window.clipped.any():
        return censored_solve(basis, window, return_weights)
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
    return (coef, w) if return_weights else coef


def censored_solve(basis, window: Window, return_weights=False, max_passes=30):
    """Censored (Tobit-style) weighted least squares for the linear parameters, solved exactly.

    Minimises ``sum_u (w (y - m))**2 + sum_c (w max(b - m, 0))**2`` over the linear
    parameters, ``m`` the model, ``u`` the unclipped samples, ``c`` the censored ones
    with their bounds ``b`` (:func:`censor_levels`): a censored sample says only
    that the model reaches at least its bound (Tobin, "Estimation of relationships
    for limited dependent variables", Econometrica 26, 1958, with the Gaussian
    likelihood's censored term replaced by the squared shortfall, as in censored
    least squares).  The objective is convex and piecewise quadratic; it is solved
    by active-set (semismooth Newton) passes with a backtracking step, started from
    the fit without the censored samples, since over-exposure puts the bright level
    well above the clip and most censored samples are then inactive.  (Started from
    all censored samples counted at the clip level, a few plain passes stop with the
    model hugging the clip: a flat top that pulls the onset low.)
    """
    levels = np.broadcast_to(censor_levels(window), window.brightness.shape)
    clipped = window.clipped
    y = np.where(clipped, levels, window.brightness)

    def objective(coef):
        model = basis @ coef
        r = np.where(clipped, np.maximum(levels - model, 0.0), window.brightness - model) * window.weight
        return float(r @ r)

    w = np.where(clipped, 0.0, window.weight)
    coef = _weighted_solve(basis, y, w)
    best = objective(coef)
    for _ in range(max_passes):
        w_new = np.where(clipped & (basis @ coef >= levels), 0.0, window.weight)
        if np.array_equal(w_new, w):
            break
        w = w_new
        target = _weighted_solve(basis, y, w)
        step = 1.0
        while True:
            trial = coef + step * (target - coef)
            value = objective(trial)
            if value <= best or step < 1e-3:
                break
            step *= 0.5
        coef, best = trial, value
    w = np.where(clipped & (basis @ coef >= levels), 0.0, window.weight)
    return (coef, w) if return_weights else coef


def _scaled_normal(a):
    """``a^T a`` scaled to a unit diagonal, plus 1e-12 on the diagonal, and the scale.

    The same numbers as ``normal / outer(scale, scale) + 1e-12 * eye`` without the two
    temporary matrices (the fit calls this some thousand times per photo).
    """
    normal = a.T @ a
    scale = np.sqrt(np.maximum(normal.diagonal(), 1e-300))
    normal /= scale[:, None] * scale[None, :]
    normal.flat[:: len(scale) + 1] += 1e-12
    return normal, scale


def _weighted_solve(basis, y, w):
    a = basis * w[:, None]
    b = y * w
    normal, scale = _scaled_normal(a)
    try:
        return np.linalg.solve(normal, (a.T @ b) / scale) / scale
    except np.linalg.LinAlgError:
        return np.linalg.lstsq(a, b, rcond=1e-10)[0]


def unpack(theta, count):
    """Non-linear vector ``[n_1, d_2.., log sigma, log g]`` to onsets, sigma, g."""
    onsets = np.cumsum(theta[:count])
    return onsets, float(np.exp(theta[count])), float(np.exp(theta[count + 1]))


class _Problem:
    """Residual and approximate Jacobian of the separable fit, sharing one FFT per step.

    The Jacobian is Kaufman's approximation of the variable-projection Jacobian
    (L. Kaufman, "A variable projection method for solving separable nonlinear
    least squares problems", BIT 15, 1975), with analytic derivatives of the
    blurred model: the Gaussian's width derivative is a filter of the same
    spectrum, an onset shift is taken as a translation of its edge term, and the
    tone exponent's derivative is one more blurred row.  It steers the search
    only; the covariance is taken from central differences at the solution.
    """

    def __init__(self, window: Window, count: int):
        self.window = window
        self.count = count
        self._key = None
        self._ift = 2j * np.pi * window.freq
        # fixed for the fit: computed once, not at every evaluation
        self._tau_grid = window.tau_grid
        self._tau = window.tau
        self._index1 = window.interp_index + 1
        self._rest = 1.0 - window.interp_frac
        self._clipped = bool(window.clipped.any())

    def _update(self, theta):
        key = theta.tobytes()
        if key == self._key:
            return
        win, count = self.window, self.count
        onsets, sigma, g = unpack(theta, count)
        rows = np.zeros((count + 1, win.grid.size))
        tones = np.zeros((count, win.grid.size))
        for k, n in enumerate(onsets):
            _dark(win, n, g, with_tone=True, out=rows[k], tone=tones[k])
        rows[count] = self._tau_grid * rows[:count].sum(axis=0)
        spectrum = np.fft.rfft(rows, n=win.fft_len, axis=-1)
        omega2 = (2.0 * np.pi * sigma * win.freq) ** 2
        transfer = np.exp(-0.5 * omega2)
        blurred = np.fft.irfft(np.concatenate([spectrum * transfer,
                                        spectrum[:count] * (transfer * omega2 * omega2)]),
                        n=win.fft_len, axis=-1)[:, : win.grid.size]
        at = blurred[:, win.interp_index] * self._rest + blurred[:, self._index1] * win.interp_frac
        tau = self._tau
        basis = np.empty((tau.size, n_linear(count)))
        basis[:, 0] = 1.0
        basis[:, 1] = tau
        basis[:, 2 : 2 + count] = (1.0 - at[:count]).T
        basis[:, 2 + count] = count * tau - at[count]
        basis[:, 3 + count :] = -at[count + 1 :].T
        if self._clipped:
            # with the top of the edge clipped the blur shape cannot be told from the
            # edge's own amplitude: keep the plain Gaussian blur there
            basis[:, 3 + count :] = 0.0
            if win.exact_censoring:
                # nor can a multiplicative trend of the edge terms (a + q tau) be told from
                # the amplitude when the bright side is only bounded: it would bend the
                # shoulder into a false shape
                basis[:, 2 + count] = 0.0
        coef, weight = solve_linear(basis, win, return_weights=True)
        model = basis @ coef
        r = (win.brightness - model) * win.weight
        if self._clipped:
            r = np.where(win.clipped, np.maximum(censor_levels(win) - model, 0.0) * win.weight, r)
        self._key = key
        self.r, self.basis, self.coef, self.weight = r, basis, coef, weight
        self.spectrum, self.tones, self.omega2, self.transfer = spectrum, tones, omega2, transfer

    def fun(self, theta):
        self._update(theta)
        return self.r

    def jac(self, theta):
        self._update(theta)
        win, count = self.window, self.count
        coef, w2, t = self.coef, self.omega2, self.transfer
        amps, q, shape = coef[2 : 2 + count], coef[2 + count], coef[3 + count :]
        spec = self.spectrum
        derivs = []
        # onsets (translation of each edge term)
        for k in range(count):
            derivs.append((amps[k] * t + shape[k] * t * w2 * w2) * self._ift * spec[k])
        # log sigma: d/dlog(sigma) of exp(-w/2) is -w exp(-w/2); of exp(-w/2) w^2 it is
        # (4 w^2 - w^3) exp(-w/2), with w = (2 pi sigma f)^2
        d_sigma = (amps[:, None] * (w2 * t)) * spec[:count] \
            - (shape[:, None] * ((4 * w2 * w2 - w2**3) * t)) * spec[:count]
        derivs.append(d_sigma.sum(axis=0) + q * w2 * t * spec[count])
        # log g
        tone_a = amps @ self.tones + q * self._tau_grid * self.tones.sum(axis=0)
        tone_s = shape @ self.tones
        spec_tone = np.fft.rfft(np.stack([tone_a, tone_s]), n=win.fft_len, axis=-1)
        derivs.append(-(t * spec_tone[0] + t * w2 * w2 * spec_tone[1]))
        dm_grid = np.fft.irfft(np.stack(derivs), n=win.fft_len, axis=-1)[:, : win.grid.size]
        dm = dm_grid[:, win.interp_index] * self._rest + dm_grid[:, self._index1] * win.interp_frac  # (K + 2, m)
        # cumulative onsets: theta_j moves every onset from j up
        dm[:count] = np.cumsum(dm[:count][::-1], axis=0)[::-1]
        v = (dm * self.weight).T  # d(weighted model)/d(theta), inactive clipped rows zero
        a = self.basis * self.weight[:, None]
        normal, scale = _scaled_normal(a)
        try:
            proj = np.linalg.solve(normal, (a.T @ v) / scale[:, None]) / scale[:, None]
        except np.linalg.LinAlgError:
            proj = np.linalg.lstsq(a, v, rcond=1e-10)[0]
        return -(v - a @ proj)


def _central_jacobian(problem: _Problem, theta, steps):
    """Central-difference Jacobian of the projected residual (for the covariance)."""
    cols = []
    for j, h in enumerate(steps):
        up, down = theta.copy(), theta.copy()
        up[j] += h
        down[j] -= h
        cols.append((problem.fun(up) - problem.fun(down)) / (2 * h))
    return np.stack(cols, axis=1)


@dataclass(frozen=True)
class Fit:
    """Result of one fit of ``count`` edge terms in one window."""

    count: int
    theta: np.ndarray
    coef: np.ndarray  # low, p, a_1..a_K, q, c_1..c_K
    chi2: float  # sum of squared normalised residuals
    used: int  # samples carrying information
    scale2: float  # residual variance factor applied to the covariance
    autocorr: float  # lag-1 autocorrelation of the residuals
    residual: np.ndarray
    success: bool
    problem: _Problem = field(repr=False, compare=False)
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def cov_theta(self):
        """Covariance of theta from a central-difference Jacobian, scaled by the residual variance.

        Computed on first use only (most trial fits are never asked).
        """
        if "cov" not in self._cache:
            steps = np.concatenate([np.full(self.count, 0.05 * self.sigma), [0.02, 0.02]])
            jac = _central_jacobian(self.problem, self.theta, steps)
            self._cache["cov"] = np.linalg.pinv(jac.T @ jac, rcond=1e-12) * self.scale2
        return self._cache["cov"]

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

    @property
    def trend(self):
        """Multiplicative vignetting coefficient q."""
        return float(self.coef[2 + self.count])


def fit(window: Window, count, theta0, lower, upper, *, max_nfev=60):
    """Separable non-linear least squares (``scipy.optimize.least_squares``, 'trf')."""
    theta0 = np.clip(np.asarray(theta0, float), lower + 1e-12, upper - 1e-12)
    problem = _Problem(window, count)
    res = least_squares(problem.fun, theta0, jac=problem.jac, bounds=(lower, upper),
                        x_scale="jac", method="trf", max_nfev=max_nfev, ftol=1e-6, xtol=1e-6)
    theta = res.x
    problem._update(theta)
    coef = problem.coef
    r = problem.r.copy()
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
    return Fit(count=count, theta=theta, coef=coef, chi2=chi2, used=used, scale2=scale2,
               autocorr=rho, residual=r, success=bool(res.status > 0), problem=problem)
