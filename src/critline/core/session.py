"""Session analysis: one stone's readings reduced to RI, birefringence, optic character and sign.

A session is the set of photos (observations) taken of one stone: the stone
turned on the prism in steps, each position read with or without a
polarising filter.  Each observation gives the RI of the stone's shadow
edges seen in that photo, each with its uncertainty.

The reduction follows the textbook rules of refractometry (e.g. B. W.
Anderson, "Gem Testing"; R. Webster, "Gems"; summarised in the team's
domain notes):

* singly refractive: one edge that does not move with rotation or polariser;
* uniaxial: one edge constant (omega), the other moving (epsilon prime) and
  reaching epsilon; positive when the moving edge lies above the constant
  one.  Both edges constant: the facet is perpendicular to the optic axis,
  the full birefringence shows, but which edge is omega (and so the sign)
  cannot be decided from that facet;
* biaxial: both edges move; alpha is the lowest reading of the low edge,
  gamma the highest of the high edge, and beta is either the highest reading
  of the low edge or the lowest of the high edge.  Positive when
  beta - alpha < gamma - beta; when the two candidate betas give different
  signs the sign is undetermined.

"Constant" and "moving" are decided statistically from the readings' own
uncertainties: an edge moves when a chi-square test rejects a single
constant value for its readings at the significance :data:`MOVING_ALPHA`;
two edges at one position are distinct when they differ by more than
:data:`SPLIT_Z` combined standard uncertainties.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.special import chdtrc, ndtri  # chi-square survival, inverse normal CDF

from critline.errors import UsageError

__all__ = [
    "ADR_MAX_BIREFRINGENCE",
    "MIN_POSITIONS",
    "MOVING_ALPHA",
    "Observation",
    "ReadingError",
    "SessionAnalysis",
    "SPLIT_Z",
    "SPOT_PRECISION",
    "analyse_session",
]

#: lowest and highest refractive index accepted as a reading
RI_LIMITS = (1.0, 3.5)
#: smallest standard uncertainty used in the statistics (a typed-in 0 means "very good")
UNCERTAINTY_FLOOR = 1e-5
#: significance of the chi-square test that calls an edge "moving"
MOVING_ALPHA = 1e-4
#: two edges at one position are distinct beyond this many combined standard uncertainties
SPLIT_Z = 3.5
#: a candidate beta decides the sign only beyond this many standard uncertainties
SIGN_Z = 2.5
#: fewest stone positions for a statement about optic character
MIN_POSITIONS = 3
#: fewer positions than this get the 'too_few_positions' flag (common practice: every 45 degrees
#: or finer through 180 degrees)
RECOMMENDED_POSITIONS = 4
#: splitting below this, seen at only some positions, may be anomalous double refraction
ADR_MAX_BIREFRINGENCE = 0.006
#: precision of a spot (distance) reading, +-; common practice, no source
SPOT_PRECISION = 0.01


class ReadingError(UsageError, ValueError):
    """Readings that cannot be analysed (out of range, negative uncertainty, contradictory)."""


def _edge(value, where: str) -> tuple[float, float]:
    try:
        ri, unc = value
        ri, unc = float(ri), float(unc)
    except (TypeError, ValueError):
        raise ReadingError(f"{where}: an edge is an (ri, uncertainty) pair, got {value!r}") from None
    if not math.isfinite(ri) or not (RI_LIMITS[0] <= ri <= RI_LIMITS[1]):
        raise ReadingError(f"{where}: RI {ri} is outside {RI_LIMITS[0]}-{RI_LIMITS[1]}")
    if not math.isfinite(unc) or unc < 0:
        raise ReadingError(f"{where}: uncertainty {unc} must be zero or positive")
    return ri, unc


@dataclass(frozen=True)
class Observation:
    """What one photo of the stone showed.

    Attributes
    ----------
    edges : tuple of (ri, uncertainty)
        The stone's shadow edges in this photo (0, 1 or 2); the liquid line is not one.
    rotation : float or None
        Degrees the stone was turned on the prism; ``None`` when not recorded.
    polariser : float or None
        Polariser orientation in degrees; ``None`` when no polariser was used or it is unknown.
    over_limit : bool
        The stone's index (or one of its rays) is above the contact liquid's: only the liquid line
        is seen for it.  Stone edges still visible below the limit go in ``edges``.
    spot : bool
        A spot (distance) reading on a curved surface, precision about +-0.01.
    label : str
        Photo name, for messages.
    """

    edges: tuple[tuple[float, float], ...] = ()
    rotation: float | None = None
    polariser: float | None = None
    over_limit: bool = False
    spot: bool = False
    label: str = ""

    def __post_init__(self):
        where = self.label or "reading"
        edges = tuple(_edge(e, where) for e in self.edges)
        object.__setattr__(self, "edges", tuple(sorted(edges)))
        for name in ("rotation", "polariser"):
            value = getattr(self, name)
            if value is not None and not math.isfinite(float(value)):
                raise ReadingError(f"{where}: {name} {value!r} is not a number of degrees")
        if self.spot and self.over_limit:
            raise ReadingError(f"{where}: a reading cannot be both a spot reading and over the limit")
        if self.spot and not edges:
            raise ReadingError(f"{where}: a spot reading needs its value")


@dataclass(frozen=True)
class SessionAnalysis:
    """The reduction of one stone's readings (values are RI at 589.3 nm).

    ``ri_low``/``ri_high`` are the lowest and highest index found (for a
    biaxial stone alpha and gamma, for a uniaxial one omega and epsilon in
    order); ``None`` where the readings give none (e.g. all over the limit:
    then ``ri_low`` is the liquid's index, a lower bound, and ``ri_high`` is
    ``None``).  ``notes`` explain in plain words what was and was not decided.
    """

    ri_low: float | None
    ri_high: float | None
    birefringence: float | None
    birefringence_uncertainty: float | None
    uncertainty: float | None
    optic_character: str  # isotropic | uniaxial | biaxial | undetermined
    optic_sign: str | None
    beta: float | None
    over_limit: bool
    spot_ri: float | None
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    beta_candidates: tuple[float, ...] = ()
    omega: float | None = None
    epsilon: float | None = None
    positions: int = 0
    readings: int = 0
    liquid_ri: float | None = None
    spot_uncertainty: float | None = None
    observations: tuple[Observation, ...] = field(default=(), repr=False, compare=False)

    @property
    def doubly_refractive(self) -> bool | None:
        if self.optic_character in ("uniaxial", "biaxial"):
            return True
        if self.optic_character == "isotropic":
            return False
        return None

    def to_json(self) -> dict:
        """The per-stone fields of the ``critline.batch/1`` document (design.md), plus details."""

        def r4(x):
            return None if x is None else round(float(x), 4)

        return {
            "ri_low": r4(self.ri_low),
            "ri_high": r4(self.ri_high),
            "birefringence": r4(self.birefringence),
            "birefringence_uncertainty": r4(self.birefringence_uncertainty),
            "uncertainty": r4(self.uncertainty),
            "optic_character": self.optic_character,
            "optic_sign": self.optic_sign,
            "beta": r4(self.beta),
            "beta_candidates": [r4(b) for b in self.beta_candidates],
            "over_limit": self.over_limit,
            "spot_ri": r4(self.spot_ri),
            "positions": self.positions,
            "flags": list(self.flags),
            "notes": list(self.notes),
        }


# --------------------------------------------------------------------------- statistics


@dataclass(frozen=True)
class _Reading:
    ri: float
    u: float
    rotation: float | None = None
    #: an extreme read at discrete rotations: the true extreme may lie up to this much further out
    slack: float = 0.0

    @property
    def total_u(self) -> float:
        """Standard uncertainty including the sampling slack (taken as two standard uncertainties)."""
        return math.hypot(self.u, 0.5 * self.slack)


def _weighted_mean(readings: Sequence[_Reading]) -> _Reading:
    w = np.array([1.0 / max(r.u, UNCERTAINTY_FLOOR) ** 2 for r in readings])
    x = np.array([r.ri for r in readings])
    mean = float(np.sum(w * x) / np.sum(w))
    return _Reading(mean, float(1.0 / math.sqrt(np.sum(w))))


def _moves(readings: Sequence[_Reading]) -> bool:
    """True when a chi-square test rejects one constant value for these readings."""
    if len(readings) < 2:
        return False
    mean = _weighted_mean(readings).ri
    chi2 = sum(((r.ri - mean) / max(r.u, UNCERTAINTY_FLOOR)) ** 2 for r in readings)
    return bool(chdtrc(len(readings) - 1, chi2) < MOVING_ALPHA)


def _distinct(a: _Reading, b: _Reading, z: float) -> bool:
    return abs(a.ri - b.ri) > z * math.hypot(max(a.u, UNCERTAINTY_FLOOR), max(b.u, UNCERTAINTY_FLOOR))


@dataclass
class _Position:
    label: str
    low: _Reading | None = None
    high: _Reading | None = None
    complete: bool = False  # both rays looked at (no polariser, or both polariser orientations)
    one_edge: bool = False  # both rays looked at, one edge seen: the rays coincide
    two_edges: bool = False  # one photo showed two edges
    single: _Reading | None = None  # one ray of unknown identity (polariser in one orientation)
    extra_edges: int = 0

    @property
    def split(self) -> float:
        return self.high.ri - self.low.ri if self.complete else 0.0

    @property
    def split_u(self) -> float:
        return math.hypot(max(self.low.u, UNCERTAINTY_FLOOR), max(self.high.u, UNCERTAINTY_FLOOR))

    def split_significant(self) -> bool:
        return self.complete and self.split > SPLIT_Z * self.split_u


def _positions(observations: Sequence[Observation]) -> list[_Position]:
    """Group photos by stone position and pair their edges into (low ray, high ray).

    Photos with the same recorded rotation are one position; a photo without a
    rotation is a position of its own.  An unpolarised photo shows both rays:
    two edges are the low and high ray, one edge means they coincide.  Photos
    with the polariser at two orientations (mod 180 degrees) at one position
    give one ray each.  Photos of the same setting are averaged.
    """
    groups: dict[object, list[Observation]] = {}
    for i, obs in enumerate(observations):
        key = ("rot", round(float(obs.rotation), 3)) if obs.rotation is not None else ("photo", i)
        groups.setdefault(key, []).append(obs)
    positions = []
    for key, group in groups.items():
        label = f"rotation {key[1]:g} deg" if key[0] == "rot" else (group[0].label or f"photo {key[1] + 1}")
        pos = _Position(label)
        lows: list[_Reading] = []
        highs: list[_Reading] = []
        by_orientation: dict[float, list[_Reading]] = {}
        for obs in group:
            edges = [_Reading(ri, u) for ri, u in obs.edges]
            if not edges:
                continue
            if obs.polariser is None or len(edges) >= 2:
                lows.append(edges[0])
                highs.append(edges[-1])
                pos.extra_edges += max(len(edges) - 2, 0)
                pos.one_edge = pos.one_edge or len(edges) == 1
                pos.two_edges = pos.two_edges or len(edges) >= 2
            else:
                by_orientation.setdefault(round(float(obs.polariser) % 180.0, 1), []).extend(edges)
        rays = sorted((_weighted_mean(v) for v in by_orientation.values()), key=lambda r: r.ri)
        if len(rays) >= 2:
            lows.append(rays[0])
            highs.append(rays[-1])
            pos.extra_edges += len(rays) - 2
        rotation = key[1] % 180.0 if key[0] == "rot" else None
        if lows:
            pos.low = replace(_weighted_mean(lows), rotation=rotation)
            pos.high = replace(_weighted_mean(highs), rotation=rotation)
            pos.complete = True
        elif rays:
            pos.single = replace(rays[0], rotation=rotation)
        else:
            continue
        positions.append(pos)
    return positions


def _two_clusters(readings: Sequence[_Reading]) -> tuple[list[_Reading], list[_Reading]] | None:
    """Split single-ray readings at their largest significant gap into a low and a high edge."""
    ordered = sorted(readings, key=lambda r: r.ri)
    best, best_gap = None, 0.0
    for i in range(len(ordered) - 1):
        gap = ordered[i + 1].ri - ordered[i].ri
        if gap > best_gap:
            best, best_gap = i, gap
    if best is None:
        return None
    low, high = ordered[: best + 1], ordered[best + 1 :]
    if not _distinct(_weighted_mean(low), _weighted_mean(high), SPLIT_Z) or _moves_beyond(low, high):
        return None
    return low, high


def _moves_beyond(low, high) -> bool:
    # the gap must be larger than the spread inside each cluster, or it is one moving edge
    spread = max(low[-1].ri - low[0].ri, high[-1].ri - high[0].ri)
    return (high[0].ri - low[-1].ri) < 0.5 * spread


def _fmt(x: float) -> str:
    return f"{x:.4f}"


def _constant_value(series: Sequence[_Reading]) -> _Reading:
    """A constant edge: the weighted mean, uncertain by at least half the band the readings span."""
    mean = _weighted_mean(series)
    spread = max(r.ri for r in series) - min(r.ri for r in series)
    return _Reading(mean.ri, max(mean.u, 0.5 * spread))


def _largest_gap(series: Sequence[_Reading]) -> float:
    """Largest rotation gap (degrees, modulo 180) between the positions of a series."""
    if any(r.rotation is None for r in series):
        return 180.0 / max(len(series), 1)
    rotations = sorted({round(r.rotation % 180.0, 6) for r in series})
    if len(rotations) < 2:
        return 180.0
    gaps = [b - a for a, b in zip(rotations, rotations[1:], strict=False)]
    gaps.append(rotations[0] + 180.0 - rotations[-1])
    return max(gaps)


def _sinusoid_extreme(series: Sequence[_Reading], highest: bool) -> _Reading | None:
    """Extreme of a moving edge from a least-squares fit over the stone's rotation.

    For the moving edge of a uniaxial stone, ``1/n^2`` is exactly
    ``c + a cos(2 phi) + b sin(2 phi)`` in the rotation ``phi`` (the
    extraordinary index ``1/n^2 = cos^2(theta)/omega^2 + sin^2(theta)/epsilon^2``
    with ``cos(theta)`` proportional to ``cos(phi - phi0)`` on the facet); a
    biaxial edge is only roughly so.  The fit uses every reading, so its extreme is
    free of the sampling step and of the upward bias of a noisy maximum.
    Returns ``None`` when the rotations are unknown, too few or too sparse, or
    the readings do not follow the model (chi-square test at 1e-3).
    """
    if any(r.rotation is None for r in series):
        return None
    if len({round(r.rotation % 180.0, 6) for r in series}) < 4 or _largest_gap(series) > 90.0:
        return None
    n = np.array([r.ri for r in series])
    phi = np.radians([r.rotation for r in series])
    y = 1.0 / n**2
    sy = 2.0 * np.array([max(r.u, UNCERTAINTY_FLOOR) for r in series]) / n**3
    design = np.column_stack([np.ones_like(phi), np.cos(2 * phi), np.sin(2 * phi)])
    w = 1.0 / sy**2
    normal = design.T @ (design * w[:, None])
    try:
        cov = np.linalg.inv(normal)
    except np.linalg.LinAlgError:
        return None
    c, a, b = cov @ (design.T @ (w * y))
    chi2 = float(np.sum(w * (y - design @ np.array([c, a, b])) ** 2))
    dof = len(series) - 3
    if dof >= 1:
        if chdtrc(dof, chi2) < 1e-3:
            return None
        cov = cov * max(1.0, chi2 / dof)  # scale by the reduced chi-square when above 1
    radius = math.hypot(a, b)
    if radius <= 0.0:
        return None
    sign = -1.0 if highest else 1.0  # the highest index is the smallest 1/n^2
    y_ext = c + sign * radius
    if y_ext <= 0:
        return None
    grad = np.array([1.0, sign * a / radius, sign * b / radius])
    u_y = math.sqrt(max(float(grad @ cov @ grad), 0.0))
    ri = y_ext**-0.5
    phi_ext = 0.5 * math.degrees(math.atan2(b, a)) + (90.0 if highest else 0.0)
    return _Reading(float(ri), float(0.5 * y_ext**-1.5 * u_y), phi_ext % 180.0)


def _extreme(series: Sequence[_Reading], highest: bool, uniaxial: bool = False) -> _Reading:
    """Highest (or lowest) value a moving edge reaches, with an honest uncertainty.

    For the moving edge of a uniaxial stone, the least-squares fit of
    :func:`_sinusoid_extreme` when it applies (the model is exact there; a
    biaxial edge can have a sharp turn near an optic axis that a sinusoid
    misses, so biaxial edges are not fitted); else the
    extreme reading, its uncertainty widened by how far the true extreme can lie
    between two positions (a sinusoid of amplitude ``A`` sampled every ``g``
    degrees of rotation misses its extreme by at most ``A (1 - cos g)``).
    """
    fitted = _sinusoid_extreme(series, highest) if uniaxial else None
    if fitted is not None:
        return fitted
    pick = max if highest else min
    sampled = pick(series, key=lambda r: r.ri)
    amplitude = 0.5 * (max(r.ri for r in series) - min(r.ri for r in series))
    bound = amplitude * (1.0 - math.cos(math.radians(_largest_gap(series))))
    # when several readings sit near the extreme, the largest of them is biased outward by the
    # expected maximum of that many noise draws: count it as uncertainty
    near = sum(1 for r in series if abs(r.ri - sampled.ri) <= 2.0 * max(r.u, sampled.u))
    u = sampled.u * math.hypot(1.0, _expected_max_of_normals(near))
    return _Reading(sampled.ri, u, sampled.rotation, slack=bound)


def _expected_max_of_normals(k: int) -> float:
    """Expected largest of ``k`` standard normal draws (Blom's approximation, G. Blom 1958)."""
    if k < 2:
        return 0.0
    return float(ndtri((k - 0.375) / (k + 0.25)))


# --------------------------------------------------------------------------- analysis


def analyse_session(
    observations: Iterable[Observation], liquid_ri: float | None = None
) -> SessionAnalysis:
    """Reduce one stone's observations to RI range, birefringence, optic character and sign.

    Parameters
    ----------
    observations : iterable of Observation
        Every photo (or typed-in reading) of the stone.
    liquid_ri : float, optional
        Index of the contact liquid (the instrument's limit).  When given, a
        stone edge above it is refused as impossible, and an over-the-limit
        session reports it as the lower bound of the stone's index.

    Returns
    -------
    SessionAnalysis

    Raises
    ------
    ReadingError
        No readings at all, a value out of range, or contradictory readings.
    """
    observations = tuple(observations)
    if not observations:
        raise ReadingError("no readings: give at least one edge, spot reading or over-the-limit observation")
    if liquid_ri is not None:
        liquid_ri = float(liquid_ri)
        if not (RI_LIMITS[0] < liquid_ri < RI_LIMITS[1]):
            raise ReadingError(f"contact liquid RI {liquid_ri} is outside {RI_LIMITS[0]}-{RI_LIMITS[1]}")
        for obs in observations:
            for ri, u in obs.edges:
                if not obs.spot and ri > liquid_ri + max(3 * u, 0.002):
                    raise ReadingError(
                        f"{obs.label or 'reading'}: RI {ri} is above the contact liquid's {liquid_ri}; "
                        "the refractometer cannot show a stone edge there"
                    )

    flags: list[str] = []
    notes: list[str] = []
    spot_obs = [o for o in observations if o.spot]
    limit_obs = [o for o in observations if o.over_limit]
    edge_obs = [o for o in observations if not o.spot and o.edges]
    n_readings = sum(len(o.edges) for o in observations)

    spot_ri = spot_unc = None
    if spot_obs:
        spots = [_Reading(ri, max(u, SPOT_PRECISION / 2)) for o in spot_obs for ri, u in o.edges]
        mean = _weighted_mean(spots)
        spot_ri, spot_unc = mean.ri, max(mean.u, SPOT_PRECISION / 2)
        lo, hi = min(s.ri for s in spots), max(s.ri for s in spots)
        if hi - lo > 2 * SPOT_PRECISION:
            flags.append("spot_blinks")
            notes.append(
                f"Spot readings range from {lo:.2f} to {hi:.2f}: a large birefringence "
                "(or an aggregate of a strongly birefringent mineral) makes the spot blink."
            )
        notes.append(f"Spot reading {spot_ri:.2f} (+-{SPOT_PRECISION:.2f}): two decimals only.")

    over_limit = bool(limit_obs)
    if over_limit:
        flags.append("over_limit")
        shown = liquid_ri if liquid_ri is not None else None
        bound = f"{shown:.3f}" if shown is not None else "the contact liquid's index"
        if any(o.edges for o in limit_obs) or edge_obs:
            notes.append(f"One ray is over the limit: above {bound}.")
        else:
            notes.append(f"Over the limit: the stone's index is above {bound}; no stone edge seen.")

    positions = _positions(edge_obs)
    n_positions = len(positions)

    if not positions and not spot_obs and not over_limit:
        raise ReadingError(
            f"no stone edge in any of the {len(observations)} reading(s): nothing to analyse"
        )
    if not positions:
        # only spot and/or over-the-limit readings
        if spot_obs:
            lo = min(ri for o in spot_obs for ri, _ in o.edges)
            hi = max(ri for o in spot_obs for ri, _ in o.edges)
            notes.append("Optic character needs a flat facet on the prism: not decidable from spot readings.")
            return _result(
                ri_low=lo, ri_high=hi, birefringence=None, birefringence_uncertainty=None,
                uncertainty=spot_unc, character="undetermined", sign=None, beta=None,
                over_limit=over_limit, spot_ri=spot_ri, spot_uncertainty=spot_unc, flags=flags,
                notes=notes, positions=0, readings=n_readings, liquid_ri=liquid_ri,
                observations=observations,
            )
        notes.append("Optic character and sign cannot be read on a stone over the limit.")
        return _result(
            ri_low=liquid_ri, ri_high=None, birefringence=None, birefringence_uncertainty=None,
            uncertainty=None, character="undetermined", sign=None, beta=None,
            over_limit=True, spot_ri=None, spot_uncertainty=None, flags=flags, notes=notes,
            positions=0, readings=n_readings, liquid_ri=liquid_ri, observations=observations,
        )

    if any(o.rotation is None for o in edge_obs):
        flags.append("rotation_unknown")
        notes.append("Rotation not recorded for every photo: each such photo is taken as its own position.")
    if any(p.extra_edges for p in positions):
        flags.append("more_than_two_edges")
        notes.append(
            "More than two stone edges at one position: only the lowest and highest were used; "
            "check the photos for a liquid line or a misread."
        )
    if n_positions < RECOMMENDED_POSITIONS:
        flags.append("too_few_positions")
        notes.append(
            f"Only {n_positions} stone position(s): common practice is to turn the stone through "
            f"180 degrees in steps (at least {RECOMMENDED_POSITIONS} positions)."
        )

    typical_u = float(np.median([u for o in edge_obs for _, u in o.edges]))
    complete = [p for p in positions if p.complete]
    singles = [p.single for p in positions if p.single is not None]

    # ---- build the low and high edge series
    lows = [p.low for p in complete]
    highs = [p.high for p in complete]
    significant = [p for p in complete if p.split_significant()]
    # Double refraction: a clear split at one position, or splits that together are more than
    # their uncertainties allow (chi-square over all positions where both rays were looked at).
    split_chi2 = sum((p.split / p.split_u) ** 2 for p in complete)
    splits_add_up = bool(complete) and chdtrc(len(complete), split_chi2) < MOVING_ALPHA
    unpaired_clusters = None
    if singles:
        if complete:
            low_mean = _weighted_mean(lows).ri
            high_mean = _weighted_mean(highs).ri
            for s in singles:
                (lows if abs(s.ri - low_mean) <= abs(s.ri - high_mean) else highs).append(s)
        else:
            unpaired_clusters = _two_clusters(singles)
            if unpaired_clusters is None:
                lows = highs = list(singles)
            else:
                lows, highs = unpaired_clusters
    doubly = bool(significant) or splits_add_up or unpaired_clusters is not None

    def finish(character, sign=None, beta=None, low=None, high=None, candidates=(), omega=None,
               epsilon=None):
        low = low if low is not None else min(lows, key=lambda r: r.ri)
        high = high if high is not None else max(highs, key=lambda r: r.ri)
        bire = max(high.ri - low.ri, 0.0)
        bire_u = math.hypot(low.total_u, high.total_u)
        return _result(
            ri_low=low.ri, ri_high=high.ri,
            birefringence=bire, birefringence_uncertainty=bire_u,
            uncertainty=max(typical_u, low.total_u, high.total_u), character=character, sign=sign, beta=beta,
            over_limit=over_limit, spot_ri=spot_ri, spot_uncertainty=spot_unc, flags=flags,
            notes=notes, positions=n_positions, readings=n_readings, liquid_ri=liquid_ri,
            candidates=candidates, omega=omega, epsilon=epsilon, observations=observations,
        )

    if over_limit:
        low = min((r for p in positions for r in (p.low, p.single) if r is not None), key=lambda r: r.ri)
        if liquid_ri is not None:
            notes.append(f"Birefringence at least {liquid_ri - low.ri:.3f} (liquid minus the lowest edge).")
        notes.append(
            "Optic character and sign need both rays on the scale: undetermined while one is over the limit."
        )
        return _result(
            ri_low=low.ri, ri_high=None, birefringence=None, birefringence_uncertainty=None,
            uncertainty=max(typical_u, low.u), character="undetermined", sign=None, beta=None,
            over_limit=True, spot_ri=spot_ri, spot_uncertainty=spot_unc, flags=flags, notes=notes,
            positions=n_positions, readings=n_readings, liquid_ri=liquid_ri, observations=observations,
        )

    # ---- a single edge
    if not doubly:
        pooled = [
            r
            for p in positions
            for r in ((p.low,) if p.one_edge else (p.low, p.high) if p.complete else (p.single,))
        ]
        if _moves(pooled):
            flags.append("readings_spread")
            lo, hi = min(r.ri for r in pooled), max(r.ri for r in pooled)
            notes.append(
                f"One edge per position, but it moves from {_fmt(lo)} to {_fmt(hi)}, more than its "
                f"uncertainty (about +-{typical_u:.4f}) allows: either a doubly refractive stone read "
                "with one ray only, or readings that disagree. Optic character undetermined."
            )
            return finish("undetermined")
        mean = _constant_value(pooled)
        shown_two = sum(1 for p in complete if p.two_edges)
        if complete and shown_two >= 0.5 * len(complete):
            flags.append("unresolved_splitting")
            notes.append(
                f"Two edges were seen in {shown_two} of {len(complete)} positions, but they are closer "
                "than their uncertainties can separate: weak double refraction or anomalous double "
                "refraction. Optic character undetermined; sharper readings or a polariscope decide."
            )
            return finish("undetermined")
        if not complete:
            notes.append(
                "Every photo was taken with the polariser in one orientation: the other ray was not "
                "looked at, so single refraction cannot be concluded."
            )
            return finish("undetermined", low=mean, high=mean)
        if n_positions < MIN_POSITIONS:
            notes.append(
                f"One constant edge at {n_positions} position(s): read at least {MIN_POSITIONS} "
                "positions before calling the stone singly refractive."
            )
            return finish("undetermined", low=mean, high=mean)
        notes.append(
            f"One edge at {_fmt(mean.ri)}, constant within its uncertainty at {n_positions} positions: "
            "singly refractive (isotropic, amorphous, or an aggregate read as one edge)."
        )
        return finish("isotropic", low=mean, high=mean)

    # ---- anomalous double refraction: small, erratic splitting in an otherwise single edge
    max_split = max((p.split for p in complete), default=0.0)
    if complete and max_split < ADR_MAX_BIREFRINGENCE:
        coincident = sum(1 for p in complete if p.one_edge or not p.split_significant())
        fraction = coincident / len(complete)
        if fraction >= 1 / 3:
            flags.append("possible_anomalous_double_refraction")
            notes.append(
                f"A second edge at most {max_split:.4f} away, clearly split at {len(significant)} of "
                f"{len(complete)} positions only: strained singly refractive materials (some garnets, "
                "synthetic spinel, glass) show such anomalous double refraction. Check with a polariscope."
            )
            if fraction >= 0.5:
                notes.append("Optic character undetermined: too little evidence of true double refraction.")
                return finish("undetermined")

    if len(lows) < 2 or len(highs) < 2 or n_positions < MIN_POSITIONS:
        notes.append(
            f"Doubly refractive (birefringence about "
            f"{max(r.ri for r in highs) - min(r.ri for r in lows):.4f}), "
            f"but character and sign need readings at {MIN_POSITIONS} or more positions."
        )
        return finish("undetermined")

    low_moves, high_moves = _moves(lows), _moves(highs)
    low_const, high_const = _constant_value(lows), _constant_value(highs)
    if unpaired_clusters is not None:
        notes.append(
            "The rays were read one at a time without a record of the stone's rotation: the two "
            "edges are told apart by their values only."
        )

    if not low_moves and not high_moves:
        notes.append(
            f"Both edges constant ({_fmt(low_const.ri)} and {_fmt(high_const.ri)}) at {n_positions} "
            "positions: the facet is perpendicular to the optic axis of a uniaxial stone and the full "
            "birefringence shows; which edge is omega, and so the sign, cannot be decided from this "
            "facet. Read another facet."
        )
        return finish("uniaxial", low=low_const, high=high_const)

    if low_moves != high_moves:
        if not low_moves:  # constant low edge: omega below epsilon -> positive
            omega, epsilon, sign = low_const, _extreme(highs, highest=True, uniaxial=True), "+"
            low, high = omega, epsilon
        else:
            omega, epsilon, sign = high_const, _extreme(lows, highest=False, uniaxial=True), "-"
            low, high = epsilon, omega
        hidden = max(omega.u, 3 * typical_u)
        notes.append(
            f"One edge constant at {_fmt(omega.ri)} (omega), the other moving to {_fmt(epsilon.ri)} "
            f"(epsilon): uniaxial, {'positive' if sign == '+' else 'negative'}."
        )
        notes.append(
            "A biaxial stone cut perpendicular to a principal vibration direction, or one whose beta "
            f"lies within about {hidden:.4f} of the constant edge, would read the same; another facet "
            "decides."
        )
        return finish("uniaxial", sign=sign, low=low, high=high, omega=omega.ri, epsilon=epsilon.ri)

    # both edges move: biaxial
    alpha, gamma = _extreme(lows, highest=False), _extreme(highs, highest=True)
    beta_low, beta_high = _extreme(lows, highest=True), _extreme(highs, highest=False)
    candidates = (beta_low.ri, beta_high.ri)

    def sign_for(beta: _Reading, beta_is_max: bool) -> str | None:
        # d = (beta - alpha) - (gamma - beta): negative for a positive stone (textbook rule)
        d = 2 * beta.ri - alpha.ri - gamma.ri
        ud = SIGN_Z * math.sqrt(4 * beta.u**2 + alpha.u**2 + gamma.u**2)
        # sampled extremes can only lie inside the true ones: true alpha lower, gamma higher,
        # the highest low edge higher, the lowest high edge lower (by up to their slack)
        up = alpha.slack + (2 * beta.slack if beta_is_max else 0.0)
        down = gamma.slack + (0.0 if beta_is_max else 2 * beta.slack)
        if d + up < -ud:
            return "+"
        if d - down > ud:
            return "-"
        return None

    s_low, s_high = sign_for(beta_low, True), sign_for(beta_high, False)
    same_beta = not _distinct(beta_low, beta_high, SPLIT_Z)
    beta = _weighted_mean([beta_low, beta_high]).ri if same_beta else None
    if s_low is not None and s_low == s_high:
        sign = s_low
        notes.append(
            f"Both edges move: biaxial, alpha {_fmt(alpha.ri)}, gamma {_fmt(gamma.ri)}; both candidate "
            f"betas ({_fmt(beta_low.ri)}, {_fmt(beta_high.ri)}) give the "
            f"{'positive' if sign == '+' else 'negative'} sign."
        )
    else:
        sign = None
        notes.append(
            f"Both edges move: biaxial, alpha {_fmt(alpha.ri)}, gamma {_fmt(gamma.ri)}. Beta is "
            f"{_fmt(beta_low.ri)} (highest low edge) or {_fmt(beta_high.ri)} (lowest high edge), "
            "and these do not give the same sign clearly: sign undetermined. Another facet "
            "shows which one is beta."
        )
    return finish("biaxial", sign=sign, beta=beta, low=alpha, high=gamma, candidates=candidates)


def _result(*, ri_low, ri_high, birefringence, birefringence_uncertainty, uncertainty, character,
            sign, beta, over_limit, spot_ri, spot_uncertainty, flags, notes, positions, readings,
            liquid_ri, observations, candidates=(), omega=None, epsilon=None) -> SessionAnalysis:
    return SessionAnalysis(
        ri_low=ri_low,
        ri_high=ri_high,
        birefringence=birefringence,
        birefringence_uncertainty=birefringence_uncertainty,
        uncertainty=uncertainty,
        optic_character=character,
        optic_sign=sign,
        beta=beta,
        over_limit=over_limit,
        spot_ri=spot_ri,
        spot_uncertainty=spot_uncertainty,
        flags=tuple(dict.fromkeys(flags)),
        notes=tuple(notes),
        beta_candidates=tuple(candidates),
        omega=omega,
        epsilon=epsilon,
        positions=positions,
        readings=readings,
        liquid_ri=liquid_ri,
        observations=observations,
    )
