"""Shadow edges in a brightness profile along the refractometer scale (pure 1-D analysis).

:func:`analyse_profile` takes the profile the reader measured beside the
graduations (scale value of every sample, linear-light brightness, noise) and
returns the stone edge(s), the contact liquid's edge and the kind of light, each
edge at the *onset of total reflection* with an honest uncertainty.

Method
------
1. Candidate steps: a multi-scale Haar (difference of means) step filter on a
   binned copy of the profile finds upward steps (dark below, bright above)
   that stand out of the noise.
2. Each group of nearby candidates is fitted in a window with the physical
   edge model of :mod:`critline.photo.edgemodel`: the Fresnel reflectance of the
   prism/stone interface (Fresnel equations, Born and Wolf, *Principles of
   Optics*, section 1.5), which reaches 1 at the onset ``n`` (Snell's law),
   raised to a tone exponent ``g``, with linear vignetting trends, convolved with
   a Gaussian blur ``sigma``; fitted by separable non-linear least squares
   (``scipy.optimize.least_squares``).  One, two (birefringent stone without a
   polariser) or three terms (plus the contact liquid's faint edge) are tried
   and chosen by the Bayesian information criterion (Schwarz, "Estimating the
   dimension of a model", Ann. Stat. 6, 1978).
3. The terms are named: the contact liquid's edge lies near ``liquid_ri`` (or
   in 1.775-1.815 when unknown: contact liquids commonly sit around 1.78-1.81,
   from memory) and is the top step; a profile dark up to that edge is over the
   limit; alone and faint it is the liquid line over a field with no stone
   edge; a profile with no significant, sharp upward step has no edge.
4. With ``rgb`` given, the strongest edge is fitted in each colour channel: a
   consistent displacement of the channel onsets (a coloured fringe) means
   white light.

The blur is a Gaussian with a fourth-order Gram-Charlier correction (a linear
coefficient per edge term), so that a box-like motion blur, a disc-like defocus
or the phone's sharpening overshoot is taken up without moving the onset and
without passing for a second edge (see :mod:`critline.photo.edgemodel`).

Sensitivity to the prism index: the Fresnel shoulder below the onset depends
on ``N`` only weakly.  Measured on nearly noise-free blurred edges (n = 1.45,
1.544, 1.65; sigma 0.0005-0.003), fitting with N = 1.88 a profile made with N
from 1.75 to 2.0 moves the onset by at most 1.6e-5; a profile made with the
prism / contact liquid / stone stack (the liquid film's own reflections) reads
the same within 1e-5.  Both are far inside the uncertainty floor.

Uncertainty
-----------
The covariance of the onset comes from a central-difference Jacobian of the
projected residual at the solution, scaled by the residual variance (so a wrong
``noise`` does not matter), and inflated for residual correlation along the
profile by the AR(1) factor ``sqrt((1 + rho) / (1 - rho))`` (the phone's noise
reduction and JPEG make neighbouring samples correlated).  Added in quadrature:
a floor for model mismatch, :data:`FLOOR_BLUR_FRACTION` of the blur width
(sharpening biases the onset low by up to about 0.2 sigma, measured in
``bench/edges_bench.py``) and a part of the sample spacing (more for edges
sharper than the sampling); and for clipped highlights, which hide the corner
at the onset, half the stretch hidden by the clip plus the shift of the onset
when the tone exponent is held at 1.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.ndimage import gaussian_filter1d, median_filter

from critline.photo import edgemodel as em

#: Width of the band below full scale taken as clipped (relative), see _prepare.
CLIP_BAND = 0.01
#: Fewest usable samples for any analysis.
MIN_SAMPLES = 24
#: Where contact liquids commonly sit when the instrument does not say (from memory).
LIQUID_ZONE = (1.775, 1.815)
#: How far the contact liquid's edge may sit below / above the instrument's stated
#: liquid index (temperature, evaporation of the solvent, another batch; from memory).
LIQUID_DRIFT = (0.012, 0.022)
#: A liquid step fainter than this (relative contrast) is the liquid line, not over the limit.
FAINT_LIQUID = 0.35
#: Widest blur accepted as an edge (scale units); a wider ramp is shading, not an edge.
SIGMA_MAX = 0.010
#: Smallest step accepted, relative to the bright level (stone edges / liquid edge).
MIN_CONTRAST_STONE = 0.06
MIN_CONTRAST_LIQUID = 0.02
#: How far below the liquid's zone a faint step is still taken as part of the liquid
#: line (scale units; the line's lower shoulder and a mis-scaled instrument's offset).
LIQUID_LINE_REACH = 0.010
#: A step in the liquid's zone taking more of the light than this (relative contrast)
#: is no upper edge of a stone's pair (each ray about half the bright level).
OVER_LIMIT_CONTRAST = 0.6
#: Largest relative contrast of a step taken as the blurred foot of the liquid's edge.
FOOT_CONTRAST = 0.4
#: Detection threshold of the step filter, in standard deviations of the noise.
Z_DETECT = 6.0
#: Uncertainty floor for model mismatch (blur shape, sharpening, tone curve),
#: added in quadrature: FLOOR_BLUR_FRACTION * sigma and FLOOR_SPACING_FRACTION *
#: sample spacing.  Set from the coverage measured in bench/edges_bench.py.
FLOOR_BLUR_FRACTION = 0.2
FLOOR_SPACING_FRACTION = 0.15
#: Two edge terms count as resolved only this many blur widths apart or more.
PAIR_MIN_SEPARATION = 2.5
#: BIC gain a model with one more edge term must show (Kass and Raftery, "Bayes
#: factors", JASA 90, 1995, call 10 very strong; doubled for blur-shape mismatch).
BIC_MORE_TERMS = 20.0
#: Share of the stretch hidden by clipping (see _hidden_by_clipping) added to the floor.
FLOOR_CLIPPED_FRACTION = 0.5
#: Least stretch taken as hidden when the corner of an edge is clipped (scale units).
CLIPPED_CORNER = 0.004
#: A pair fit started within this many blur widths (of the lone term) of where an earlier pair
#: fit ended is not run again.
DUPLICATE_START = 0.25
#: Blur (scale units) above which a reading is flagged 'blurred'.
BLURRED_SIGMA = 0.0025
#: Contrast below which a stone edge is flagged 'low_contrast'.
LOW_CONTRAST = 0.15


@dataclass(frozen=True)
class EdgeFit:
    """One edge found in a profile.

    Attributes
    ----------
    value : float
        Onset of total reflection on the ``values`` axis.
    uncertainty : float
        Standard uncertainty (one sigma) of ``value``.
    kind : str
        ``'stone'`` or ``'liquid'``.
    contrast : float
        Step across the edge relative to the brightness just above it, 0..1.
    width : float
        Fitted Gaussian blur sigma, in ``values`` units.
    figures : dict
        Named figures: ``half_brightness`` (where the blurred fit crosses half-way
        between its level 0.02 below the onset and its level above the edge, what a
        plain step reading would give), ``tone_exponent``, ``snr``,
        ``stat_uncertainty``, ``floor``, ``window`` ...
    """

    value: float
    uncertainty: float
    kind: str
    contrast: float
    width: float
    figures: dict = field(default_factory=dict)


@dataclass(frozen=True)
class ProfileAnalysis:
    """Edges of one profile, sorted by value, with the status and the kind of light."""

    edges: tuple[EdgeFit, ...]
    status: str  # 'ok' | 'over_limit' | 'no_edge'
    light: str  # 'monochromatic' | 'white' | 'unknown'
    flags: tuple[str, ...]
    figures: dict = field(default_factory=dict)

    @property
    def stone_edges(self) -> tuple[EdgeFit, ...]:
        return tuple(e for e in self.edges if e.kind == "stone")

    @property
    def liquid_edge(self) -> EdgeFit | None:
        return next((e for e in self.edges if e.kind == "liquid"), None)


# --------------------------------------------------------------------------- input


@dataclass(frozen=True)
class _Profile:
    values: np.ndarray
    y: np.ndarray  # brightness / scale
    noise: np.ndarray  # / scale
    weight: np.ndarray  # 1 / noise, 0 for masked outliers
    clipped: np.ndarray
    clip_level: float
    spacing: float
    scale: float
    outliers: int
    index: np.ndarray  # position of each kept sample in the caller's arrays
    exact_censoring: bool = False  # see analyse_profile's ``censored``


def _robust_sigma(x):
    x = x[np.isfinite(x)]
    if x.size == 0:
        return 0.0
    return 1.4826 * float(np.median(np.abs(x - np.median(x))))


def _prepare(values, brightness, noise, prism_index, censored=False):
    values = np.asarray(values, dtype=float).ravel()
    brightness = np.asarray(brightness, dtype=float).ravel()
    if values.shape != brightness.shape:
        raise ValueError("values and brightness must have the same length")
    noise = np.broadcast_to(np.asarray(noise, dtype=float), values.shape).astype(float)
    ok = np.isfinite(values) & np.isfinite(brightness) & (values > 0.5) & (values < prism_index)
    if np.count_nonzero(ok) < MIN_SAMPLES:
        return None
    order = np.argsort(values[ok], kind="stable")
    v = values[ok][order]
    y = brightness[ok][order]
    s = noise[ok][order]
    if not v[-1] - v[0] > 0:
        return None
    peak = float(np.max(np.abs(y)))
    scale = max(float(np.percentile(np.abs(y), 99)), 1e-6 * peak)
    if not (scale > 0 and math.isfinite(scale)):
        scale = 1.0
    wild = np.abs(y) > 1e3 * scale  # far off the profile's own range: no information
    y = np.clip(y / scale, -1e3, 1e3)
    s = s / scale
    diff_sigma = _robust_sigma(np.diff(y)) / math.sqrt(2.0)
    fallback = max(diff_sigma, 1e-4)
    s = np.where(np.isfinite(s) & (s > 0), s, fallback)
    s = np.clip(s, 1e-5, 1e3)
    # clipped highlights: several samples sitting exactly at the maximum; or, for a
    # profile on the usual 0..1 scale of a decoded photo that reaches full scale, a
    # cluster within CLIP_BAND of its top (JPEG and the median across columns blur
    # the clip level a little)
    top = float(np.max(y))
    clipped = y >= top - 1e-9 * max(abs(top), 1.0)
    raw_top = top * scale
    if 0.98 <= raw_top <= 1.05:
        clipped = y >= top * (1.0 - CLIP_BAND)
    if np.count_nonzero(clipped) < max(3, y.size // 200):
        clipped = np.zeros_like(clipped)
        clip_level = np.inf
    else:
        clip_level = float(np.min(y[clipped]))
        if censored:
            clipped = _with_corner(clipped)
    # dust: isolated departures from a running median (a median of 5 keeps any
    # monotone run, so the edge itself is never touched)
    dev = y - median_filter(y, size=5, mode="nearest")
    spread = max(_robust_sigma(dev), 1e-12)
    outlier = ((np.abs(dev) > 6.0 * np.maximum(spread, s)) & ~clipped) | wild
    weight = np.where(outlier, 0.0, 1.0 / s)
    steps = np.diff(v)
    spacing = float(np.median(steps[steps > 0])) if np.any(steps > 0) else (v[-1] - v[0]) / v.size
    return _Profile(values=v, y=y, noise=s, weight=weight, clipped=clipped,
                    clip_level=clip_level, spacing=max(spacing, 1e-9), scale=scale,
                    outliers=int(np.count_nonzero(outlier)), index=np.flatnonzero(ok)[order],
                    exact_censoring=bool(censored))


#: Samples on each side of a clipped run taken as censored too in a censored analysis: the
#: phone's demosaicing, noise reduction and JPEG, and the reader's own resampling, smooth the
#: profile after the sensor clipped it and round the clipped plateau's corner over a few samples.
CORNER_SAMPLES = 3


def _with_corner(clipped, reach=CORNER_SAMPLES):
    """The clipped mask widened by ``reach`` samples on each side of every clipped run.

    Smoothing (a kernel of non-negative weights) after the clip can only lower a
    sample, so a sample next to the clipped plateau is a lower bound of the
    unclipped profile, not a measurement of it.
    """
    out = clipped.copy()
    for k in range(1, reach + 1):
        out[k:] |= clipped[:-k]
        out[:-k] |= clipped[k:]
    return out


# ----------------------------------------------------------------- candidate steps


@dataclass(frozen=True)
class _Candidate:
    position: float
    height: float  # step height, normalised brightness units
    z: float
    width: float  # scale at which it was found, values units


def _binned(p: _Profile, bins=400):
    count = min(bins, p.values.size)
    edges = np.linspace(0, p.values.size, count + 1).astype(int)
    w2 = p.weight**2
    sw = np.add.reduceat(w2, edges[:-1])
    good = sw > 0
    vb = np.add.reduceat(p.values, edges[:-1]) / np.diff(edges)
    yb = np.add.reduceat(w2 * p.y, edges[:-1]) / np.where(good, sw, 1.0)
    nb = 1.0 / np.sqrt(np.where(good, sw, 1e-12))
    return vb[good], yb[good], nb[good]


def _candidates(p: _Profile) -> list[_Candidate]:
    vb, yb, nb = _binned(p)
    m = vb.size
    bright = float(np.percentile(yb, 95)) if m else 1.0
    bright = bright if bright > 0 else 1.0
    cy = np.concatenate([[0.0], np.cumsum(yb)])
    cn = np.concatenate([[0.0], np.cumsum(nb**2)])
    found: list[_Candidate] = []
    for half in (2, 4, 8, 16, 32):
        if 4 * half > m:
            break
        i = np.arange(half, m - half + 1)
        left = (cy[i] - cy[i - half]) / half
        right = (cy[i + half] - cy[i]) / half
        var = (cn[i] - cn[i - half] + cn[i + half] - cn[i]) / half**2
        diff = right - left
        z = diff / np.sqrt(np.maximum(var, 1e-30))
        keep = (z > Z_DETECT) & (diff > MIN_CONTRAST_LIQUID * bright)
        if not np.any(keep):
            continue
        # local maxima of the response within +-half bins
        padded = np.pad(diff, half, mode="constant", constant_values=-np.inf)
        windows = np.lib.stride_tricks.sliding_window_view(padded, 2 * half + 1)
        is_max = diff >= windows.max(axis=1)
        for j in np.flatnonzero(keep & is_max):
            k = i[j]
            pos = 0.5 * (vb[k - 1] + vb[k])
            width = 0.5 * (vb[min(k + half, m - 1)] - vb[k - half])
            found.append(_Candidate(pos, float(diff[j]), float(z[j]), float(width)))
    # merge responses of different scales to the same step: keep the strongest
    found.sort(key=lambda c: -c.z)
    merged: list[_Candidate] = []
    for c in found:
        if all(abs(c.position - o.position) > max(o.width, c.width) * 0.5 for o in merged):
            merged.append(c)
    # a stone edge needs a clear step; a fainter one is kept only where the contact
    # liquid's edge may be (the Fresnel shoulder below a strong edge gives faint
    # responses that are not edges)
    strong = max((c.height for c in merged), default=0.0)
    merged = [c for c in merged
              if c.height >= MIN_CONTRAST_STONE * max(bright, strong)
              or LIQUID_ZONE[0] - 0.02 <= c.position <= LIQUID_ZONE[1] + 0.02]
    return sorted(merged, key=lambda c: c.position)


# --------------------------------------------------------------------- model fits


def _groups(cands: list[_Candidate], gap=0.03) -> list[list[_Candidate]]:
    groups: list[list[_Candidate]] = []
    for c in cands:
        if groups and c.position - groups[-1][-1].position < gap:
            groups[-1].append(c)
        else:
            groups.append([c])
    return groups


def _sigma_hint(p: _Profile, lo, hi, height, smooth=1.5):
    """Blur guess from the steepest slope in ``[lo, hi]``: a blurred step of height H
    has a peak slope H / (sigma sqrt(2 pi)); ``smooth`` in samples."""
    sel = (p.values >= lo) & (p.values <= hi) & (p.weight > 0)
    v, y = p.values[sel], p.y[sel]
    if v.size < 5:
        return 3 * p.spacing, 0.5 * (lo + hi)
    ys = gaussian_filter1d(y, smooth, mode="nearest")
    slope = np.gradient(ys, v)
    k = int(np.argmax(slope))
    peak = float(slope[k])
    if not peak > 0:
        return 3 * p.spacing, float(v[k])
    # about half of a Fresnel edge's rise is in its sharp corner, the rest in the
    # shoulder below it (measured on blurred edges, sigma 0.0005-0.004)
    sigma = min(0.5 * height / (peak * math.sqrt(2 * math.pi)), 1.0)
    sigma = math.sqrt(max(sigma**2 - (smooth * p.spacing) ** 2, 0.0))
    return float(np.clip(sigma, 0.4 * p.spacing, SIGMA_MAX)), float(v[k])


@dataclass
class _Trial:
    fit: em.Fit
    window: em.Window
    bic: float
    valid: bool
    liquid_top: bool = False  # the top term was proposed as the contact liquid's edge
    reason: str = ""
    #: onsets of the same model refitted with the tone exponent held at 1, when
    #: clipping hides the top of an edge (their difference measures how much the
    #: reading leans on the assumed shape)
    alt_onsets: np.ndarray | None = None
    #: how far a lone term's onset may be from either edge of a pair that its blur
    #: could hide (scale units; 0 when a pair is ruled out)
    pair_spread: float = 0.0


def _bic(fit: em.Fit):
    m = max(fit.used, 1)
    return m * math.log(max(fit.chi2, 1e-300) / m) + fit.params * math.log(m)


def _linear_se(fit: em.Fit, window: em.Window):
    """Standard errors of the linear parameters with the non-linear ones held."""
    basis = em.design(window, fit.onsets, fit.sigma, fit.g)
    if window.exact_censoring and window.clipped.any():
        basis[:, 2 + fit.count :] = 0.0  # the fit's own basis there (see edgemodel._Problem)
    w = np.where(window.clipped, 0.0, window.weight)
    a = basis * w[:, None]
    cov = np.linalg.pinv(a.T @ a) * fit.scale2
    return np.sqrt(np.maximum(np.diag(cov), 0.0))


def _try(p: _Profile, window: em.Window, onsets, sigma0, s_lo, s_hi, liquid_top: bool):
    onsets = np.sort(np.asarray(onsets, float))
    count = onsets.size
    span = window.values[-1] - window.values[0]
    theta0 = np.concatenate([[onsets[0]], np.diff(onsets), [math.log(sigma0), 0.0]])
    # with the top of the edge clipped the tone exponent trades off against the
    # unseen bright level: hold it near linear light there
    g_lo, g_hi = (0.8, 1.25) if window.clipped.any() else em.G_BOUNDS
    lower = np.concatenate([[window.values[0]], np.full(count - 1, 1e-5),
                            [math.log(s_lo), math.log(g_lo)]])
    upper = np.concatenate([[window.values[-1]], np.full(count - 1, span),
                            [math.log(s_hi), math.log(g_hi)]])
    upper = np.maximum(upper, lower + 1e-9)  # degenerate windows of odd inputs
    fit = em.fit(window, count, theta0, lower, upper)
    trial = _Trial(fit, window, _bic(fit), True, liquid_top)
    amps = fit.amplitudes
    total = float(amps.sum())
    se = _linear_se(fit, window)[2 : 2 + count]
    # every term a real upward step; the BIC comparisons decide whether it is needed
    if not np.all(amps > (2 * se if count > 1 else 0.0)) or total <= 0:
        trial.valid, trial.reason = False, "step not significant"
        return trial
    for k in range(count):
        stone_like = not (liquid_top and k == count - 1)
        floor = 0.12 if stone_like and count > 1 else 0.0
        if amps[k] < floor * total:
            trial.valid, trial.reason = False, "term too faint"
    if count > 1:
        var = np.diag(fit.onset_cov())
        cov = fit.onset_cov()
        for k in range(count - 1):
            sep = fit.onsets[k + 1] - fit.onsets[k]
            vs = var[k] + var[k + 1] - 2 * cov[k, k + 1]
            # resolved: the separation is significant and the band between the
            # edges is wide enough to show (a lone edge with a non-Gaussian blur
            # can pass for two edges closer than that)
            if (not sep > 3.0 * math.sqrt(max(vs, 0.0)) or sep < 0.5 * p.spacing
                    or (not (liquid_top and k == count - 2) and sep < PAIR_MIN_SEPARATION * fit.sigma)):
                trial.valid, trial.reason = False, "edges not resolved"
    return trial


def _in_liquid_zone(x, liquid_ri, tol=0.0):
    """Where the contact liquid's edge may lie: the common range of contact liquids,
    widened to the instrument's stated liquid (its index drifts with temperature)."""
    if liquid_ri is not None:
        return liquid_ri - LIQUID_DRIFT[0] - tol <= x <= liquid_ri + LIQUID_DRIFT[1] + tol
    return LIQUID_ZONE[0] - tol <= x <= LIQUID_ZONE[1] + tol


def _slope_peaks(p: _Profile, lo, hi, count=3):
    """Strongest local maxima of the smoothed slope in ``[lo, hi]`` (sharp corners of edges)."""
    sel = (p.values >= lo) & (p.values <= hi) & (p.weight > 0)
    v, y = p.values[sel], p.y[sel]
    if v.size < 7:
        return []
    slope = np.gradient(gaussian_filter1d(y, 1.5, mode="nearest"), v)
    inner = (slope[1:-1] > slope[:-2]) & (slope[1:-1] >= slope[2:]) & (slope[1:-1] > 0)
    idx = np.flatnonzero(inner) + 1
    if idx.size == 0:
        return []
    noise = _robust_sigma(np.diff(slope)) + 1e-12
    idx = idx[slope[idx] > 6 * noise]
    idx = idx[np.argsort(-slope[idx])][:count]
    return [(float(v[i]), float(slope[i])) for i in idx]


def _structured(trial: _Trial, lo, hi, threshold=3.5):
    """Do the residuals near the edge run in long same-signed stretches?

    Sums of the normalised residuals over runs about one blur width long; a lone
    edge term that fits leaves them at the noise level, a second edge hiding in
    the first one's slope does not.
    """
    fit, window = trial.fit, trial.window
    sel = (window.values >= lo) & (window.values <= hi) & (window.weight > 0)
    r = fit.residual[sel] / math.sqrt(fit.scale2)
    if r.size < 4:
        return False
    k = int(np.clip(round(fit.sigma / window.spacing), 2, max(r.size // 2, 2)))
    sums = np.convolve(r, np.ones(k), mode="valid") / math.sqrt(k)
    return bool(np.max(np.abs(sums)) > threshold)


def _fit_group(p: _Profile, group, lo_limit, hi_limit, liquid_ri, prism_index):
    """Fit 1..3 edge terms to one group of candidate steps; returns (trial, flags)."""
    first, last = group[0].position, group[-1].position
    strongest = max(group, key=lambda c: c.z)
    # a faint step needs more smoothing before its slope stands out of the noise
    smooth = 1.5 if strongest.z > 100 else max(1.5, 0.25 * strongest.width / p.spacing)
    s_hint, peak = _sigma_hint(p, max(first - 0.015, lo_limit), min(last + 0.015, hi_limit),
                               strongest.height, smooth)
    if smooth > 1.5:
        s_hint = max(s_hint, 0.5 * smooth * p.spacing)
    last = max(last + 0.5 * group[-1].width, peak)
    flags: list[str] = []
    trial = None
    best_first = None
    for _attempt in range(3):
        top = max(last, peak + 2 * s_hint)
        lo = max(min(first, peak) - max(0.03, 12 * s_hint), lo_limit, p.values[0])
        hi = min(top + max(0.012, 8 * s_hint), hi_limit, p.values[-1])
        s_lo = max(s_hint / 3.0, 0.3 * p.spacing)
        s_hi = min(max(s_hint * 3.0, s_lo * 1.5), 1.5 * SIGMA_MAX)
        if s_lo >= s_hi:
            return None, flags  # samples far too coarse for an edge of this kind
        window = em.make_window(p.values, p.y, p.weight, p.clipped, p.clip_level, lo, hi,
                                s_lo, s_hi, prism_index, p.exact_censoring)
        if window.values.size < 12:
            return None, flags
        n0 = min(max(peak + 0.5 * s_hint, window.values[1]), window.values[-2])
        trial = _try(p, window, [n0], s_hint, s_lo, s_hi, False)
        if best_first is not None and best_first.valid and (
                not trial.valid or trial.fit.chi2 / trial.fit.used
                > best_first.fit.chi2 / best_first.fit.used):
            trial = best_first  # a wider blur range did not fit better: keep the first
            window = trial.window
            break
        best_first = trial
        sig = trial.fit.sigma
        high = sig > 0.97 * s_hi and s_hi < 1.5 * SIGMA_MAX
        low = sig < 1.03 * s_lo and s_lo > 0.3 * p.spacing * 1.01
        if not (high or low):
            break
        s_hint = float(np.clip(sig * (2.0 if high else 0.5), 0.4 * p.spacing, SIGMA_MAX))
        peak = float(trial.fit.onsets[0]) - 0.5 * s_hint
    if trial.fit.sigma < p.spacing:
        # An edge sharper than the sampling: the fit surface is bumpy in the onset
        # (it may sit anywhere between two samples), so start again from a blur of
        # one sample and the onset half a sample either side; keep the best.
        n_fit = float(trial.fit.onsets[0])
        for shift in (-0.5, 0.5):
            n0 = min(max(n_fit + shift * p.spacing, window.values[1]), window.values[-2])
            alt = _try(p, window, [n0], min(max(p.spacing, s_lo * 1.01), s_hi * 0.99),
                       s_lo, s_hi, False)
            if alt.valid and alt.fit.chi2 < trial.fit.chi2:
                trial = alt
    one = trial
    # the plainer explanation: smooth shading only (quadratic trend)
    tau = window.tau
    w = np.where(window.clipped, 0.0, window.weight)
    basis0 = np.stack([np.ones_like(tau), tau, tau * tau], axis=1)
    coef0 = np.linalg.lstsq(basis0 * w[:, None], window.brightness * w, rcond=None)[0]
    r0 = (window.brightness - basis0 @ coef0) * w
    m = max(one.fit.used, 1)
    bic0 = m * math.log(max(float(r0 @ r0), 1e-300) / m) + 3 * math.log(m)
    if not one.valid:
        return None, flags
    n1, s1 = float(one.fit.onsets[0]), one.fit.sigma
    proposals: list[tuple[list[float], bool]] = []
    stone_cands = [c.position for c in group if not _in_liquid_zone(c.position, liquid_ri, 0.004)]
    if len(stone_cands) >= 2 and stone_cands[-1] - stone_cands[0] > 3 * s1:
        # two steps found apart in the same window (a birefringent stone's pair)
        proposals.append(([stone_cands[0] + 0.5 * s1, stone_cands[-1] + 0.5 * s1], False))
    if s1 > BLURRED_SIGMA or _structured(one, n1 - 8 * s1 - 0.002, window.values[-1]):
        # a pair fitted as one edge: one onset between the two and a blur that
        # spans both; split it symmetrically, or start from two slope peaks
        proposals.append(([n1 - s1, n1 + s1], False))
        peaks = _slope_peaks(p, n1 - 4 * s1, n1 + 3 * s1, count=4)
        kept: list[float] = []
        for x, _ in peaks:
            if all(abs(x - k) > max(0.8 * s1, 3 * p.spacing) for k in kept):
                kept.append(x)
        if len(kept) >= 2:
            a, b = sorted(kept[:2])
            proposals.append(([a + 0.25 * s1, b + 0.25 * s1], False))
        proposals.append(([n1 - 0.6 * s1, n1 + 0.6 * s1], False))
        # or a second, separate step elsewhere in the window that the lone term left out
        for x, _ in _slope_peaks(p, window.values[0], window.values[-1], count=3):
            if abs(x - n1) > max(3 * s1, 0.002):
                proposals.append((sorted([n1, x + 0.5 * s1]), False))
                break
    liquid_cands = [c.position for c in group
                    if c.position > n1 + 3 * s1 and _in_liquid_zone(c.position, liquid_ri, 0.004)]
    if liquid_cands:
        proposals.append(([n1, liquid_cands[-1] + s1], True))
    best = one
    overlap = False
    # a pair merged into one term makes that term's blur too wide: let the pair be
    # sharper than it (same samples, so the criteria compare)
    s_lo2 = max(s1 / 6.0, 0.3 * p.spacing)
    s_hi2 = max(1.5 * s1, 1.5 * s_lo2)
    window2 = window
    if proposals:
        window2 = em.make_window(p.values, p.y, p.weight, p.clipped, p.clip_level,
                                 window.values[0], window.values[-1], s_lo2, s_hi2, prism_index, p.exact_censoring)
    ended: list[np.ndarray] = []  # where the pair fits tried so far ended
    for onsets, liquid_top in proposals:
        onsets = [min(max(x, window.values[1]), window.values[-2]) for x in onsets]
        if onsets[1] - onsets[0] < 1e-5:
            continue
        if not liquid_top and any(np.max(np.abs(np.sort(onsets) - e)) < DUPLICATE_START * s1 for e in ended):
            # a start where an earlier pair fit of the same samples ended: that fit's verdict stands
            # (the search from there ends at the same place; measured on the 12 MP speed photos)
            continue
        start = s1 if liquid_top else max(0.5 * s1, 1.05 * s_lo2)
        t = _try(p, window2, onsets, start, s_lo2, s_hi2, liquid_top)
        if not liquid_top:
            ended.append(np.asarray(t.fit.onsets))
        if t.valid and t.bic < best.bic - BIC_MORE_TERMS:
            best = t
            if not liquid_top:
                break  # one good pair is enough; the alternative start finds the same
        elif not t.valid and t.reason == "edges not resolved" and t.bic < one.bic - BIC_MORE_TERMS:
            overlap = True
    if best.fit.count == 2 and not best.liquid_top and liquid_cands:
        onsets = list(best.fit.onsets) + [liquid_cands[-1] + s1]
        if onsets[2] - onsets[1] > 2 * s1:
            t = _try(p, window2, onsets, best.fit.sigma, s_lo2, s_hi2, True)
            if t.valid and t.bic < best.bic - BIC_MORE_TERMS:
                best = t
    if bic0 - best.bic < 25.0:
        return None, flags  # smooth shading explains the window as well
    if overlap and best.fit.count == 1:
        flags.append("edges_overlap")
    if best.fit.count == 1 and s1 > BLURRED_SIGMA:
        # A lone blurred term may be two edges closer than the blur: two steps d apart
        # blurred by s look like one of width about sqrt(s**2 + d**2 / 4), so its onset
        # may miss either edge by up to d / 2 <= the fitted width.  The uncertainty
        # covers both readings rather than trusting the single-edge one.
        best.pair_spread = s1
    if best.window.clipped.any():
        fit = best.fit
        lower = np.concatenate([[best.window.values[0]], np.full(fit.count - 1, 1e-5),
                                [math.log(s_lo2 if fit.count > 1 else s_lo), -1e-9]])
        upper = np.concatenate([[best.window.values[-1]], np.full(fit.count - 1, 1.0),
                                [math.log(s_hi2 if fit.count > 1 else s_hi), 1e-9]])
        theta0 = np.concatenate([fit.theta[: fit.count], [math.log(fit.sigma), 0.0]])
        alt = em.fit(best.window, fit.count, theta0, lower, upper)
        best.alt_onsets = alt.onsets
    return best, flags


# ------------------------------------------------------------------ edges from fits


@dataclass(frozen=True)
class _Term:
    value: float
    stat: float  # statistical uncertainty, inflated for correlated residuals
    uncertainty: float
    contrast: float
    width: float
    figures: dict
    window: tuple[float, float]
    clipped: bool  # the edge's corner (the onset) lies in clipped highlights


def _levels_at_onset(fit: em.Fit, window: em.Window, k: int):
    """Unblurred model at onset ``k`` with term ``k`` totally reflecting and with it dark.

    Terms below ``k`` are bright there, terms above ``k`` at their Fresnel value.
    """
    at = float(fit.onsets[k])
    tau = (at - window.centre) / window.half_span
    base = fit.coef[0] + fit.coef[1] * tau
    e = np.array([1.0 if j <= k else float(em.reflectance(np.array(at), fit.onsets[j],
                                                            window.prism_index) ** fit.g)
                  for j in range(fit.count)])
    q = fit.trend * tau
    above = base + float(fit.amplitudes @ e) + q * float(e.sum())
    below = above - (fit.amplitudes[k] + q)
    return above, below


def _half_brightness(fit: em.Fit, window: em.Window, k: int):
    """Where the blurred fit crosses half-way between its level 0.02 below onset k and above it."""
    n, sigma = fit.onsets[k], fit.sigma
    top = n + 4 * sigma
    if k + 1 < fit.count:
        top = min(top, 0.5 * (n + fit.onsets[k + 1]))
    bottom = max(n - 0.02, window.values[0])
    if k > 0:
        bottom = max(bottom, 0.5 * (n + fit.onsets[k - 1]))
    xs = np.linspace(bottom, top, 400)
    curve = fit.curve(window, xs)
    mid = 0.5 * (curve[0] + curve[-1])
    below = np.flatnonzero(curve < mid)
    if below.size == 0 or below[-1] + 1 >= xs.size:
        return float("nan")
    i = below[-1]
    c0, c1 = curve[i], curve[i + 1]
    frac = (mid - c0) / (c1 - c0) if c1 != c0 else 0.5
    return float(xs[i] + frac * (xs[i + 1] - xs[i]))


def _hidden_by_clipping(fit: em.Fit, window: em.Window, k: int) -> float:
    """How far below onset ``k`` the fitted curve already reaches the clip level.

    With the bright side clipped the sharp corner at the onset is not seen; the
    onset is then an extrapolation of the rising part over this distance.
    """
    n = float(fit.onsets[k])
    xs = np.linspace(max(n - 0.03, window.values[0]), n, 300)
    curve = fit.curve(window, xs)
    reach = np.flatnonzero(curve >= window.clip_level)
    return float(n - xs[reach[0]]) if reach.size else 0.0


def _terms(trial: _Trial, p: _Profile) -> list[_Term]:
    fit, window = trial.fit, trial.window
    rho = min(max(fit.autocorr, 0.0), 0.9)
    inflation = (1 + rho) / (1 - rho)
    cov = fit.onset_cov()
    se = _linear_se(fit, window)[2 : 2 + fit.count]
    clipped_near = bool(np.any(window.clipped))
    out = []
    for k in range(fit.count):
        n = float(fit.onsets[k])
        stat = math.sqrt(max(cov[k, k], 0.0) * inflation)
        # an edge sharper than the sampling leaves the onset loose by a part of a sample
        sampling = FLOOR_SPACING_FRACTION * p.spacing * min(p.spacing / fit.sigma, 2.0)
        floor = math.hypot(FLOOR_BLUR_FRACTION * fit.sigma, sampling)
        hidden = _hidden_by_clipping(fit, window, k) if clipped_near else 0.0
        near = np.abs(window.values - n) <= 3 * fit.sigma + window.spacing
        corner_clipped = bool(np.any(window.clipped & near))
        if corner_clipped:
            # the corner itself is clipped: how far the brightness would have gone on
            # rising above the clip is not seen, so the onset may sit higher by up to
            # a few thousandths (over-exposure by 1.5-2x hides R from 0.5-0.7 to 1,
            # 0.003-0.008 of the Fresnel shoulder)
            hidden = max(hidden, CLIPPED_CORNER)
        floor = math.hypot(floor, FLOOR_CLIPPED_FRACTION * hidden)
        if trial.alt_onsets is not None:
            floor = math.hypot(floor, float(trial.alt_onsets[k]) - n)
        floor = math.hypot(floor, trial.pair_spread)
        above, below = _levels_at_onset(fit, window, k)
        contrast = float(np.clip((above - below) / above, 0.0, 1.0)) if above > 0 else 0.0
        figures = {
            "half_brightness": _half_brightness(fit, window, k),
            "tone_exponent": fit.g,
            "snr": float(fit.amplitudes[k] / se[k]) if se[k] > 0 else float("inf"),
            "stat_uncertainty": stat,
            "floor": floor,
            "hidden_by_clipping": hidden,
            "residual_scale": math.sqrt(fit.scale2),
            "residual_autocorrelation": fit.autocorr,
            "terms_in_fit": fit.count,
            "samples": int(window.values.size),
            "window": [float(window.values[0]), float(window.values[-1])],
        }
        out.append(_Term(n, stat, math.hypot(stat, floor), contrast, fit.sigma, figures,
                         (float(window.values[0]), float(window.values[-1])), corner_clipped))
    return out


def _classify(terms: list[_Term], liquid_ri):
    """Name each term stone or liquid; returns (edges, status, flags).

    The top step is the contact liquid's edge when it lies where the liquid may
    be and is either faint next to a stone edge below it (the liquid line) or the
    only step.  Alone and strong (dark all the way up to it) it means over the
    limit; alone and faint it is the liquid line on a field with no stone edge.

    A step fainter than any stone edge (contrast below ``MIN_CONTRAST_STONE``) at
    or just below where the liquid may be is part of the liquid line: without a
    polariser each ray of a stone takes about half the bright level, so a stone
    edge is a large step, while the liquid line is faint and often shows as two
    close steps (its film's own reflections).  Unless a stronger step already is
    the liquid's edge (over the limit), the strongest such step is taken as the
    liquid's edge; the others are dropped.
    """
    flags: list[str] = []
    terms = sorted(terms, key=lambda t: t.value)
    line_parts = [t for t in terms if t.contrast < MIN_CONTRAST_STONE
                  and _in_liquid_zone(t.value, liquid_ri, LIQUID_LINE_REACH + 3 * t.uncertainty)]
    # the fit may leave a term far fainter than any step a candidate needed to be (a wiggle on
    # the bright side): below the smallest accepted step it is no edge
    terms = [t for t in terms if not any(t is q for q in line_parts) and t.contrast >= MIN_CONTRAST_STONE]
    liquid = None
    if terms:
        top = terms[-1]
        near = _in_liquid_zone(top.value, liquid_ri, 3 * top.uncertainty)
        # a strong step where the liquid is, with only steps close below it: the
        # upper edge of a stone's pair seen without polariser takes at most about
        # half of the light (each ray about half the bright level), so a step of more
        # than OVER_LIMIT_CONTRAST is the liquid's edge over a dark field (over the
        # limit) and the steps just below are its blurred foot (a stone's lower edge
        # rises from the dark field, so its relative contrast is large)
        foot = all(top.value - t.value <= LIQUID_LINE_REACH + 3 * top.width
                   and t.contrast < FOOT_CONTRAST for t in terms[:-1])
        if near and (len(terms) == 1 or top.contrast < FAINT_LIQUID
                     or (top.contrast >= OVER_LIMIT_CONTRAST and foot)):
            liquid = top
            terms = terms[:-1] if top.contrast < FAINT_LIQUID else []
    if liquid is not None and liquid.contrast < FAINT_LIQUID:
        # steps beside a faint liquid line, in the liquid's zone and no stronger than twice it,
        # are more parts of the line (its film's reflections), not a stone's edge
        beside = [t for t in terms if t.contrast < min(FAINT_LIQUID, 2 * liquid.contrast)
                  and _in_liquid_zone(t.value, liquid_ri, LIQUID_LINE_REACH + 3 * t.uncertainty)]
        terms = [t for t in terms if not any(t is q for q in beside)]
    if liquid is None and line_parts:
        liquid = max(line_parts, key=lambda t: t.contrast)
    if liquid is not None and liquid_ri is None:
        flags.append("liquid_assumed")
    if len(terms) > 2:
        flags.append("extra_steps")
        keep = sorted(terms, key=lambda t: -t.contrast)[:2]
        terms = sorted(keep, key=lambda t: t.value)
    edges = [_edge(t, "stone") for t in terms]
    if liquid is not None:
        edges.append(_edge(liquid, "liquid"))
    if terms:
        status = "ok"
    elif liquid is not None and liquid.contrast >= FAINT_LIQUID:
        status = "over_limit"
    else:
        status = "no_edge"
    return edges, status, flags


def _finite_figures(figures: dict) -> dict:
    """Figures with every non-finite number replaced by None (JSON-safe, no NaN)."""
    out = {}
    for key, val in figures.items():
        if isinstance(val, dict):
            out[key] = _finite_figures(val)
        elif isinstance(val, float | np.floating):
            out[key] = float(val) if math.isfinite(val) else None
        else:
            out[key] = val
    return out


def _edge(t: _Term, kind: str) -> EdgeFit:
    return EdgeFit(value=t.value, uncertainty=t.uncertainty, kind=kind, contrast=t.contrast,
                   width=t.width, figures=_finite_figures(t.figures))


# ------------------------------------------------------------------ kind of light

#: Linear level (full scale 1) from which a channel's bright field is taken as clipped: the sRGB
#: codes 251-255 of 255 decode to 0.965 and above.  Over-exposure clips the channels one by one
#: (in sodium light red first) and leaves a clipped channel's onset low, a false coloured fringe.
CHANNEL_FULL_SCALE = 0.96
#: Rec. 709 luma weights of linear red, green, blue (ITU-R BT.709), as the reader's profile uses.
LUMA_WEIGHTS = np.array([0.2126, 0.7152, 0.0722])
#: Channel order of ``rgb``; wavelength falls from red to blue.
CHANNELS = ("red", "green", "blue")
#: Smallest channel displacement taken as a coloured fringe (scale units).  The
#: dispersion of a dense-glass prism (Abbe number about 20-30, from memory) shifts
#: the red and blue channel edges of a white-light fringe by several thousandths.
FRINGE_MIN = 0.0008


def _channel_onsets(p: _Profile, rgb, window: tuple[float, float], sigma, prism_index):
    """Onset of one edge term fitted separately in each colour channel (same window)."""
    out = {}
    for name, channel in zip(CHANNELS, rgb, strict=True):
        y = np.asarray(channel, float)[p.index]
        if not np.all(np.isfinite(y)):
            continue
        if np.percentile(y, 99.8) >= CHANNEL_FULL_SCALE:
            continue  # clipped by the sensor or the encoder: its onset sits low, it cannot tell
        scale = float(np.percentile(np.abs(y), 99)) or 1.0
        y = y / scale
        noise = max(_robust_sigma(np.diff(y)) / math.sqrt(2.0), 1e-5)
        weight = np.where(p.weight > 0, 1.0 / noise, 0.0)
        top = float(np.max(y))
        clipped = y >= top - 1e-9 * max(abs(top), 1.0)
        if np.count_nonzero(clipped) < max(3, y.size // 200):
            clipped = np.zeros_like(clipped)
            clip_level = np.inf
        else:
            clip_level = top
        cp = _Profile(values=p.values, y=y, noise=np.full_like(y, noise), weight=weight,
                      clipped=clipped, clip_level=clip_level, spacing=p.spacing, scale=scale,
                      outliers=0, index=p.index)
        lo, hi = window
        s_lo = max(sigma / 3.0, 0.3 * p.spacing)
        s_hi = min(sigma * 4.0, 1.5 * SIGMA_MAX)
        win = em.make_window(cp.values, cp.y, cp.weight, cp.clipped, cp.clip_level, lo, hi,
                             s_lo, s_hi, prism_index)
        if win.values.size < 12:
            continue
        s_hint, peak = _sigma_hint(cp, lo, hi, 0.5)
        n0 = min(max(peak + 0.5 * sigma, win.values[1]), win.values[-2])
        trial = _try(cp, win, [n0], min(max(sigma, s_lo * 1.01), s_hi * 0.99), s_lo, s_hi, False)
        if not trial.valid:
            continue
        term = _terms(trial, cp)[0]
        if term.figures["snr"] < 8 or term.contrast < 0.1 or term.clipped:
            continue  # too faint, or its corner clipped: the channel cannot tell
        out[name] = term
    return out


def _light(channels: dict):
    """'white' for a consistent coloured fringe, 'monochromatic' for coinciding channel edges."""
    names = [c for c in CHANNELS if c in channels]
    if len(names) < 2:
        return "unknown", {}
    shifts = []
    for a, b in zip(names[:-1], names[1:], strict=True):
        ta, tb = channels[a], channels[b]
        d = ta.value - tb.value
        u = 1.5 * math.hypot(ta.stat, tb.stat)
        shifts.append((d, u))
    figures = {f"shift_{a}_{b}": d for (a, b), (d, _u) in
               zip(zip(names[:-1], names[1:], strict=True), shifts, strict=True)}
    significant = [d for d, u in shifts if abs(d) > max(4 * u, FRINGE_MIN)]
    if significant and (all(d > 0 for d in significant) or all(d < 0 for d in significant)):
        return "white", figures
    if all(abs(d) < max(3 * u, FRINGE_MIN) for d, u in shifts):
        return "monochromatic", figures
    return "unknown", figures


#: Largest RMS residual (in units of the channel's own sample noise) of a channel fitted as a
#: multiple of the luminance across an edge's window, for the channels to count as moving together.
PROPORTIONAL_RESIDUAL = 1.3


def _channels_proportional(p: _Profile, rgb, window) -> bool:
    """True when every colour channel is, within its noise, a constant multiple of the luminance
    across ``window`` (plus an offset for stray light).

    In monochromatic light the channels see one spectrum, so they are proportional; a coloured
    fringe displaces the channel edges and leaves a residual of about slope x displacement.  A
    clipped channel is not proportional and fails the test.  The noise of each channel comes
    from its sample-to-sample differences (robust); correlated noise makes the test fail, never
    pass, so the full channel fits decide then.
    """
    lo, hi = window
    sel = (p.values >= lo) & (p.values <= hi) & (p.weight > 0)
    if np.count_nonzero(sel) < 20:
        return False
    chans = np.asarray(rgb, float)[:, p.index[sel]]
    if not np.all(np.isfinite(chans)):
        return False
    lum = LUMA_WEIGHTS @ chans
    basis = np.stack([lum, np.ones_like(lum)], axis=1)
    for y in chans:
        noise = _robust_sigma(np.diff(y)) / math.sqrt(2.0)
        if not noise > 0:
            return False
        coef = np.linalg.lstsq(basis, y, rcond=None)[0]
        resid = y - basis @ coef
        if math.sqrt(float(np.mean(resid ** 2))) > PROPORTIONAL_RESIDUAL * noise:
            return False
    return True


def _channel_clipping(edges, values, rgb):
    """Stone edges whose bright side is clipped in a colour channel, given the clipped corner's allowance.

    The luminance mixes the channels after the phone's white balance, so a channel clipped at
    the sensor leaves no flat top in it that :func:`_prepare` could see, yet the luminance's
    rise is cut short there and its onset sits low (over-exposed sodium photos with red and
    green clipped read low by 0.002-0.003 on tuning seeds).  Such an edge gets
    :data:`CLIPPED_CORNER` as its hidden stretch, as a clipped corner in the luminance does.
    Returns the edges and whether any was clipped.
    """
    rgb = np.asarray(rgb, dtype=float)
    values = np.asarray(values, dtype=float)
    if rgb.ndim != 2 or rgb.shape[0] != 3 or rgb.shape[1] != values.size:
        return edges, False
    out, found = [], False
    for e in edges:
        # the corner itself: the stretch just above the onset, at full scale in a channel
        reach = max(2 * e.width, 0.004)
        above = (values > e.value) & (values <= e.value + reach)
        if e.kind != "stone" or np.count_nonzero(above) < 3:
            out.append(e)
            continue
        levels = np.array([np.nanmedian(ch[above]) for ch in rgb])
        share = LUMA_WEIGHTS * np.nan_to_num(levels)
        # a clipped channel that carries little of the luminance (red in sodium light, mostly)
        # hardly moves its onset; one that carries half of it or more does
        if share[levels >= CHANNEL_FULL_SCALE].sum() < 0.5 * max(share.sum(), 1e-12):
            out.append(e)
            continue
        found = True
        hidden = max(float(e.figures.get("hidden_by_clipping") or 0.0), CLIPPED_CORNER)
        floor = math.hypot(float(e.figures.get("floor") or 0.0), FLOOR_CLIPPED_FRACTION * hidden)
        stat = float(e.figures.get("stat_uncertainty") or e.uncertainty)
        figures = dict(e.figures, hidden_by_clipping=hidden, floor=floor, channel_clipped=True)
        out.append(EdgeFit(value=e.value, uncertainty=max(e.uncertainty, math.hypot(stat, floor)), kind=e.kind,
                           contrast=e.contrast, width=e.width, figures=_finite_figures(figures)))
    return out, found


def _fringe_verdict(same_edge: dict) -> str:
    """:func:`critline.photo.whitelight.fringe_light` on the channels that can tell.

    A clipped channel's onset sits low, so clipped channels ordered below unclipped ones look
    like a fringe in monochromatic light: the order is judged on two or more unclipped
    channels; with fewer, only an unclipped blue edge below both clipped ones (the opposite
    of what clipping does) is taken as a fringe.
    """
    from critline.photo import whitelight

    unclipped = {c: v for c, v in same_edge.items() if not v[0].figures.get("channel_clipped")}
    if len(unclipped) >= 2:
        return whitelight.fringe_light(unclipped)
    clipped = [v[0].value for c, v in same_edge.items() if c not in unclipped]
    if "blue" in unclipped and len(clipped) == 2 and unclipped["blue"][0].value < min(clipped):
        return whitelight.fringe_light(same_edge)
    return "unknown"


def white_light_value(edge: EdgeFit, channels: dict) -> EdgeFit:
    """The reading of an edge seen in white light, before a dispersion model exists.

    For now the onset fitted on the luminance profile is kept and its uncertainty
    widened by half the spread of the channel onsets, since the 589.3 nm edge lies
    somewhere inside the coloured fringe.  This is the place where the white-light
    reading from the channel edges and a dispersion model of stone and prism
    (Cauchy or Sellmeier form) will go.
    """
    values = [t.value for t in channels.values()]
    spread = (max(values) - min(values)) if len(values) >= 2 else 4 * edge.uncertainty
    figures = dict(edge.figures)
    figures["channel_onsets"] = {k: t.value for k, t in channels.items()}
    figures["fringe_spread"] = spread
    return EdgeFit(value=edge.value, uncertainty=math.hypot(edge.uncertainty, 0.5 * spread),
                   kind=edge.kind, contrast=edge.contrast, width=edge.width, figures=figures)


# ----------------------------------------------------------------------- public


def analyse_profile(values, brightness, noise, *, liquid_ri=None, prism_index=1.88, rgb=None, glass=None,
                    censored=False):
    """Find the shadow edges of a brightness profile along the scale.

    Parameters
    ----------
    values : array_like
        Nominal scale value (RI axis) of each sample; unevenly spaced is fine.
    brightness : array_like
        Linear-light brightness of each sample (dark side = low values).
    noise : float or array_like
        Standard deviation of each brightness sample; only its relative size
        matters much, the fit rescales it by the residuals.  Non-positive or
        non-finite values are replaced by an estimate from the profile.
    liquid_ri : float, optional
        Index of the contact liquid, if known.
    prism_index : float
        Index ``N`` of the prism at 589.3 nm.
    rgb : array_like, optional
        ``(3, len(values))`` linear red, green, blue profiles, for telling white
        light from monochromatic light.
    glass : object with ``index(wavelength_nm)``, optional
        The prism glass's dispersion formula for the white-light reading
        (:func:`critline.photo.whitelight.prism_glass`); the default glass if None.
    censored : bool
        Fit clipped samples, and the few beside each clipped run (the rounded
        corner), as lower bounds solved exactly (:func:`critline.photo.edgemodel.censored_solve`);
        used for the white-light channel profiles.  Off, clipped samples count at
        the clip level while the model falls below it (the monochromatic reading).

    Returns
    -------
    ProfileAnalysis
        Edges sorted by value; status ``'ok'`` (stone edges found),
        ``'over_limit'`` (only the liquid's edge, dark below it) or ``'no_edge'``.

    Notes
    -----
    See the module docstring for the model, the fit and the uncertainty.
    """
    prism_index = float(prism_index)
    p = _prepare(values, brightness, noise, prism_index, censored)
    if p is None:
        return ProfileAnalysis((), "no_edge", "unknown", ("unusable_profile",), {"samples": 0})
    cands = _candidates(p)
    groups = _groups(cands)
    terms: list[_Term] = []
    flags: set[str] = set()
    for i, group in enumerate(groups):
        lo_limit = -np.inf
        hi_limit = np.inf
        if i > 0:
            prev = groups[i - 1][-1].position
            lo_limit = prev + 0.4 * (group[0].position - prev)
        if i + 1 < len(groups):
            nxt = groups[i + 1][0].position
            hi_limit = nxt - 0.4 * (nxt - group[-1].position)
            if max(c.height for c in groups[i + 1]) < 0.3 * max(c.height for c in group):
                # a faint step above (the liquid line) may sit near the window's top;
                # the bright side of this edge matters more
                hi_limit = max(hi_limit, nxt - 0.006)
        trial, group_flags = _fit_group(p, group, lo_limit, hi_limit, liquid_ri, prism_index)
        flags.update(group_flags)
        if trial is None:
            continue
        for t in _terms(trial, p):
            # the dark side must be seen below an edge and the bright side above it,
            # else a field boundary or the profile's end passes for one
            if t.value - p.values[0] < max(0.008, 5 * t.width) or \
                    p.values[-1] - t.value < max(0.002, 2 * t.width):
                flags.add("edge_at_profile_end")
                continue
            if t.width <= SIGMA_MAX:
                terms.append(t)
    edges, status, class_flags = _classify(terms, liquid_ri)
    flags.update(class_flags)
    stones = [e for e in edges if e.kind == "stone"]
    for t in terms:
        if t.clipped and any(e.value == t.value for e in edges):
            flags.add("clipped")
    if any(e.width > BLURRED_SIGMA for e in stones):
        flags.add("blurred")
    if any(e.contrast < LOW_CONTRAST for e in stones):
        flags.add("low_contrast")
    if rgb is not None and edges:
        edges, channel_clipped = _channel_clipping(edges, values, rgb)
        if channel_clipped:
            flags.add("channel_clipped")
    light = "unknown"
    figures = {"samples": int(p.values.size), "candidates": len(cands),
               "outliers_masked": p.outliers, "clipped_samples": int(np.count_nonzero(p.clipped)),
               "spacing": p.spacing}
    if rgb is not None and edges:
        rgb = np.asarray(rgb, dtype=float)
        if rgb.ndim == 2 and rgb.shape[0] == 3 and rgb.shape[1] == np.asarray(values).size:
            main = max(edges, key=lambda e: e.contrast)
            lo, hi = main.figures["window"]
            # a narrower window than the luminance fit's: only the channels' onsets
            # are compared (a coloured fringe spans up to about 0.02)
            window = (max(lo, main.value - max(0.02, 10 * main.width)),
                      min(hi, main.value + max(0.012, 6 * main.width)))
            if _channels_proportional(p, rgb, window):
                # the channels move together across the edge: no fringe, and no channel fits
                channels, light, light_figures = {}, "monochromatic", {"channels_proportional": True}
            else:
                channels = _channel_onsets(p, rgb, window, main.width, prism_index)
                light, light_figures = _light(channels)
            figures.update(light_figures)
            figures["channel_onsets"] = {k: t.value for k, t in channels.items()}
            per_channel = None
            from critline.photo import whitelight  # late: builds on this module

            shift = max((abs(v) for k, v in light_figures.items() if k.startswith("shift_")), default=0.0)
            if light in ("white", "unknown") or shift > whitelight.FRINGE_MIN:
                # the white-light reading; its channel edges may show a fringe the coarse check missed
                per_channel = whitelight.channel_edges(values, rgb, liquid_ri=liquid_ri, prism_index=prism_index)
                # the fringe is judged on the same edge in every channel: a channel that shows
                # only another edge (a faint blue channel in sodium light seeing just the upper
                # edge of a pair) says nothing about this one
                reach = max(0.02, 10 * main.width)
                same_edge = {c: [min(v, key=lambda e: abs(e.value - main.value))] for c, v in per_channel.items()
                             if v and min(abs(e.value - main.value) for e in v) <= reach}
                light = "white" if "white" in (light, _fringe_verdict(same_edge)) else light
                if light == "unknown":
                    # red and green clipped, blue not: their censored onsets against blue's own edge
                    light = whitelight.clipped_fringe(per_channel, stones, main.value, reach)
            if light == "white":
                flags.add("white_light")
                edges = whitelight.reread_edges(edges, values, rgb, liquid_ri=liquid_ri,
                                                prism_index=prism_index, per_channel=per_channel, glass=glass)
                if any(e.figures.get("channels_clipped") for e in edges):
                    # a clipped channel (its onset low by up to the hidden corner) took part in the reading
                    flags.add("channel_clipped")
            elif light == "unknown" and per_channel is not None:
                # the light could not be told: unclipped channels give the 589.3 nm reading in either light
                edges = whitelight.reread_unknown_light(edges, values, rgb, per_channel=per_channel, glass=glass)
                if any(e.figures.get("channels_clipped") for e in edges):
                    flags.add("channel_clipped")  # read from channels clipped at full scale
    edges = sorted(edges, key=lambda e: e.value)
    return ProfileAnalysis(tuple(edges), status, light, tuple(sorted(flags)),
                           _finite_figures(figures))
