"""White light: the edge at 589.3 nm from the coloured fringe of the three camera channels.

Why the channels disagree (Snell's law)
---------------------------------------
A ray meets the prism table at internal angle ``theta``.  The printed scale is
graduated for the sodium D line: the graduation with value ``s`` sits where
``N_D sin(theta) = s`` (``N_D`` = prism index at 589.3 nm).  At another
wavelength ``lambda`` total reflection at the stone begins where
``N(lambda) sin(theta) = n(lambda)`` (Snell's law, ``n`` the stone's index), so
the edge of that wavelength lies at the scale value::

    s(lambda) = N_D sin(theta_c) = n(lambda) * N_D / N(lambda)

and conversely ``n(lambda) = s(lambda) * N(lambda) / N_D``.  At 589.3 nm the
ratio is 1 and the scale reads the stone's index directly.  A dense-glass prism
disperses more than most stones, so in white light the blue edge falls below
the red one and the edge becomes a coloured fringe several thousandths wide.

Method
------
1. Each camera channel's edge is fitted separately with the Fresnel edge model
   of :mod:`critline.photo.edges` (onset of total reflection, Gaussian blur).
   The channel integrates a band of wavelengths; its onset is assigned to the
   band's *effective wavelength*: the centroid of the channel's spectral
   weight, the CIE 1931 2-degree colour matching functions (CIE 15:2004, from
   colour-science) taken to linear sRGB primaries (IEC 61966-2-1; negative
   lobes cut away, as a sensor's sensitivities are non-negative) times CIE
   illuminant A (an incandescent lamp, the usual white source).  On 1-D
   profiles of the synthesizer (development seeds 0-59) the fitted channel
   onset sits within 0.0004 of ``s(effective wavelength)``; that figure is
   kept as a per-channel systematic term (:data:`CHANNEL_SYSTEMATIC`).
2. Each channel onset becomes the stone's index at its effective wavelength,
   ``n_c = s_c N(lambda_c) / N_D``, with the prism glass's Sellmeier formula.
   The instrument file may name the glass (its optional ``prism_glass`` key,
   see :mod:`critline.instrument`; :func:`prism_glass`); when it names none the
   default is the SCHOTT N-LASF31A formula of the glass table
   (``critline/synth/data/glasses.csv``, ``N_D`` = 1.8828, Abbe number 40.8).
   Only the ratio ``N(lambda) / N_D`` is used, so a prism of slightly
   different index but similar dispersion reads the same.  The reader passes
   the instrument's glass down to :func:`reread_edges`.
3. A two-term Cauchy formula ``n(lambda) = n_D + B (1/lambda^2 - 1/589.3^2)``
   is fitted to the channel indices by weighted least squares; ``n_D`` is the
   reading.  With three channels one degree of freedom is left: a poor fit
   (chi-square above its expectation) widens the uncertainty.
4. The stone's dispersion ``n_F - n_C`` follows from ``B``; it is reported only
   when three channels take part and its uncertainty is below a third of its
   size, and always flagged approximate (two terms of Cauchy over 460-610 nm).

Uncertainty: the channels' statistical parts and :data:`CHANNEL_SYSTEMATIC`
propagated through the least squares, plus the edge fit's model floor (blur
shape, sharpening), which moves all channels together and is therefore added
once, plus :data:`MODEL_FLOOR` for the Cauchy form.

Over-exposure: a channel is taken as clipped when its bright field reaches
:data:`FULL_SCALE` or sits at one exact level just above the onset.  Counted at
the clip level while the model falls below it, the clipped samples of such a
channel pulled the fitted edge into a flat top and its onset low (by 0.001-0.005
on tuning photos 430000-430199, against the same scenes rendered 0.45 times as
bright): the few active-set passes stopped with the model hugging the clip.  A
channel clipped at full scale is therefore fitted as a censored least-squares
problem solved exactly (:func:`critline.photo.edgemodel.censored_solve`): its
clipped samples, and three samples beside each clipped run (the phone's
processing and JPEG round the clipped corner after the sensor clipped it), only
bound the model from below, and neither the blur-shape terms nor the
multiplicative trend (which cannot be told from the hidden amplitude) are
fitted.  The onset then comes from the rise below the clip.  What remains is
smaller and specific to a channel's band: a clipped red channel still reads
0.001-0.002 low on some tuning photos, its visible lower rise being made by the
shorter wavelengths of its band, so clipped channels keep the whole hidden
stretch :data:`CLIPPED_HIDDEN` in their uncertainty and are left out when two
unclipped channels remain.  With red and green clipped and blue not, the light
is told by :func:`clipped_fringe` (blue's own edge well below the censored red
and green onsets).  A channel that was clipped and then scaled by the phone's
white balance (a plateau below full scale) is still fitted the plain way: such a
channel can take part in a reading in light that could not be told, and
monochromatic readings are left as they were.

The simple yellow-green boundary convention, computed for comparison: after
white balance on the bright field (each channel scaled 0..1 between its level
below and above the fringe) the eye reads a white-light edge where the fringe's
yellow-green light turns on; we take the half-brightness point of the mean of
the normalised red and green channels (the yellow light of the fringe).
"""

from __future__ import annotations

import functools
import math
import warnings
from dataclasses import dataclass, field, replace

import numpy as np

from critline.optics import SODIUM_D_NM
from critline.photo.edges import CHANNEL_FULL_SCALE

#: Channel order of the profiles.
CHANNELS = ("red", "green", "blue")
#: Wavelength grid for the effective wavelengths, nanometres.
WAVELENGTHS_NM = np.arange(380.0, 781.0, 5.0)
#: Fraunhofer F and C lines (hydrogen), nanometres, for n_F - n_C.
F_LINE_NM = 486.13
C_LINE_NM = 656.27
#: Systematic difference between a channel's fitted onset and the onset at its
#: effective wavelength (measured on synthesizer development seeds 0-59: <= 0.0004).
CHANNEL_SYSTEMATIC = 0.0003
#: Model floor of the two-term Cauchy interpolation to 589.3 nm.
MODEL_FLOOR = 0.0001
#: Default prism glass (synthesizer glass table) when the instrument names none.
DEFAULT_GLASS = "N-LASF31A"
#: Stretch of the shoulder taken as hidden when a channel is clipped right above its
#: onset (over-exposure by 1.5-2x hides 0.003-0.008, see critline.photo.edges).
CLIPPED_HIDDEN = 0.004
#: Linear level (of full scale 1) from which a channel's bright field is taken as clipped: the
#: sRGB codes 250 and 251 of 255 decode to 0.956 and 0.965, so this catches 8-bit values of 251-255
#: (the single-colour edge analysis uses the same level).
FULL_SCALE = CHANNEL_FULL_SCALE
#: Smallest spread of the channel edges taken as a coloured fringe (scale units).
FRINGE_MIN = 0.0015
#: A dispersion estimate is reported only below this relative uncertainty.
DISPERSION_MAX_RELATIVE = 1.0 / 3.0
#: Widest spread of one edge's channel onsets (scale units) that can be a coloured fringe.  Snell's
#: law with the default prism (N-LASF31A) at the channels' effective wavelengths: a stone without
#: dispersion at n = 1.81 spreads blue below red by 0.023; a stone as dispersive as Abbe number 15
#: (more than any common stone below a 1.81 liquid, from memory) spreads them the other way by
#: about 0.04 at n = 1.8, 0.02 at n = 1.5.  Channel edges spread wider than this (plus three blur
#: widths) are not one edge seen in three colours.
FRINGE_MAX = 0.03


@functools.cache
def channel_weights() -> np.ndarray:
    """Spectral weight ``(3, len(WAVELENGTHS_NM))`` of the R, G, B channels under illuminant A.

    CIE 1931 2-degree colour matching functions to linear sRGB (IEC 61966-2-1
    matrix of colour-science), negative lobes clipped, times CIE illuminant A.
    Each row sums to 1.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    illum = colour.SDS_ILLUMINANTS["A"]
    to_rgb = np.asarray(colour.models.RGB_COLOURSPACE_sRGB.matrix_XYZ_to_RGB, dtype=float)
    wl = np.asarray(cmfs.wavelengths, float)
    xyz = np.stack([np.interp(WAVELENGTHS_NM, wl, np.asarray(cmfs.values, float)[:, i], left=0, right=0)
                    for i in range(3)])
    power = np.interp(WAVELENGTHS_NM, np.asarray(illum.wavelengths, float), np.asarray(illum.values, float))
    w = np.clip(to_rgb @ xyz, 0.0, None) * power[None, :]
    return w / w.sum(axis=1, keepdims=True)


@functools.cache
def effective_wavelengths() -> dict[str, float]:
    """Centroid wavelength (nm) of each channel's spectral weight, see :func:`channel_weights`."""
    w = channel_weights()
    return {c: float(w[i] @ WAVELENGTHS_NM) for i, c in enumerate(CHANNELS)}


def prism_glass(instrument=None):
    """The prism glass's dispersion formula named by an instrument (its ``prism_glass`` key).

    Parameters
    ----------
    instrument : critline.instrument.Instrument, str or None
        An instrument (its ``prism_glass``), a glass name, or None.  An empty
        name or None gives :data:`DEFAULT_GLASS`.

    Returns
    -------
    SellmeierFormula
        From the glass table ``critline/synth/data/glasses.csv`` (published
        catalogue formulas, each row with its source).
    """
    from critline.synth.dispersion import glasses  # plain data table

    name = getattr(instrument, "prism_glass", instrument) or DEFAULT_GLASS
    table = glasses()
    if name not in table:
        raise ValueError(f"prism glass {name!r} is not in the glass table (known: {', '.join(sorted(table))})")
    return table[name]


def prism_ratio(wavelength_nm, glass=None):
    """``N(lambda) / N_D`` of the prism glass (Sellmeier formula with an ``index`` method)."""
    if glass is None:
        glass = prism_glass()
    return np.asarray(glass.index(wavelength_nm), float) / float(glass.index(SODIUM_D_NM))


@dataclass(frozen=True)
class WhiteLightEstimate:
    """The edge at 589.3 nm from the channel edges of a white-light fringe.

    Attributes
    ----------
    value, uncertainty : float
        Scale value of the edge at 589.3 nm (= the stone's index there) and its
        standard uncertainty.
    channels : dict
        Per channel: ``wavelength`` (effective, nm), ``onset`` (scale value),
        ``index`` (stone's index at that wavelength).
    dispersion : float or None
        Approximate ``n_F - n_C`` of the stone, None when not meaningful.
    dispersion_uncertainty : float or None
    chi2 : float
        Weighted residual sum of squares of the Cauchy fit (0 with two channels).
    """

    value: float
    uncertainty: float
    channels: dict
    dispersion: float | None = None
    dispersion_uncertainty: float | None = None
    chi2: float = 0.0
    figures: dict = field(default_factory=dict)


def estimate_at_sodium(onsets, *, common_floor=0.0, glass=None) -> WhiteLightEstimate | None:
    """Cauchy fit of the channel edges, evaluated at 589.3 nm.

    Parameters
    ----------
    onsets : dict
        Channel name -> ``(onset, statistical uncertainty)`` on the 589.3 nm scale.
    common_floor : float
        Uncertainty common to all channels (the edge fit's model floor).
    glass : object with ``index(wavelength_nm)``, optional
        Prism glass; default :data:`DEFAULT_GLASS`.

    Returns
    -------
    WhiteLightEstimate or None
        None with fewer than two channels.
    """
    names = [c for c in CHANNELS if c in onsets]
    if len(names) < 2:
        return None
    lam_eff = effective_wavelengths()
    lam = np.array([lam_eff[c] for c in names])
    s = np.array([float(onsets[c][0]) for c in names])
    ratio = prism_ratio(lam, glass)
    n = s * ratio
    sig = np.hypot(np.array([float(onsets[c][1]) for c in names]), CHANNEL_SYSTEMATIC) * ratio
    x = 1.0 / lam**2 - 1.0 / SODIUM_D_NM**2
    design = np.stack([np.ones_like(x), x], axis=1) / sig[:, None]
    cov = np.linalg.inv(design.T @ design)
    coef = cov @ design.T @ (n / sig)
    resid = (n - np.stack([np.ones_like(x), x], axis=1) @ coef) / sig
    chi2 = float(resid @ resid)
    dof = len(names) - 2
    if dof > 0 and chi2 > dof:
        cov = cov * (chi2 / dof)
    value = float(coef[0])
    unc = math.sqrt(float(cov[0, 0]) + common_floor**2 + MODEL_FLOOR**2)
    fc = 1.0 / F_LINE_NM**2 - 1.0 / C_LINE_NM**2
    disp, disp_unc = float(coef[1] * fc), float(math.sqrt(cov[1, 1]) * fc)
    meaningful = dof > 0 and disp_unc < DISPERSION_MAX_RELATIVE * abs(disp)
    channels = {c: {"wavelength": float(lam[i]), "onset": float(s[i]), "index": float(n[i])}
                for i, c in enumerate(names)}
    return WhiteLightEstimate(value, unc, channels,
                              dispersion=disp if meaningful else None,
                              dispersion_uncertainty=disp_unc if meaningful else None,
                              chi2=chi2, figures={"cauchy_b_nm2": float(coef[1]), "dof": dof})


def yellow_green_boundary(values, rgb, near, *, below=0.015, above=0.006, reach=0.02) -> float:
    """The simple yellow-green boundary reading of a white-light fringe (for comparison).

    Each channel is scaled 0..1 between its median level in ``[near - reach,
    near - below]`` and in ``[near + above, near + reach]`` (white balance on
    the bright field); the reading is where the mean of the normalised red and
    green channels (the fringe's yellow light) first rises through one half,
    searching upward from ``near - below``.  NaN when the levels are not seen.
    """
    values = np.asarray(values, float)
    rgb = np.asarray(rgb, float)
    lo = (values >= near - reach) & (values <= near - below)
    hi = (values >= near + above) & (values <= near + reach)
    if lo.sum() < 3 or hi.sum() < 3:
        return float("nan")
    norm = []
    for ch in rgb[:2]:
        dark, bright = float(np.median(ch[lo])), float(np.median(ch[hi]))
        if not bright - dark > 0:
            return float("nan")
        norm.append((ch - dark) / (bright - dark))
    yellow = 0.5 * (norm[0] + norm[1])
    sel = np.flatnonzero((values >= near - below) & (values <= near + above))
    if sel.size < 2:
        return float("nan")
    xs, ys = values[sel], yellow[sel]
    up = np.flatnonzero((ys[:-1] < 0.5) & (ys[1:] >= 0.5))
    if up.size == 0:
        return float("nan")
    i = up[-1]
    return float(xs[i] + (0.5 - ys[i]) / (ys[i + 1] - ys[i]) * (xs[i + 1] - xs[i]))


def channel_edges(values, rgb, *, liquid_ri=None, prism_index=1.88):
    """Stone edges found separately in each channel with :func:`critline.photo.edges.analyse_profile`.

    Each channel is first scaled so that its top (99.8th percentile) is 1: a
    channel clipped by over-exposure and then scaled by the phone's white
    balance plateaus below full scale, and the edge analysis recognises a
    clipped plateau only near full scale.

    Returns a dict channel -> tuple of stone :class:`~critline.photo.edges.EdgeFit`
    sorted by value (channels with no usable profile are left out).
    """
    from critline.photo.edges import analyse_profile  # late: edges calls this module

    out = {}
    for name, channel in zip(CHANNELS, np.asarray(rgb, float), strict=True):
        if not np.all(np.isfinite(channel)):
            continue
        top = float(np.percentile(channel, 99.8))
        if not top > 0:
            continue
        full_scale = top >= FULL_SCALE  # before the scaling below hides it
        channel = channel / top
        noise = max(float(np.median(np.abs(np.diff(channel)))) * 1.4826 / math.sqrt(2.0), 1e-5)
        # a channel clipped at full scale is fitted with its clipped samples as lower bounds
        # (censored least squares, solved exactly): the rise below the clip carries the onset.
        # Such a channel is always marked clipped, so it takes no part in a reading in light
        # that could not be told (monochromatic readings stay as they were)
        a = analyse_profile(values, channel, noise, liquid_ri=liquid_ri, prism_index=prism_index,
                            censored=full_scale)
        stones = tuple(_mark_clipped(e, values, channel, full_scale) for e in a.edges
                       if e.kind == "stone" and e.contrast >= 0.1)
        if stones:
            out[name] = stones
    return out


def _mark_clipped(edge, values, channel, full_scale=False):
    """The edge with figure ``channel_clipped``: the channel is clipped at this edge.

    Two signs of a clipped channel: its bright field reaches the top of the
    decoded range (``full_scale``: the channel's 99.8th percentile at or above
    :data:`FULL_SCALE` of linear full scale, i.e. 8-bit values at 251-255, where
    the sensor or the encoder clipped it); or, when the phone's white balance
    scaled the channel after the clip, samples exactly at the channel's 90th
    percentile over at least 30 % of the stretch just above the onset.  A
    clipped corner leaves the onset biased low (on tuning seeds 500000-500099 by
    0.0015-0.006 for channels at full scale, against 0.0006 for the others).
    """
    values = np.asarray(values, float)
    reach = max(4.0 * edge.width, 0.012)
    above = (values > edge.value) & (values <= edge.value + reach)
    top = float(np.percentile(channel, 90))  # a clipped field sits at one exact level
    at_top = np.abs(channel[above] - top) <= 1e-6 * abs(top)
    clipped = bool(full_scale or (np.count_nonzero(at_top) >= 3 and np.mean(at_top) >= 0.3))
    return replace(edge, figures=dict(edge.figures, channel_clipped=clipped))


def fringe_light(per_channel) -> str:
    """``'white'`` when the channels' strongest edges are displaced in wavelength order, else ``'unknown'``.

    A coloured fringe puts the channel edges in the order of their effective
    wavelengths (all rising or all falling from blue to red) and spreads them by
    more than :data:`FRINGE_MIN` and four statistical standard deviations.

    Over-exposure clips the channels and a clipped channel's onset sits low, by
    more the more it is clipped; under monochromatic light the unclipped (or least
    clipped) channel therefore lies *above* the others.  Two weaker signs are
    therefore also taken as a fringe, both with the blue edge lowest (the order a
    dense prism gives, Snell's law): the three edges falling from red to blue with
    at least one step beyond four standard deviations; or an unclipped blue edge
    below both clipped red and green edges, each by two standard deviations.
    """
    firsts = {c: max(v, key=lambda e: e.contrast) for c, v in per_channel.items()}
    names = [c for c in CHANNELS if c in firsts]
    if len(names) < 2:
        return "unknown"
    s = [firsts[c].value for c in names]
    u = [_stat(firsts[c]) for c in names]
    steps = np.diff(s)
    spread = s[0] - s[-1]
    if abs(spread) > max(FRINGE_MIN, 4 * math.hypot(u[0], u[-1])) and \
            np.all(np.sign(steps) == np.sign(steps[0])):
        return "white"
    if len(names) == 3 and spread > FRINGE_MIN and np.all(steps < 0) and \
            any(-d > 4 * math.hypot(a, b) for d, a, b in zip(steps, u[:-1], u[1:], strict=True)):
        return "white"
    blue = firsts.get("blue")
    others = [firsts[c] for c in ("red", "green") if c in firsts]
    if blue is not None and len(others) == 2 and not blue.figures.get("channel_clipped") and \
            all(f.figures.get("channel_clipped") for f in others):
        gaps = [f.value - blue.value for f in others]
        if max(gaps) > FRINGE_MIN and all(g > 2 * math.hypot(_stat(blue), _stat(f)) for g, f in
                                          zip(gaps, others, strict=True)):
            return "white"
    return "unknown"


#: Significance (standard deviations) of an unclipped blue edge below the censored fits of clipped
#: red and green channels for the fringe of :func:`clipped_fringe`.
CLIPPED_FRINGE_SIGMA = 3.0


def clipped_fringe(per_channel, luminance_stones, near, reach) -> str:
    """``'white'`` when an unclipped blue edge lies well below clipped red and green, else ``'unknown'``.

    Over-exposure by white light often clips red and green (the lamp is reddish, the
    phone's white balance only partly corrects it) and leaves blue unclipped.  The
    clipped channels, fitted as censored least squares (:func:`channel_edges`), are no
    longer biased low by the clip (within their stated uncertainty, which carries the
    hidden corner), so their onsets can be compared with blue's: a dense prism puts the
    blue edge lowest (Snell's law, module notes), in monochromatic light all channels
    share one onset.  The test: blue's lowest edge within ``reach`` of ``near``,
    unclipped and not itself a stone edge of the luminance (``luminance_stones``; a
    stone's other ray would be), lies below the weighted mean of the red and green
    onsets (the nearest edge of each, both clipped at full scale) by more than
    :data:`FRINGE_MIN` and :data:`CLIPPED_FRINGE_SIGMA` times the combined total
    standard uncertainty.  The blue channel often shows a second step at the red and
    green onsets (the sensor's blue filter passes some of their light); only its lowest
    edge is blue's own.
    """
    if not all(c in per_channel for c in CHANNELS):
        return "unknown"
    nearest = {c: min(per_channel[c], key=lambda e: abs(e.value - near)) for c in ("red", "green")}
    if any(abs(e.value - near) > reach or not e.figures.get("channel_clipped") for e in nearest.values()):
        return "unknown"
    blues = [e for e in per_channel["blue"] if abs(e.value - near) <= reach]
    if not blues:
        return "unknown"
    blue = min(blues, key=lambda e: e.value)
    if blue.figures.get("channel_clipped"):
        return "unknown"
    if any(abs(s.value - blue.value) <= max(2.0 * math.hypot(s.uncertainty, blue.uncertainty), 2.0 * s.width)
           for s in luminance_stones):
        return "unknown"  # the luminance shows this edge too: a stone edge, not blue's own
    u = np.array([e.uncertainty for e in nearest.values()])
    w = 1.0 / u**2
    mean = float(np.sum(w * [e.value for e in nearest.values()]) / w.sum())
    gap = mean - blue.value
    if gap > max(FRINGE_MIN, CLIPPED_FRINGE_SIGMA * math.hypot(1.0 / math.sqrt(w.sum()), blue.uncertainty)):
        return "white"
    return "unknown"


def _stat(e) -> float:
    """Statistical standard uncertainty of an edge fit."""
    return float(e.figures.get("stat_uncertainty") or e.uncertainty)


def _channel_parts(e, overexposed=False):
    """(independent, common) uncertainty parts of one channel edge fit.

    ``overexposed``: the luminance or another channel is clipped at this edge;
    the channel's own corner may then be flattened without reaching an exact
    clip level, so it takes the clipping term too.
    """
    hidden = float(e.figures.get("hidden_by_clipping") or 0.0)
    if e.figures.get("channel_clipped") or overexposed:
        hidden = max(hidden, CLIPPED_HIDDEN)
    # half the hidden stretch, as in critline.photo.edges; a channel found clipped by its
    # own test is kept only when fewer than two unclipped channels remain, and its onset
    # can then sit low by the whole stretch (0.0015-0.006 on tuning seeds 500000-500099)
    hidden *= 1.0 if e.figures.get("channel_clipped") else 0.5
    stat = float(e.figures.get("stat_uncertainty") or e.uncertainty)
    floor = float(e.figures.get("floor") or 0.0)
    return math.hypot(stat, hidden), math.sqrt(max(floor**2 - hidden**2, 0.0))


def reread_edges(edges, values, rgb, *, liquid_ri=None, prism_index=1.88, per_channel=None, glass=None):
    """Stone edges of a white-light profile re-read at 589.3 nm (hook of :mod:`critline.photo.edges`).

    ``glass``: the prism glass's dispersion formula (:func:`prism_glass` of the
    instrument); None takes :data:`DEFAULT_GLASS`.

    The luminance profile of a white-light fringe may split into two steps (blue
    and red), so the number of stone edges is taken from the channels: the
    count most channels agree on (green decides a tie); channels with that
    count are paired with each other by order.  When fewer than two channels
    agree the luminance edges are kept, their uncertainty widened by the
    fringe (``white_light_method = 'luminance'``).
    """
    from critline.photo.edges import EdgeFit, white_light_value

    if per_channel is None:
        per_channel = channel_edges(values, rgb, liquid_ri=liquid_ri, prism_index=prism_index)
    counts = [len(v) for v in per_channel.values()]
    others = [e for e in edges if e.kind != "stone"]
    stones = [e for e in edges if e.kind == "stone"]
    k = max(set(counts), key=lambda c: (counts.count(c), len(per_channel.get("green", ())) == c)) \
        if counts else 0
    agree = {c: v for c, v in per_channel.items() if len(v) == k}
    order = np.argsort(np.asarray(values, float), kind="stable")
    v_sorted = np.asarray(values, float)[order]
    rgb_sorted = np.asarray(rgb, float)[:, order]
    if len(agree) < 2 or k == 0 or k > 2:
        kept = []
        for e in stones:
            near = {c: min(v, key=lambda f, e=e: abs(f.value - e.value)) for c, v in per_channel.items()}
            fb = white_light_value(e, near)
            b = yellow_green_boundary(v_sorted, rgb_sorted, e.value)
            kept.append(EdgeFit(fb.value, fb.uncertainty, fb.kind, fb.contrast, fb.width,
                                dict(fb.figures, white_light_method="luminance",
                                     yellow_green_boundary=b if math.isfinite(b) else None)))
        return kept + others
    out = []
    for i in range(k):
        fits = {c: v[i] for c, v in agree.items()}
        if _same_as(fits, others):
            continue  # the luminance analysis named this step the contact liquid's edge
        if not _one_fringe(fits):
            # paired by order, the channels' edges are too far apart to be one fringe (a faint
            # step found in one channel only shifts the order): no channel reading of this edge
            near = [e for e in stones if min(abs(f.value - e.value) for f in fits.values()) <= FRINGE_MAX]
            for e in near:
                if all(abs(e.value - o.value) > 1e-9 for o in out):
                    out.append(_luminance_fallback(e, per_channel, v_sorted, rgb_sorted))
            continue
        # the edge fit's own hidden_by_clipping is set for any flat bright field once the
        # channel is scaled to its top, so only the channel's own clip test decides here
        clean = {c: f for c, f in fits.items() if not f.figures.get("channel_clipped")}
        if len(clean) >= 2:
            fits = clean  # a clipped corner biases a channel's onset low
        elif len(clean) == 1 and len(fits) == 3:
            fits = _least_hidden(fits, clean, v_sorted, rgb_sorted)
        ref = fits.get("green", next(iter(fits.values())))
        lum = min(stones, key=lambda e, ref=ref: abs(e.value - ref.value)) if stones else ref
        out.append(white_light_edge(lum, fits, v_sorted, rgb_sorted, luminance_stones=len(stones), glass=glass))
    return out + others


def reread_unknown_light(edges, values, rgb, *, per_channel, glass=None):
    """Stone edges of a profile whose light could not be told, read from unclipped channels where they agree.

    The channel reading needs no decision on the light.  In white light it is the
    reading of :func:`reread_edges`.  In monochromatic light every channel's onset
    lies at the same scale value ``s``; the channel indices ``s N(lambda_c) / N_D``
    then follow the prism's own dispersion, and the two-term Cauchy fit evaluated at
    589.3 nm returns ``s`` (N-LASF31A's ``N(lambda) / N_D`` follows the Cauchy form
    over 458-612 nm so closely that the fit through three equal onsets is off by
    1e-5, tests/whitelight).  It does need channels whose corner is seen: each
    luminance stone edge is re-read only when two or more unclipped channels show
    the same number of stone edges as the luminance, lying within one fringe of
    each other and not on the contact liquid's edge; otherwise the luminance edges
    are kept unchanged.  When all three channels are clipped at full scale and so is
    the luminance at every stone edge (its plain fit then reads low), their censored fits
    (:func:`channel_edges`) take the place of the unclipped channels, with the whole
    hidden stretch in their uncertainty.  A luminance fit can go astray where the channels agree
    (a faint liquid line in its window, a shoulder taken for the onset), and the
    luminance onset in white light sits off the 589.3 nm position by an amount
    that depends on the stone's unknown dispersion and the phone's white balance.
    """
    stones = sorted((e for e in edges if e.kind == "stone"), key=lambda e: e.value)
    others = [e for e in edges if e.kind != "stone"]
    if not stones or not per_channel:
        return list(edges)
    clean = {c: v for c, v in per_channel.items() if not any(f.figures.get("channel_clipped") for f in v)}
    agree = {c: v for c, v in clean.items() if len(v) == len(stones)}
    if len(agree) < 2:
        # channels clipped at full scale were fitted as censored least squares (no longer biased
        # low by the clip); with all three clipped the luminance is clipped too
        clipped = {c: v for c, v in per_channel.items() if c not in clean}
        agree = {c: v for c, v in clipped.items() if len(v) == len(stones)}
        lum_clipped = all(e.figures.get("channel_clipped") or e.figures.get("hidden_by_clipping") for e in stones)
        if len(clipped) < 3 or len(agree) < 2 or not lum_clipped:
            return list(edges)
    order = np.argsort(np.asarray(values, float), kind="stable")
    v_sorted = np.asarray(values, float)[order]
    rgb_sorted = np.asarray(rgb, float)[:, order]
    out = []
    for i, e in enumerate(stones):
        fits = {c: v[i] for c, v in agree.items()}
        if not _one_fringe(fits) or _same_as(fits, others):
            out.append(e)
            continue
        new = white_light_edge(e, fits, v_sorted, rgb_sorted, luminance_stones=len(stones), glass=glass)
        out.append(replace(new, figures=dict(new.figures, white_light_method="channel_cauchy_unknown_light")))
    return out + others


def _one_fringe(fits) -> bool:
    """True when the channel onsets paired as one edge lie within one coloured fringe (:data:`FRINGE_MAX`)."""
    vals = [f.value for f in fits.values()]
    blur = max(f.width for f in fits.values())
    return max(vals) - min(vals) <= FRINGE_MAX + 3.0 * blur


def _same_as(fits, others) -> bool:
    """True when the channels' edge lies on a non-stone edge of the luminance analysis (the liquid's)."""
    mid = float(np.median([f.value for f in fits.values()]))
    blur = max(f.width for f in fits.values())
    return any(abs(o.value - mid) <= max(0.003, 2.0 * max(blur, o.width)) for o in others)


def _luminance_fallback(e, per_channel, values, rgb_sorted):
    """A luminance stone edge kept as it is in white light, its uncertainty widened by the fringe."""
    from critline.photo.edges import EdgeFit, white_light_value

    near = {c: min(v, key=lambda f: abs(f.value - e.value)) for c, v in per_channel.items() if v}
    near = {c: f for c, f in near.items() if abs(f.value - e.value) <= FRINGE_MAX}
    fb = white_light_value(e, near)
    b = yellow_green_boundary(values, rgb_sorted, e.value)
    return EdgeFit(fb.value, fb.uncertainty, fb.kind, fb.contrast, fb.width,
                   dict(fb.figures, white_light_method="luminance",
                        yellow_green_boundary=b if math.isfinite(b) else None))


def hidden_ratio(values, channel, reference, fits) -> float:
    """How much of a clipped channel's rise is hidden, relative to an unclipped reference channel.

    Below the edge, away from the fringe, every channel sees the same lamp through the
    same Fresnel reflectance (its dependence on wavelength is only through the small
    dispersion of n/N), so the ratio of the dark level to the level just above the edge
    is the same in every channel as long as the channel is not clipped.  A clipped
    channel shows its clip level instead of its bright level, so its ratio is larger by
    the factor its true bright level exceeds the clip.  Returns that ratio of ratios
    (about 1 unclipped, larger the more is hidden; NaN when the levels are not seen).
    """
    values = np.asarray(values, float)
    lo = min(f.value for f in fits.values())
    hi = max(f.value for f in fits.values())
    blur = max(f.width for f in fits.values())
    margin = max(0.008, 3.0 * blur)
    dark = (values >= lo - margin - 0.02) & (values <= lo - margin)
    bright = (values >= hi + max(0.002, 2.0 * blur)) & (values <= hi + max(0.002, 2.0 * blur) + 0.008)
    if np.count_nonzero(dark) < 5 or np.count_nonzero(bright) < 5:
        return float("nan")
    ratio = [float(np.median(ch[dark]) / np.median(ch[bright])) for ch in (channel, reference)]
    if not (ratio[1] > 0 and np.isfinite(ratio[0])):
        return float("nan")
    return ratio[0] / ratio[1]


def _least_hidden(fits, clean, values, rgb_sorted):
    """One unclipped channel and two clipped ones: keep the clipped channel that hides less.

    A clipped channel's onset sits low by the part of its rise the clip hides; the two
    channels are ranked by :func:`hidden_ratio` against the unclipped one and the one
    hiding more is left out (with both, its low onset pulls the dispersion fit down).
    """
    (ref_name,) = clean
    ref = rgb_sorted[CHANNELS.index(ref_name)]
    ranks = {c: hidden_ratio(values, rgb_sorted[CHANNELS.index(c)], ref, fits) for c in fits if c != ref_name}
    if not all(np.isfinite(list(ranks.values()))):
        return fits
    keep = min(ranks, key=ranks.get)
    return {c: f for c, f in fits.items() if c in (ref_name, keep)}


def white_light_edge(edge, fits, values, rgb_sorted, luminance_stones=1, glass=None):
    """One stone edge re-read at 589.3 nm from its channel edge fits (channel -> EdgeFit)."""
    from critline.photo.edges import EdgeFit

    overexposed = bool(edge.figures.get("hidden_by_clipping")) or \
        any(f.figures.get("channel_clipped") or f.figures.get("hidden_by_clipping") for f in fits.values())
    parts = {c: _channel_parts(f, overexposed) for c, f in fits.items()}
    onsets = {c: (f.value, parts[c][0]) for c, f in fits.items()}
    common = float(np.median([p[1] for p in parts.values()]))
    est = estimate_at_sodium(onsets, common_floor=common, glass=glass)
    boundary = yellow_green_boundary(values, rgb_sorted, edge.value)
    figures = dict(edge.figures)
    figures.update({
        "white_light_method": "channel_cauchy",
        "luminance_onset": edge.value,
        "luminance_stone_edges": luminance_stones,
        "yellow_green_boundary": boundary if math.isfinite(boundary) else None,
        "channel_onsets": {c: v["onset"] for c, v in est.channels.items()},
        "channel_wavelengths_nm": {c: v["wavelength"] for c, v in est.channels.items()},
        "channel_indices": {c: v["index"] for c, v in est.channels.items()},
        "cauchy_chi2": est.chi2,
        "channels_clipped": sorted(c for c, f in fits.items() if f.figures.get("channel_clipped")),
        "overexposed": overexposed,
        "stone_dispersion_fc": est.dispersion,
        "stone_dispersion_fc_uncertainty": est.dispersion_uncertainty,
    })
    width = float(np.median([f.width for f in fits.values()]))
    contrast = float(np.median([f.contrast for f in fits.values()]))
    return EdgeFit(value=est.value, uncertainty=est.uncertainty, kind="stone",
                   contrast=contrast, width=width, figures=figures)


def reading_summary(analysis) -> dict:
    """White-light figures of an analysis for the reading's quality figures (hook of the reader)."""
    out = []
    for e in analysis.edges:
        if e.kind != "stone" or "white_light_method" not in e.figures:
            continue
        out.append({"value": e.value, "uncertainty": e.uncertainty} | {k: e.figures.get(k) for k in (
            "white_light_method", "luminance_onset", "yellow_green_boundary", "channel_onsets",
            "channel_wavelengths_nm", "stone_dispersion_fc", "stone_dispersion_fc_uncertainty",
            "overexposed")})
    return {"white_light_edges": out,
            "dispersion_approximate": any(d.get("stone_dispersion_fc") is not None for d in out)}


def calibration_light_refusal(calibration, photo_light: str) -> str | None:
    """Reason to refuse a calibration taken in another light than the photo, else None.

    A white-light calibration absorbs the white-light reading's own offsets; on a
    sodium photo (or the other way round) it would shift the reading by an
    amount nobody measured, so the reading is rejected with this reason.  A
    photo whose light could not be told (``'unknown'``) is not refused.
    """
    cal_light = getattr(calibration, "light", None)
    if calibration is None or cal_light is None or photo_light not in ("monochromatic", "white"):
        return None
    if cal_light == photo_light:
        return None
    return (f"calibration {getattr(calibration, 'id', '?')} was made in {cal_light} light but the photo "
            f"shows {photo_light} light: use a calibration made in the same light")
