"""Matching a stone's measured properties against the materials table.

Every material is scored by how well its property ranges agree with the
measured values given their uncertainties.  For a measured value ``x`` with
standard uncertainty ``u`` and a material range ``[a, b]`` the agreement is
the two-sided Gaussian tail probability of the reading's distance ``d`` from
the range (``d = 0`` inside it):

    P = 2 Phi(-d / u)

i.e. the probability that a measurement of a true value at the nearest end
of the range falls at least as far from it as the reading did (an
interval-overlap likelihood: 1 anywhere inside the range, 0.32 one standard
uncertainty outside, 0.05 at two, 0.003 at three; it also works for ranges
of zero width).  The score of a material is the product of the agreements of every
property that was measured: lowest and highest RI, birefringence, optic
character, optic sign, specific gravity, spot reading, over the limit.
Scores are absolute (a perfect fit scores 1), not shares of a total.

Optic character and sign are categorical; a disagreement multiplies the
score by a small weight (:data:`CHARACTER_WEIGHTS`, :data:`SIGN_CONFLICT`)
rather than zero, because the readings of a single facet can mislead
(a biaxial stone can read as uniaxial, a stone of small birefringence as
singly refractive).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy.special import ndtr

from critline.core.materials import Material, load_materials
from critline.core.session import RI_LIMITS, SPOT_PRECISION, ReadingError, SessionAnalysis
from critline.instrument import DEFAULT as DEFAULT_INSTRUMENT

__all__ = [
    "Candidate",
    "Identification",
    "TYPED_UNCERTAINTY",
    "SG_UNCERTAINTY",
    "identify",
]

SCHEMA = "critline.identify/1"
#: standard uncertainty of a typed-in RI reading; a careful reader reproduces readings to
#: about 0.001-0.002 (common practice, no source)
TYPED_UNCERTAINTY = 0.002
#: standard uncertainty of a hydrostatic specific gravity (common practice, no source)
SG_UNCERTAINTY = 0.02
#: how far the contact liquid's index may sit from its nominal value (temperature, age;
#: from memory)
LIQUID_UNCERTAINTY = 0.005
#: multiplier on the score when the measured optic character (rows) meets a material's (columns)
CHARACTER_WEIGHTS = {
    "isotropic": {"isotropic": 1.0, "amorphous": 1.0, "aggregate": 0.8, "uniaxial": 0.05, "biaxial": 0.05},
    # one facet of a biaxial stone can read as uniaxial (beta near alpha or gamma, or the facet
    # perpendicular to a principal vibration direction): a mild penalty only
    "uniaxial": {"uniaxial": 1.0, "biaxial": 0.5, "aggregate": 0.1, "isotropic": 0.02, "amorphous": 0.02},
    "biaxial": {"biaxial": 1.0, "uniaxial": 0.05, "aggregate": 0.1, "isotropic": 0.02, "amorphous": 0.02},
}
#: multiplier when the measured optic sign is the opposite of the material's
SIGN_CONFLICT = 0.05
#: a property agreement below this is reported as a conflict
AGREE_LEVEL = 0.5
#: candidates scoring at least this fraction of a group's leader are tied with it
TIE_RATIO = 0.7
#: candidates below this score are not listed
MIN_SCORE = 1e-3
#: most candidates listed
MAX_CANDIDATES = 12


@dataclass(frozen=True)
class Candidate:
    """One material that fits, with the properties that agree and conflict."""

    material: Material
    aliases: tuple[str, ...]
    score: float
    agrees: tuple[str, ...] = ()
    conflicts: tuple[str, ...] = ()

    @property
    def key(self) -> str:
        return self.material.key

    def to_json(self) -> dict:
        return {
            "material": self.material.key,
            "aliases": list(self.aliases),
            "score": round(self.score, 4),
            "agrees": list(self.agrees),
            "conflicts": list(self.conflicts),
        }


@dataclass(frozen=True)
class Identification:
    """Ranked candidates, near-tie groups and the tests that would separate the leaders."""

    candidates: tuple[Candidate, ...]
    groups: tuple[tuple[str, ...], ...]
    separating_tests: tuple[str, ...]
    notes: tuple[str, ...] = ()
    measured: dict = field(default_factory=dict)

    @property
    def leading(self) -> tuple[str, ...]:
        return self.groups[0] if self.groups else ()

    def to_json(self) -> dict:
        """The ``critline.identify/1`` document of design.md (plus groups, notes, measured)."""
        return {
            "schema": SCHEMA,
            "candidates": [c.to_json() for c in self.candidates],
            "separating_tests": list(self.separating_tests),
            "groups": [list(g) for g in self.groups],
            "measured": dict(self.measured),
            "notes": list(self.notes),
        }


# --------------------------------------------------------------------------- measurement


@dataclass(frozen=True)
class _Measured:
    low: tuple[float, float] | None = None  # (ri, u)
    high: tuple[float, float] | None = None
    birefringence: tuple[float, float] | None = None
    beta: tuple[float, float] | None = None
    character: str | None = None
    sign: str | None = None
    sg: tuple[float, float] | None = None
    spot: float | None = None
    #: lowest and highest spot reading when the spot blinks (aggregates of birefringent minerals)
    spot_span: tuple[float, float] | None = None
    over_limit: bool = False
    liquid_ri: float = DEFAULT_INSTRUMENT.liquid_ri

    def to_json(self) -> dict:
        def r4(v):
            return None if v is None else round(v, 4)

        return {
            "ri_low": r4(self.low[0]) if self.low else None,
            "ri_high": r4(self.high[0]) if self.high else None,
            "uncertainty": r4(max(self.low[1], self.high[1])) if self.low and self.high else None,
            "birefringence": r4(self.birefringence[0]) if self.birefringence else None,
            "beta": r4(self.beta[0]) if self.beta else None,
            "optic_character": self.character,
            "optic_sign": self.sign,
            "sg": r4(self.sg[0]) if self.sg else None,
            "spot_ri": r4(self.spot),
            "over_limit": self.over_limit,
            "liquid_ri": r4(self.liquid_ri) if self.over_limit else None,
        }


def _reading(value, default_u: float, what: str) -> tuple[float, float]:
    if isinstance(value, tuple | list):
        if len(value) != 2:
            raise ReadingError(f"{what}: give an RI or an (RI, uncertainty) pair, got {value!r}")
        ri, u = float(value[0]), float(value[1])
    else:
        ri, u = float(value), default_u
    if not math.isfinite(ri) or not (RI_LIMITS[0] <= ri <= RI_LIMITS[1]):
        raise ReadingError(f"{what}: RI {ri:g} is outside {RI_LIMITS[0]}-{RI_LIMITS[1]}")
    if not math.isfinite(u) or u < 0:
        raise ReadingError(f"{what}: uncertainty {u:g} must be zero or positive")
    return ri, max(u, 1e-5)


def _measured(analysis, ris, sg, spot, over_limit, character, sign, liquid_ri, uncertainty):
    if character is not None and character not in ("isotropic", "uniaxial", "biaxial"):
        raise ReadingError(f"optic character must be isotropic, uniaxial or biaxial, got {character!r}")
    if sign is not None and sign not in ("+", "-"):
        raise ReadingError(f"optic sign must be '+' or '-', got {sign!r}")
    if sign is not None and character == "isotropic":
        raise ReadingError("an isotropic stone has no optic sign: --sign contradicts --character isotropic")
    if liquid_ri is not None:
        liquid_ri = float(liquid_ri)
        if not (RI_LIMITS[0] < liquid_ri < RI_LIMITS[1]):
            raise ReadingError(f"contact liquid RI {liquid_ri:g} is outside {RI_LIMITS[0]}-{RI_LIMITS[1]}")
    liquid = liquid_ri if liquid_ri is not None else (
        analysis.liquid_ri if analysis is not None and analysis.liquid_ri else DEFAULT_INSTRUMENT.liquid_ri
    )
    sg_pair = None
    if sg is not None:
        sg_pair = (float(sg), SG_UNCERTAINTY)
        if not math.isfinite(sg_pair[0]) or not (0.5 < sg_pair[0] < 10):
            raise ReadingError(f"specific gravity {sg_pair[0]:g} is outside 0.5-10")
    spot_value = None
    if spot is not None:
        spot_value = _reading(spot, SPOT_PRECISION / 2, "spot reading")[0]

    if analysis is not None:
        if ris:
            raise ReadingError("give either a session analysis or typed readings, not both")
        for name, given, found in (("character", character, analysis.optic_character),
                                   ("sign", sign, analysis.optic_sign)):
            if given is not None and found not in (None, "undetermined") and given != found:
                raise ReadingError(f"optic {name} {given!r} contradicts the readings ({found!r})")
        u = analysis.uncertainty or TYPED_UNCERTAINTY
        low = (analysis.ri_low, u) if analysis.ri_low is not None else None
        high = (analysis.ri_high, u) if analysis.ri_high is not None else None
        if analysis.over_limit and analysis.ri_high is None and low is not None and low[0] >= liquid - 1e-9:
            low = None  # only the liquid's index as a lower bound, no stone edge
        if analysis.spot_ri is not None and low is not None and analysis.positions == 0:
            low = high = None  # the spot readings are matched as a spot, not as edges
        bire = None
        if analysis.birefringence is not None and (
            analysis.optic_character != "undetermined" or analysis.birefringence > 0
        ) and "possible_anomalous_double_refraction" not in analysis.flags:
            bire = (analysis.birefringence, analysis.birefringence_uncertainty or u * math.sqrt(2))
        found_char = analysis.optic_character if analysis.optic_character != "undetermined" else None
        spots = [ri for o in analysis.observations if o.spot for ri, _ in o.edges]
        spot_span = (min(spots), max(spots)) if "spot_blinks" in analysis.flags and spots else None
        return _Measured(
            low=low,
            high=high,
            birefringence=bire,
            beta=(analysis.beta, u) if analysis.beta is not None else None,
            character=character or found_char,
            sign=sign or analysis.optic_sign,
            sg=sg_pair,
            spot=spot_value if spot_value is not None else analysis.spot_ri,
            spot_span=None if spot_value is not None else spot_span,
            over_limit=over_limit or analysis.over_limit,
            liquid_ri=liquid,
        )

    readings = [_reading(r, uncertainty, f"reading {i + 1}") for i, r in enumerate(ris)]
    if not readings and spot_value is None and not over_limit:
        raise ReadingError("no readings: give at least one RI, a spot reading or over the limit")
    for ri, u in readings:
        if over_limit and ri > liquid + max(3 * u, 0.002):
            raise ReadingError(
                f"RI {ri:g} is above the contact liquid's {liquid:g}: it cannot be read on a stone "
                "that is over the limit"
            )
    low = min(readings) if readings else None
    high = max(readings) if readings else None
    bire = None
    if over_limit and readings:
        if character == "isotropic":
            raise ReadingError("a stone edge below the limit and a ray over it contradict an isotropic stone")
        high = None  # the other ray is over the limit: only a lower bound for it
    elif low is not None and len(readings) >= 2:
        bire_u = math.hypot(low[1], high[1])
        if character == "isotropic" and high[0] - low[0] > 3 * bire_u:
            raise ReadingError(
                f"readings {low[0]:g} and {high[0]:g} differ by more than their uncertainty: "
                "they contradict an isotropic stone"
            )
        bire = (high[0] - low[0], bire_u)
    elif low is not None and character == "isotropic":
        bire = (0.0, low[1] * math.sqrt(2))
    return _Measured(
        low=low, high=high, birefringence=bire, character=character, sign=sign, sg=sg_pair,
        spot=spot_value, over_limit=over_limit, liquid_ri=liquid,
    )


# --------------------------------------------------------------------------- scoring


def _p_in_range(x: float, u: float, low: float, high: float) -> float:
    """Agreement of a reading ``x`` (standard uncertainty ``u``) with the range ``[low, high]``."""
    distance = max(low - x, x - high, 0.0)
    return math.erfc(distance / (max(u, 1e-9) * math.sqrt(2.0)))  # = 2 Phi(-d/u)


def _fmt_range(a: float, b: float, digits: int = 3) -> str:
    return f"{a:.{digits}f}" if abs(a - b) < 0.5 * 10**-digits else f"{a:.{digits}f}-{b:.{digits}f}"


def _score(material: Material, m: _Measured) -> tuple[float, list[str], list[str]]:
    factors: list[tuple[float, str]] = []
    lower = min(material.indices, key=lambda i: i.mid)
    upper = max(material.indices, key=lambda i: i.mid)
    span_low, span_high = material.ri_range

    def add(p: float, text: str):
        factors.append((p, text))

    if m.low is not None and m.high is not None:
        single = abs(m.high[0] - m.low[0]) <= 1e-9
        if single:
            x, u = m.low
            p = _p_in_range(x, u, span_low, span_high)
            add(p, f"RI {x:.3f} vs {material.key} {_fmt_range(span_low, span_high)}")
        else:
            for (x, u), rng, label in ((m.low, lower, "lowest RI"), (m.high, upper, "highest RI")):
                p = _p_in_range(x, u, rng.low, rng.high)
                add(p, f"{label} {x:.3f} vs {rng.name} {_fmt_range(rng.low, rng.high)}")
    elif m.low is not None:  # one edge below the limit, the other ray over it
        x, u = m.low
        p = _p_in_range(x, u, lower.low, lower.high)
        add(p, f"lowest RI {x:.3f} vs {lower.name} {_fmt_range(lower.low, lower.high)}")

    if m.birefringence is not None:
        b, u = m.birefringence
        lo, hi = material.birefringence
        p = _p_in_range(b, max(u, 1e-5), lo, hi)
        add(p, f"birefringence {b:.3f} vs {_fmt_range(lo, hi)}")

    if m.beta is not None and material.optic_character == "biaxial":
        beta = material.index("beta")
        p = _p_in_range(m.beta[0], m.beta[1], beta.low, beta.high)
        add(p, f"beta {m.beta[0]:.3f} vs {_fmt_range(beta.low, beta.high)}")

    if m.character is not None:
        p = CHARACTER_WEIGHTS[m.character][material.optic_character]
        add(p, f"optic character {m.character} vs {material.optic_character}")

    # a sign found by the uniaxial rule says nothing about a biaxial material's sign
    sign_applies = m.character is None or m.character == material.optic_character
    if m.sign is not None and material.is_doubly_refractive and material.sign is not None and sign_applies:
        p = 1.0 if m.sign == material.sign else SIGN_CONFLICT
        add(p, f"optic sign {m.sign} vs {material.sign}")

    if m.sg is not None and material.sg is not None:
        x, u = m.sg
        p = _p_in_range(x, u, *material.sg)
        add(p, f"SG {x:.2f} vs {_fmt_range(*material.sg, digits=2)}")

    if m.spot is not None:
        # spot readings are good to about +-0.01: widen the range by that before the Gaussian tail;
        # a blinking spot is matched at both ends
        for value in (m.spot_span or (m.spot,)):
            p = _p_in_range(value, SPOT_PRECISION / 2, span_low - SPOT_PRECISION, span_high + SPOT_PRECISION)
            add(p, f"spot {value:.2f} vs {_fmt_range(span_low, span_high, 2)} (+-{SPOT_PRECISION:.2f})")

    if m.over_limit:
        # every ray the refractometer did not show must be above the liquid
        shown_below = m.low is not None and m.high is None
        index = upper if shown_below else lower
        what = "highest" if shown_below else "lowest"
        # probability that a stone of this material is above the liquid: its index spread
        # uniformly over the natural range, the liquid's own index uncertain by LIQUID_UNCERTAINTY
        grid = np.linspace(index.low, index.high, 65)
        p = float(np.mean(ndtr((grid - m.liquid_ri) / LIQUID_UNCERTAINTY)))
        add(p, f"over the limit of {m.liquid_ri:.3f}: {what} index {_fmt_range(index.low, index.high)}")

    score = 1.0
    agrees, conflicts = [], []
    for p, text in factors:
        score *= p
        (agrees if p >= AGREE_LEVEL else conflicts).append(text)
    return score, agrees, conflicts


def _width(material: Material, m: _Measured) -> float:
    """Total width of the material's ranges that the measurement was compared with."""
    low, high = material.ri_range
    width = high - low
    if m.birefringence is not None:
        width += material.birefringence[1] - material.birefringence[0]
    if m.sg is not None and material.sg is not None:
        width += 0.1 * (material.sg[1] - material.sg[0])
    return width


# --------------------------------------------------------------------------- separating tests


def _disjoint(a: tuple[float, float], b: tuple[float, float], gap: float) -> bool:
    return a[1] + gap < b[0] or b[1] + gap < a[0]


def _separating_tests(leaders: Sequence[Material], m: _Measured) -> list[str]:
    if len(leaders) < 2:
        return []
    tests = []
    names = ", ".join(x.key for x in leaders)
    if m.sg is None:
        pairs = [(a, b) for i, a in enumerate(leaders) for b in leaders[i + 1 :]
                 if a.sg and b.sg and _disjoint(a.sg, b.sg, 0.03)]
        if pairs:
            listing = "; ".join(f"{x.key} {_fmt_range(*x.sg, digits=2)}" for x in leaders if x.sg)
            tests.append(f"specific gravity ({listing})")
    characters = {x.optic_character for x in leaders}
    if m.character is None and len(characters) > 1:
        listing = "; ".join(f"{x.key} {x.optic_character}" for x in leaders)
        tests.append(f"optic character: read at least 4 positions through 180 degrees ({listing})")
    elif m.character == "uniaxial" and "biaxial" in characters:
        listing = ", ".join(x.key for x in leaders if x.optic_character == "biaxial")
        tests.append(
            "optic character on another facet: one facet of a biaxial stone can read as uniaxial "
            f"({listing} biaxial)"
        )
    signs = {x.sign for x in leaders if x.is_doubly_refractive and x.sign}
    if m.sign is None and len(signs) > 1:
        listing = "; ".join(f"{x.key} {x.sign}" for x in leaders if x.is_doubly_refractive and x.sign)
        tests.append(f"optic sign ({listing})")
    if m.birefringence is None:
        bires = [x for x in leaders if x.birefringence]
        if any(_disjoint(a.birefringence, b.birefringence, 0.002)
               for i, a in enumerate(bires) for b in bires[i + 1 :]):
            listing = "; ".join(f"{x.key} {_fmt_range(*x.birefringence)}" for x in bires)
            tests.append(f"birefringence from both edges ({listing})")
    synthetic = [x for x in leaders if x.key.startswith("synthetic") or "synthetic" in x.key]
    manmade = [x for x in leaders if x.key in {"crown glass", "flint glass", "high-lead glass",
                                               "acrylic", "polystyrene", "phenolic resin", "celluloid"}]
    if synthetic or manmade:
        tests.append(
            "magnification: inclusions and growth features separate natural from synthetic or "
            f"man-made ({names})"
        )
    if not tests or len(tests) == 1 and tests[0].startswith("magnification"):
        tests.append(f"absorption spectrum and other properties: RI alone does not separate {names}")
    return tests


# --------------------------------------------------------------------------- public API


def identify(
    analysis: SessionAnalysis | None = None,
    *,
    ris: Iterable = (),
    sg: float | None = None,
    spot: float | None = None,
    over_limit: bool = False,
    character: str | None = None,
    sign: str | None = None,
    liquid_ri: float | None = None,
    materials: Sequence[Material] | None = None,
    uncertainty: float = TYPED_UNCERTAINTY,
) -> Identification:
    """Rank the materials that fit a stone's readings.

    Parameters
    ----------
    analysis : SessionAnalysis, optional
        A session reduced by :func:`critline.core.session.analyse_session`.
    ris : iterable of float or (float, float)
        Typed-in RI readings (alternative to ``analysis``), each optionally with its
        standard uncertainty; default uncertainty ``uncertainty``.  Lowest and highest
        are taken as the two edges.
    sg : float, optional
        Specific gravity (standard uncertainty :data:`SG_UNCERTAINTY`).
    spot : float, optional
        Spot (distance) reading, matched at +-0.01.
    over_limit : bool
        The stone (or one ray) is over the limit of the contact liquid.
    character, sign : str, optional
        Optic character ('isotropic', 'uniaxial', 'biaxial') and sign ('+', '-') when known.
    liquid_ri : float, optional
        Contact liquid index; default ``critline.instrument.DEFAULT.liquid_ri`` (1.79).
    materials : sequence of Material, optional
        The table to match against; default :func:`load_materials`.

    Returns
    -------
    Identification

    Raises
    ------
    ReadingError
        Bad or contradictory input (out-of-range RI, negative uncertainty, no readings, ...).
    """
    if uncertainty is None or not math.isfinite(float(uncertainty)) or float(uncertainty) < 0:
        raise ReadingError(f"uncertainty {uncertainty!r} must be zero or positive")
    ris = tuple(ris)
    m = _measured(analysis, ris, sg, spot, over_limit, character, sign, liquid_ri, float(uncertainty))
    table = tuple(materials) if materials is not None else load_materials()

    scored = []
    for material in table:
        score, agrees, conflicts = _score(material, m)
        scored.append(Candidate(material, material.aliases, score, tuple(agrees), tuple(conflicts)))
    scored.sort(key=lambda c: (-c.score, c.material.key))
    fitting = [c for c in scored if c.score >= MIN_SCORE]

    # near-ties: scores within TIE_RATIO of the group's best; inside a group the material whose
    # compared ranges are narrower (the more specific fit) is listed first
    grouped: list[list[Candidate]] = []
    for c in fitting:
        if grouped and c.score >= TIE_RATIO * grouped[-1][0].score:
            grouped[-1].append(c)
        else:
            grouped.append([c])
    for group in grouped:
        group.sort(key=lambda c: (_width(c.material, m), -c.score, c.material.key))
    # the whole leading group is always listed, then the next best up to MAX_CANDIDATES
    shown = max(MAX_CANDIDATES, len(grouped[0]) if grouped else 0)
    ordered = [c for group in grouped for c in group]
    candidates = tuple(ordered[:shown])
    listed = {c.material.key for c in candidates}
    groups = [[c.material.key for c in g if c.material.key in listed] for g in grouped]
    groups = [g for g in groups if g]

    notes = []
    if m.over_limit:
        source = "given" if liquid_ri is not None else "assumed (default contact liquid)"
        notes.append(f"Contact liquid RI {m.liquid_ri:.3f} {source}: over the limit means above it.")
    if not candidates:
        notes.append("No material in the table fits these readings: check the readings and the instrument.")
    leaders: list[Material] = []
    if candidates:
        top = max(c.score for c in candidates)
        by_key = {c.material.key: c for c in candidates}
        leaders = [by_key[k].material for k in groups[0]]
        for c in candidates[len(leaders):]:
            if len(leaders) >= 5 or c.score < 0.2 * top:
                break
            leaders.append(c.material)
        if top < 0.1:
            notes.append(
                f"The best fit scores only {top:.2f}: the readings agree poorly with every material "
                "in the table."
            )
    notes.append(
        "Refractive index alone rarely proves an identity: confirm with further tests before a "
        "report for sale or insurance."
    )
    return Identification(
        candidates=candidates,
        groups=tuple(tuple(g) for g in groups),
        separating_tests=tuple(_separating_tests(leaders, m)),
        notes=tuple(notes),
        measured=m.to_json(),
    )
