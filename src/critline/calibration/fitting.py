"""Fitting the map from scale position to refractive index on reference stones.

Pure functions on numbers: no images, no files.  A reference *pair* is what
one shadow edge of a reference photo gives (its scale position with an
uncertainty, optionally its position relative to the field circle) together
with the stone's known refractive index.

Two maps are fitted on the same pairs:

* the **scale map** corrects the nominal value of the printed scale,
  ``x = first + step * scale_position``, by a low-order polynomial
  ``ri = x + c0 + c1 u + c2 u**2`` with ``u = (x - centre) / half_span``.
  Which terms are used is decided by the evidence (see
  :func:`allowed_models` and :func:`choose_model`): an offset needs two
  references, offset and gain three, a smooth (quadratic) correction five
  spread over the range and the support of Akaike's criterion.
* the **field-frame map** (the fallback when graduations are not found in a
  photo) gives ``ri = d0 + d1 f (+ d2 f**2)`` from the edge's signed
  position along the scale axis relative to the field circle, ``f`` in field
  radii.  It needs three references and is marked lower precision.

Each fit is weighted least squares (weights ``1 / sigma**2`` of every
reading, expressed in RI).  The scale map is made robust by iteratively
reweighted least squares with Huber's weights (P. J. Huber, Ann. Math.
Statist. 35, 73 (1964)): a reference more than :data:`HUBER_K` of its own
sigmas off the map counts with a weight falling as one over its distance, so
one reading a few sigmas off (a blurred or badly lit reference photo) cannot
bend the map at the end of the range it sits at.  The covariance is scaled by the Birge ratio
``sqrt(chi2 / dof)`` when the scatter is larger than the stated
uncertainties (R. T. Birge, Phys. Rev. 40, 207 (1932)).  Whether to add the
smooth term, and the field map's degree, follow Akaike's information criterion with known variances, ``chi2 + 2 k``
(H. Akaike, IEEE Trans. Autom. Control 19, 716 (1974)).  Leave-one-out
prediction residuals give an honest figure of how well the map predicts a
stone it was not fitted on, and find a wrong (e.g. mislabelled) reference.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np

from critline.errors import UsageError

#: scale-map kinds in increasing order of complexity, with their number of terms
SCALE_MODELS = {"offset": 1, "offset+gain": 2, "smooth": 3}
#: references needed before a scale-map kind may be used
SCALE_MODEL_MIN_REFS = {"offset": 2, "offset+gain": 3, "smooth": 5}
#: field-frame map degrees (polynomial in field radii); degree d needs d + 1 references
FIELD_MAX_DEGREE = 2
FIELD_MIN_REFS = 3
#: a field-frame map that predicts left-out references worse than this (RI) is not kept:
#: the field positions are too inconsistent to be worth a fallback
FIELD_MAX_LOO = 0.01
#: references the field-frame map may leave out, worst left-out prediction first, to get under
#: FIELD_MAX_LOO: a reference photo whose field stop was mostly hidden (a crescent) gives a field
#: position off by several hundredths of a radius while its graduation reading is fine.  Only
#: with at least FIELD_MIN_KEPT references left, so the rest still check each other.
FIELD_MAX_LEFT_OUT = 2
FIELD_MIN_KEPT = 6
#: the known RIs must span at least this much (RI units), else "all at one end"
MIN_SPAN = 0.08
#: a reference is suspect when it sits this many sigmas AND this far (RI) from
#: what the other references predict.  0.002 is what a careful reader
#: reproduces by eye (common practice, no source): a smaller shift is a
#: warning, not a wrong stone.
OUTLIER_SIGMAS = 5.0
OUTLIER_MIN_SHIFT = 0.002
#: Huber's tuning constant (in each reading's sigmas) for the scale map's reweighting: 1.345
#: keeps 95 % of least squares' efficiency for Gaussian errors (Huber 1964; Holland & Welsch,
#: Commun. Statist. A6, 813 (1977))
HUBER_K = 1.345
#: how far (RI) outside the references the map is still called valid
VALID_MARGIN = 0.005


class CalibrationError(UsageError):
    """Reference data that cannot give a calibration; one line, names the reason."""


class SuspectReferenceError(CalibrationError):
    """A reference disagrees with the others beyond reason (e.g. a mislabelled stone)."""

    def __init__(self, message: str, suspects: tuple[Suspect, ...]):
        super().__init__(message)
        self.suspects = suspects


@dataclass(frozen=True)
class ReferencePair:
    """One shadow edge of a reference photo with the stone's known RI.

    Attributes
    ----------
    scale_position : float
        Edge position, graduation units from the first printed graduation.
    scale_uncertainty : float
        Standard uncertainty of ``scale_position`` (graduation units), > 0.
    known_ri : float
        The reference stone's RI at 589.3 nm.
    field_position : float or None
        Signed edge position along the scale axis relative to the field
        circle, in field radii (``None`` when the reader did not give it).
    known_uncertainty : float
        Standard uncertainty of ``known_ri`` (natural variation of the stone).
    label : str
        Name used in messages (photo, material).
    """

    scale_position: float
    scale_uncertainty: float
    known_ri: float
    field_position: float | None = None
    known_uncertainty: float = 0.0
    label: str = ""


def as_pairs(pairs: Iterable) -> tuple[ReferencePair, ...]:
    """Accept :class:`ReferencePair` objects or plain tuples
    ``(scale_position, scale_uncertainty, field_position, known_ri)``."""
    out = []
    for i, p in enumerate(pairs):
        if isinstance(p, ReferencePair):
            out.append(p)
        else:
            sp, su, fp, ri = p
            out.append(ReferencePair(float(sp), float(su), float(ri),
                                     None if fp is None else float(fp), label=f"reference {i + 1}"))
    for p in out:
        if not (math.isfinite(p.scale_position) and math.isfinite(p.known_ri)):
            raise CalibrationError(f"{p.label or 'reference'}: scale position or known RI is not a number")
        if not (p.scale_uncertainty > 0 and math.isfinite(p.scale_uncertainty)):
            raise CalibrationError(f"{p.label or 'reference'}: scale uncertainty must be a positive number")
    return tuple(out)


# --------------------------------------------------------------------------- polynomial maps


@dataclass(frozen=True)
class PolynomialMap:
    """A weighted-least-squares polynomial with its covariance.

    ``value(x) = base(x) + sum_k c_k u**k`` with ``u = (x - centre) / half_span``;
    ``base(x) = x`` for a scale map (a correction to the nominal value) and
    ``0`` for the field-frame map.
    """

    kind: str
    centre: float
    half_span: float
    coefficients: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    additive: bool
    chi2: float = 0.0
    dof: int = 0

    @property
    def centre_offset(self) -> float:
        """Correction at the centre of the references (RI): calibrated minus nominal."""
        return self.coefficients[0]

    @property
    def centre_gain_error(self) -> float:
        """Relative gain correction at the centre (d correction / d nominal)."""
        return float(self.slope(self.centre)) - 1.0

    @property
    def birge_ratio(self) -> float:
        """sqrt(chi2/dof), at least 1 (the covariance is only ever inflated)."""
        return max(1.0, math.sqrt(self.chi2 / self.dof)) if self.dof > 0 else 1.0

    def _design(self, x) -> np.ndarray:
        u = (np.asarray(x, float) - self.centre) / self.half_span
        return np.stack([u**k for k in range(len(self.coefficients))], axis=-1)

    def value(self, x):
        """Mapped value(s) at ``x``."""
        x = np.asarray(x, float)
        out = self._design(x) @ np.asarray(self.coefficients)
        return out + x if self.additive else out

    def slope(self, x):
        """d value / d x."""
        u = (np.asarray(x, float) - self.centre) / self.half_span
        c = self.coefficients
        d = sum(k * c[k] * u ** (k - 1) for k in range(1, len(c))) / self.half_span
        return d + (1.0 if self.additive else 0.0) + 0.0 * u

    def sigma(self, x):
        """Standard uncertainty of the map itself at ``x`` (Birge-scaled covariance)."""
        j = self._design(x)
        cov = np.asarray(self.covariance) * self.birge_ratio**2
        return np.sqrt(np.maximum(np.einsum("...i,ij,...j->...", j, cov, j), 0.0))


def fit_polynomial(x, y, sigma, terms: int, *, additive: bool, kind: str,
                   centre: float | None = None, half_span: float | None = None,
                   huber: float | None = None) -> PolynomialMap:
    """Weighted least squares of ``y`` on a polynomial in ``x`` (``terms`` coefficients).

    Parameters
    ----------
    x, y, sigma : array_like
        Abscissae, ordinates and the ordinates' standard uncertainties.
    terms : int
        Number of coefficients (1: constant, 2: linear, 3: quadratic ...).
    additive : bool
        Fit ``y - x`` (a correction) instead of ``y``.
    huber : float, optional
        Robust fit: iteratively reweighted least squares with Huber's weights
        ``min(1, huber / |r / sigma|)`` (Huber 1964), ``r`` the residual.  Only
        with at least two more points than terms (else a point cannot be told
        from the rest); the map's chi2 and covariance then use the final
        weights (each down-weighted point counts with its sigma enlarged).
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    s = np.asarray(sigma, float)
    if huber is not None and len(x) >= terms + 2:
        weights = np.ones_like(s)
        plain = fit_polynomial(x, y, s, terms, additive=additive, kind=kind, centre=centre,
                               half_span=half_span)
        fitted = plain
        for _ in range(50):
            z = np.abs(fitted.value(x) - y) / s
            new = np.minimum(1.0, huber / np.maximum(z, 1e-12))
            if np.allclose(new, weights, atol=1e-6):
                break
            weights = new
            fitted = fit_polynomial(x, y, s / np.sqrt(weights), terms, additive=additive, kind=kind,
                                    centre=plain.centre, half_span=plain.half_span)
        return fitted
    if centre is None:
        centre = float(np.mean(x)) if len(x) else 0.0
    if half_span is None:
        half_span = float(np.ptp(x)) / 2 if len(x) > 1 else 1.0
        half_span = half_span if half_span > 1e-9 else 1.0
    u = (x - centre) / half_span
    a = np.stack([u**k for k in range(terms)], axis=1)
    target = y - x if additive else y
    w = 1.0 / s
    coef, *_ = np.linalg.lstsq(a * w[:, None], target * w, rcond=None)
    cov = np.linalg.pinv((a * (w**2)[:, None]).T @ a)
    resid = (a @ coef - target) / s
    return PolynomialMap(kind=kind, centre=float(centre), half_span=float(half_span),
                         coefficients=tuple(float(c) for c in coef),
                         covariance=tuple(tuple(float(v) for v in row) for row in cov),
                         additive=additive, chi2=float(resid @ resid), dof=len(x) - terms)


# --------------------------------------------------------------------------- model choice


def _spread_over_range(known: np.ndarray) -> bool:
    """True when the known RIs reach the middle half of their span (not just its two ends)."""
    lo, hi = float(known.min()), float(known.max())
    if hi - lo < MIN_SPAN or len(np.unique(np.round(known, 4))) < 3:
        return False
    rel = (known - lo) / (hi - lo)
    return bool(np.any((rel >= 0.25) & (rel <= 0.75)))


def allowed_models(known_ri: Sequence[float]) -> tuple[str, ...]:
    """Scale-map kinds the references can support, simplest first.

    Offset with two references, offset and gain with three, a smooth
    (quadratic) correction with five or more that reach the middle half of their span.
    """
    known = np.asarray(known_ri, float)
    n = len(known)
    out = [k for k, m in SCALE_MODEL_MIN_REFS.items() if n >= m]
    if "smooth" in out and not _spread_over_range(known):
        out.remove("smooth")
    if "offset+gain" in out and len(np.unique(np.round(known, 4))) < 2:
        out.remove("offset+gain")
    return tuple(out)


def _nominal(pairs, first: float, step: float) -> np.ndarray:
    return first + step * np.array([p.scale_position for p in pairs])


def _sigmas(pairs, step: float) -> np.ndarray:
    return np.array([math.hypot(step * p.scale_uncertainty, p.known_uncertainty) for p in pairs])


def _fit_scale(pairs, kind, first, step, centre=None, half_span=None) -> PolynomialMap:
    known = np.array([p.known_ri for p in pairs])
    if centre is None:
        centre = float((known.min() + known.max()) / 2)
        half_span = max(float(np.ptp(known)) / 2, 0.01)
    return fit_polynomial(_nominal(pairs, first, step), known, _sigmas(pairs, step),
                          SCALE_MODELS[kind], additive=True, kind=kind,
                          centre=centre, half_span=half_span, huber=HUBER_K)


def choose_model(pairs, first: float, step: float) -> tuple[str, str]:
    """Pick the scale-map kind the references support.

    A printed scale's usual faults are an offset and a gain error (a
    mis-scaled instrument), so offset and gain are both fitted as soon as three
    references can determine them; whether the evidence also asks for the
    smooth (quadratic) correction is decided by Akaike's criterion.  (Letting
    the criterion drop the gain as well leaves a real 1 % gain error
    uncorrected whenever the reader's stated uncertainties are generous.)

    Returns the kind and the reason in words.
    """
    pairs = as_pairs(pairs)
    allowed = allowed_models([p.known_ri for p in pairs])
    if not allowed:
        raise CalibrationError(f"too few references: {len(pairs)} edge(s) given, at least 2 needed")
    why = [f"{len(pairs)} reference edges allow {', '.join(allowed)}"]
    if len(allowed) < len(SCALE_MODELS):
        nxt = [k for k in SCALE_MODELS if k not in allowed][0]
        need = ("references in the middle half of the range" if nxt == "smooth" and len(pairs) >= 5
                else f"{SCALE_MODEL_MIN_REFS[nxt]} references")
        why.append(f"{nxt} needs {need}")
    best = "offset+gain" if "offset+gain" in allowed else "offset"
    if "smooth" in allowed:
        aic = {k: _fit_scale(pairs, k, first, step).chi2 + 2 * SCALE_MODELS[k]
               for k in ("offset+gain", "smooth")}
        if aic["smooth"] < aic["offset+gain"]:
            best = "smooth"
        why.append("AIC (chi2 + 2k, lower is better): "
                   + ", ".join(f"{k} {v:.1f}" for k, v in aic.items()))
    return best, f"{best}: " + "; ".join(why)


# --------------------------------------------------------------------------- leave-one-out and outliers


@dataclass(frozen=True)
class Suspect:
    """A reference that disagrees with what the others predict."""

    index: int
    label: str
    known_ri: float
    predicted_ri: float
    sigmas: float

    @property
    def shift(self) -> float:
        return self.known_ri - self.predicted_ri

    def describe(self) -> str:
        return (f"{self.label} (known {self.known_ri:.4f}) reads as {self.predicted_ri:.4f} by the other "
                f"references: {self.shift:+.4f} RI, {self.sigmas:.1f} sigma")


def _loo(pairs, kind, first, step) -> tuple[np.ndarray, np.ndarray] | None:
    """Leave-one-out predictions of each reference's RI and their uncertainties."""
    n = len(pairs)
    if n - 1 < SCALE_MODELS[kind]:
        return None
    pred = np.empty(n)
    sig = np.empty(n)
    for i in range(n):
        rest = pairs[:i] + pairs[i + 1:]
        m = _fit_scale(rest, kind, first, step)
        x = first + step * pairs[i].scale_position
        pred[i] = float(m.value(x))
        sig[i] = float(m.sigma(x))
    return pred, sig


def find_suspects(pairs, first: float, step: float) -> tuple[Suspect, ...]:
    """References that no allowed model reconciles with the others.

    For the offset and the offset+gain kinds (as allowed), each reference is
    predicted from the others (leave-one-out).  A reference is suspect when it
    sits beyond :data:`OUTLIER_SIGMAS` sigmas and :data:`OUTLIER_MIN_SHIFT` RI
    under *both*: a genuine gain error is explained by the offset+gain kind and
    so is not mistaken for a wrong stone.  The smooth kind is not asked: left
    out at an end of the range, a reference is predicted by a quadratic
    extrapolated from the others, whose wide uncertainty forgave readings 0.009
    off at 10 sigma (tuning setups 30000-30011), and the smooth kind then bent
    the map to them.  The worst is removed and the search repeated, while at
    least two references remain.
    """
    pairs = list(as_pairs(pairs))
    index = list(range(len(pairs)))
    found: list[Suspect] = []
    while len(pairs) >= 2:
        known = np.array([p.known_ri for p in pairs])
        kinds = [k for k in allowed_models(known)
                 if k != "smooth" and len(pairs) - 1 >= SCALE_MODELS[k]]
        if not kinds:
            break
        # per reference: the smallest deviation any allowed kind leaves (the most forgiving verdict)
        min_z = np.full(len(pairs), np.inf)
        min_pred = np.zeros(len(pairs))
        flagged_by_all = np.ones(len(pairs), bool)
        for k in kinds:
            pred, sig = _loo(tuple(pairs), k, first, step)
            z = np.abs(known - pred) / np.sqrt(_sigmas(pairs, step) ** 2 + sig**2)
            flagged_by_all &= (z > OUTLIER_SIGMAS) & (np.abs(known - pred) > OUTLIER_MIN_SHIFT)
            better = z < min_z
            min_pred = np.where(better, pred, min_pred)
            min_z = np.where(better, z, min_z)
        if not flagged_by_all.any():
            break
        worst_z = np.where(flagged_by_all, min_z, 0.0)
        best_pred = min_pred
        if len(pairs) == 2:
            a, b = pairs
            raise SuspectReferenceError(
                f"the two references disagree: {a.label} and {b.label} differ by "
                f"{abs((b.known_ri - a.known_ri) - step * (b.scale_position - a.scale_position)):.4f} RI "
                "beyond an offset: one may be mislabelled, or the scale has a gain error; add a third reference",
                tuple(Suspect(index[i], p.label, p.known_ri, float(best_pred[i]), float(worst_z[i]))
                      for i, p in enumerate(pairs)))
        i = int(np.argmax(worst_z))
        found.append(Suspect(index[i], pairs[i].label, pairs[i].known_ri, float(best_pred[i]),
                             float(worst_z[i])))
        del pairs[i]
        del index[i]
    return tuple(found)


# --------------------------------------------------------------------------- the fit


@dataclass(frozen=True)
class ReferenceResult:
    """How one reference sits on the fitted map."""

    label: str
    known_ri: float
    scale_position: float
    scale_uncertainty: float
    field_position: float | None
    measured_ri: float
    residual: float  # measured - known
    loo_residual: float | None  # predicted by the others - known
    field_residual: float | None
    excluded: bool = False


@dataclass(frozen=True)
class CalibrationFit:
    """Result of :func:`fit_calibration`: the maps, the references' residuals and the warnings."""

    first: float
    step: float
    scale_map: PolynomialMap
    model_reason: str
    field_map: PolynomialMap | None
    field_reason: str
    references: tuple[ReferenceResult, ...]
    residual_rms: float
    loo_rms: float | None
    field_residual_rms: float | None
    field_loo_rms: float | None
    valid_range: tuple[float, float]
    field_valid_range: tuple[float, float] | None
    suspects: tuple[Suspect, ...] = ()
    warnings: tuple[str, ...] = field(default_factory=tuple)

    @property
    def model(self) -> str:
        return self.scale_map.kind

    @property
    def offset(self) -> float:
        return self.scale_map.centre_offset

    @property
    def gain_error(self) -> float:
        return self.scale_map.centre_gain_error


def _fit_field_on(usable, step):
    """Field map of the best degree (Akaike) on ``usable`` pairs: (map, reason, left-out residuals or None)."""
    f = np.array([p.field_position for p in usable])
    y = np.array([p.known_ri for p in usable])
    # equal weights: a reference's field-position error (the phone's tilt, the stop's outline in
    # that photo) has nothing to do with its graduation reading's uncertainty; the covariance is
    # then scaled by the scatter (Birge).  On tuning seeds (16 setups, 30000.. and 40000..) the
    # map's error at the true positions: p95 0.0089 -> 0.0072 RI, within 2 sigma 68 % -> 85 %.
    s = np.full(len(usable), float(np.median(_sigmas(usable, step))))
    centre = float((f.min() + f.max()) / 2)
    half = max(float(np.ptp(f)) / 2, 1e-3)
    degrees = [d for d in range(1, FIELD_MAX_DEGREE + 1) if len(usable) >= d + 1]
    fits = {d: fit_polynomial(f, y, s, d + 1, additive=False, kind=f"field-degree-{d}",
                              centre=centre, half_span=half) for d in degrees}
    aic = {d: m.chi2 + 2 * (d + 1) for d, m in fits.items()}
    best = min(degrees, key=lambda d: (aic[d], d))
    reason = (f"field-degree-{best}: polynomial in field radii, {len(usable)} references; AIC "
              + ", ".join(f"degree {d} {aic[d]:.1f}" for d in degrees)
              + "; lower precision than the graduations"
              + ("; as many terms as references, so it cannot check itself" if fits[best].dof == 0 else ""))
    loo = None
    if len(usable) - 1 >= best + 1:
        loo = np.empty(len(usable))
        for i in range(len(usable)):
            keep = np.arange(len(usable)) != i
            m = fit_polynomial(f[keep], y[keep], s[keep], best + 1, additive=False, kind="",
                               centre=centre, half_span=half)
            loo[i] = float(m.value(f[i])) - y[i]
    return fits[best], reason, loo


def _fit_field(pairs, step) -> tuple[PolynomialMap | None, str, np.ndarray | None, tuple]:
    """The field-frame map: (map or None, reason, left-out residuals, pairs it was fitted on).

    When the references' left-out predictions scatter more than :data:`FIELD_MAX_LOO`, the
    worst-predicted reference is left out of this map (not of the scale map) and the map fitted
    again, up to :data:`FIELD_MAX_LEFT_OUT` times while :data:`FIELD_MIN_KEPT` remain; the
    reason names each one left out and by how much it missed.
    """
    usable = [p for p in pairs if p.field_position is not None and math.isfinite(p.field_position)]
    if len(usable) < FIELD_MIN_REFS:
        return None, (f"no field-frame fallback: it needs {FIELD_MIN_REFS} references with a field "
                      f"position, {len(usable)} given"), None, ()
    left_out = []
    while True:
        fit, reason, loo = _fit_field_on(usable, step)
        if loo is None:
            break
        loo_rms = float(np.sqrt(np.mean(loo**2)))
        if loo_rms <= FIELD_MAX_LOO:
            break
        if len(left_out) >= FIELD_MAX_LEFT_OUT or len(usable) - 1 < FIELD_MIN_KEPT:
            return None, (f"no field-frame fallback: the references' field positions are inconsistent "
                          f"(left-out RMS {loo_rms:.4f} RI with {fit.kind}"
                          + (f", {len(left_out)} left out" if left_out else "") + ")"), None, ()
        worst = int(np.argmax(np.abs(loo)))
        left_out.append((usable[worst].label or f"reference at {usable[worst].known_ri:.4f}", float(loo[worst])))
        usable = usable[:worst] + usable[worst + 1:]
    if left_out:
        reason += "; left out of the field-frame map (field position inconsistent with the others): " + ", ".join(
            f"{label} (missed by {miss:+.4f} RI)" for label, miss in left_out)
    return fit, reason, loo, tuple(usable)


def fit_calibration(pairs, *, first: float = 1.30, step: float = 0.01, model: str | None = None,
                    exclude: Iterable[int] = (), force: bool = False) -> CalibrationFit:
    """Fit the scale map (and the field-frame fallback) on reference pairs.

    Parameters
    ----------
    pairs : iterable of ReferencePair or (scale_position, scale_uncertainty, field_position, known_ri)
    first, step : float
        The printed scale: nominal value ``first + step * scale_position``.
    model : str, optional
        Force a scale-map kind (``"offset"``, ``"offset+gain"``, ``"smooth"``)
        instead of choosing by the evidence; it must still be allowed.
    exclude : iterable of int
        Indices of pairs left out of the fit (kept in the record, marked excluded).
    force : bool
        Fit even when a reference is suspect (recorded as a warning).

    Raises
    ------
    CalibrationError
        Too few references, references all at one end of the scale, a
        requested model the references cannot support.
    SuspectReferenceError
        A reference disagrees with the others (named, with its distance in
        sigmas and RI) and neither ``exclude`` nor ``force`` deals with it.
    """
    every = as_pairs(pairs)
    excluded = set(int(i) for i in exclude)
    bad_index = sorted(i for i in excluded if not 0 <= i < len(every))
    if bad_index:
        raise CalibrationError(f"cannot exclude reference {bad_index[0] + 1}: only {len(every)} given")
    used = tuple(p for i, p in enumerate(every) if i not in excluded)
    used_index = [i for i in range(len(every)) if i not in excluded]
    if len(used) < 2:
        raise CalibrationError(f"too few references: {len(used)} edge(s) left to fit, at least 2 needed")
    known = np.array([p.known_ri for p in used])
    span = float(np.ptp(known))
    if span < MIN_SPAN:
        raise CalibrationError(
            f"references all at one end of the scale: known RIs span only {known.min():.4f} to "
            f"{known.max():.4f} ({span:.4f}); at least {MIN_SPAN} is needed: add a reference from "
            "the other end")
    warnings: list[str] = []

    suspects = find_suspects(used, first, step) if len(used) >= 2 else ()
    suspects = tuple(Suspect(used_index[s.index], s.label, s.known_ri, s.predicted_ri, s.sigmas)
                     for s in suspects)
    if suspects and not force:
        names = "; ".join(s.describe() for s in suspects)
        raise SuspectReferenceError(
            f"suspect reference: {names}. Check its label, then exclude it or force the fit", suspects)
    for s in suspects:
        warnings.append(f"kept by force though suspect: {s.describe()}")

    allowed = allowed_models(known)
    if model is not None:
        if model not in SCALE_MODELS:
            raise CalibrationError(f"unknown model {model!r}: use one of {', '.join(SCALE_MODELS)}")
        if model not in allowed:
            raise CalibrationError(
                f"model {model} needs {SCALE_MODEL_MIN_REFS[model]} references"
                + (" spread over the range" if model == "smooth" else "") + f"; {len(used)} given")
        kind, reason = model, f"{model}: requested by the user ({len(used)} references)"
    else:
        kind, reason = choose_model(used, first, step)
    scale_map = _fit_scale(used, kind, first, step)
    if scale_map.dof == 0:
        warnings.append("as many model terms as references: the fit cannot check itself (add a reference)")
    if scale_map.birge_ratio > 2:
        warnings.append(f"references scatter {scale_map.birge_ratio:.1f} times more than their stated "
                        "uncertainties: the uncertainties were enlarged to match")
    loo = _loo(used, kind, first, step)
    field_map, field_reason, field_loo, field_used = _fit_field(used, step)
    in_field_map = {id(p) for p in field_used}
    results = []
    k_used = 0
    for i, p in enumerate(every):
        x = first + step * p.scale_position
        meas = float(scale_map.value(x))
        fres = None
        if field_map is not None and p.field_position is not None and math.isfinite(p.field_position):
            fres = float(field_map.value(p.field_position)) - p.known_ri
        is_used = i not in excluded
        lr = None
        if is_used and loo is not None:
            lr = float(loo[0][k_used]) - p.known_ri
        if is_used:
            k_used += 1
        results.append(ReferenceResult(
            label=p.label, known_ri=p.known_ri, scale_position=p.scale_position,
            scale_uncertainty=p.scale_uncertainty, field_position=p.field_position,
            measured_ri=meas, residual=meas - p.known_ri, loo_residual=lr,
            field_residual=fres, excluded=not is_used))
    used_res = np.array([r.residual for r in results if not r.excluded])
    loo_res = [r.loo_residual for r in results if not r.excluded and r.loo_residual is not None]
    field_res = [r.field_residual for r, p in zip(results, every, strict=True)
                 if id(p) in in_field_map and r.field_residual is not None]
    lo, hi = float(known.min()) - VALID_MARGIN, float(known.max()) + VALID_MARGIN
    fvr = None
    if field_map is not None:
        fp = np.array([p.field_position for p in field_used])
        fvr = (float(fp.min()), float(fp.max()))
    if field_map is None or "left out of the field-frame map" in field_reason:
        warnings.append(field_reason)
    for i in sorted(excluded):
        warnings.append(f"excluded by the user: {every[i].label} (known {every[i].known_ri:.4f})")
    return CalibrationFit(
        first=first, step=step, scale_map=scale_map, model_reason=reason,
        field_map=field_map, field_reason=field_reason, references=tuple(results),
        residual_rms=float(np.sqrt(np.mean(used_res**2))),
        loo_rms=float(np.sqrt(np.mean(np.square(loo_res)))) if loo_res else None,
        field_residual_rms=float(np.sqrt(np.mean(np.square(field_res)))) if field_res else None,
        field_loo_rms=(float(np.sqrt(np.mean(np.square(field_loo)))) if field_loo is not None else None),
        valid_range=(lo, hi), field_valid_range=fvr, suspects=suspects, warnings=tuple(warnings))
