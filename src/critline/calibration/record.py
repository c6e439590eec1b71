"""A stored calibration: the fitted maps plus what they were made from.

:class:`Calibration` is what the reader applies (``scale_to_ri``,
``field_to_ri``) and what ``critline calibrate`` writes to a TOML file
(:mod:`critline.calibration.store`).
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime

from critline.calibration.fitting import CalibrationError, CalibrationFit, PolynomialMap

SCHEMA = "critline.calibration/1"
LIGHTS = ("monochromatic", "white")
EXTRAPOLATED = "extrapolated"
FIELD_FRAME = "field_frame"


@dataclass(frozen=True)
class StoredReference:
    """One reference edge as recorded in a calibration file."""

    photo: str
    sha256: str
    material: str
    known_ri: float
    scale_position: float
    scale_uncertainty: float
    measured_ri: float
    residual: float
    field_position: float | None = None
    loo_residual: float | None = None
    field_residual: float | None = None
    excluded: bool = False


@dataclass(frozen=True)
class Calibration:
    """The map from the reader's scale position (and field position) to RI at 589.3 nm.

    Attributes
    ----------
    id : str
        Short hash of the file's content, e.g. ``"cal-3f9a2b1c04"``.
    created : str
        ISO 8601 date and time (UTC) of the fit.
    setup : dict
        The user's description (instrument, phone, liquid, temperature ...).
    light : str
        ``"monochromatic"`` or ``"white"``: a calibration only applies to photos
        taken in the same light.
    model : str
        Scale-map kind: ``"offset"``, ``"offset+gain"`` or ``"smooth"``.
    instrument : dict
        The printed scale the positions refer to (``name``, ``first``, ``last``, ``step``).
    """

    id: str
    created: str
    setup: dict
    light: str
    model: str
    model_reason: str
    instrument: dict
    scale_map: PolynomialMap
    valid_range: tuple[float, float]
    residual_rms: float
    loo_rms: float | None
    references: tuple[StoredReference, ...]
    field_map: PolynomialMap | None = None
    field_reason: str = ""
    field_valid_range: tuple[float, float] | None = None
    field_residual_rms: float | None = None
    field_loo_rms: float | None = None
    warnings: tuple[str, ...] = field(default_factory=tuple)

    # ------------------------------------------------------------------ applying

    @property
    def first(self) -> float:
        return float(self.instrument["first"])

    @property
    def step(self) -> float:
        return float(self.instrument["step"])

    def _flags(self, ri: float) -> tuple[str, ...]:
        lo, hi = self.valid_range
        return (EXTRAPOLATED,) if not lo <= ri <= hi else ()

    def scale_to_ri(self, scale_position: float, scale_uncertainty: float) -> tuple[float, float, tuple[str, ...]]:
        """RI, its standard uncertainty and flags for an edge at ``scale_position``.

        The uncertainty combines the reading's own (through the map's slope)
        with the map's prediction uncertainty at that point (root sum of squares).
        A result outside the calibrated range is flagged ``"extrapolated"``.
        """
        x = self.first + self.step * float(scale_position)
        ri = float(self.scale_map.value(x))
        slope = float(self.scale_map.slope(x))
        sigma = math.hypot(slope * self.step * float(scale_uncertainty), float(self.scale_map.sigma(x)))
        return ri, sigma, self._flags(ri)

    def field_to_ri(self, field_position: float, field_uncertainty: float) -> tuple[float, float, tuple[str, ...]]:
        """RI from the edge's position relative to the field circle (lower precision).

        Raises
        ------
        CalibrationError
            When this calibration has no field-frame map.
        """
        if self.field_map is None:
            raise CalibrationError(f"calibration {self.id} has no field-frame map ({self.field_reason})")
        f = float(field_position)
        ri = float(self.field_map.value(f))
        slope = float(self.field_map.slope(f))
        sigma = math.hypot(slope * float(field_uncertainty), float(self.field_map.sigma(f)))
        return ri, sigma, (FIELD_FRAME,) + self._flags(ri)

    def nominal_to_ri(self, nominal):
        """Calibrated RI for nominal scale value(s) (vectorised; used by drift)."""
        return self.scale_map.value(nominal)

    # ------------------------------------------------------------------ summaries

    @property
    def offset(self) -> float:
        return self.scale_map.centre_offset

    @property
    def gain_error(self) -> float:
        return self.scale_map.centre_gain_error

    def to_json(self) -> dict:
        """The ``critline.calibration/1`` document (design.md), with a few additions."""
        r4 = _r4
        return {
            "schema": SCHEMA,
            "id": self.id,
            "created": self.created,
            "light": self.light,
            "setup": dict(self.setup),
            "model": self.model,
            "model_reason": self.model_reason,
            "offset": r4(self.offset),
            "gain_error": round(self.gain_error, 6),
            "residual_rms": r4(self.residual_rms),
            "loo_rms": r4(self.loo_rms),
            "valid_range": [r4(v) for v in self.valid_range],
            "field_frame": None if self.field_map is None else {
                "model": self.field_map.kind, "residual_rms": r4(self.field_residual_rms),
                "loo_rms": r4(self.field_loo_rms), "precision": "lower"},
            "references": [{
                "photo": r.photo, "sha256": r.sha256, "material": r.material or None,
                "known_ri": r4(r.known_ri), "measured_ri": r4(r.measured_ri),
                "residual": r4(r.residual), "loo_residual": r4(r.loo_residual),
                "scale_position": round(r.scale_position, 3), "excluded": r.excluded,
            } for r in self.references],
            "warnings": list(self.warnings),
        }


def _r4(x):
    return None if x is None or not math.isfinite(x) else round(float(x), 4)


def content_id(cal: Calibration) -> str:
    """A short hash of everything but the id itself."""
    from critline.calibration.store import dumps_toml, to_document

    doc = to_document(replace(cal, id=""))
    return "cal-" + hashlib.sha256(dumps_toml(doc).encode("utf-8")).hexdigest()[:10]


def make_calibration(fit: CalibrationFit, *, photos: tuple[tuple[str, str, str], ...],
                     setup: dict | None = None, light: str = "monochromatic",
                     instrument: dict | None = None, created: str | None = None,
                     extra_warnings: tuple[str, ...] = ()) -> Calibration:
    """Wrap a fit with its record: ``photos`` gives (photo, sha256, material) per pair, in order."""
    if light not in LIGHTS:
        raise CalibrationError(f"light must be one of {', '.join(LIGHTS)}, not {light!r}")
    if len(photos) != len(fit.references):
        raise ValueError("one (photo, sha256, material) per reference pair")
    inst = {"name": "", "first": fit.first, "last": fit.first + 50 * fit.step, "step": fit.step}
    inst.update(instrument or {})
    refs = tuple(StoredReference(
        photo=ph, sha256=sha, material=mat, known_ri=r.known_ri, scale_position=r.scale_position,
        scale_uncertainty=r.scale_uncertainty, measured_ri=r.measured_ri, residual=r.residual,
        field_position=r.field_position, loo_residual=r.loo_residual,
        field_residual=r.field_residual, excluded=r.excluded)
        for (ph, sha, mat), r in zip(photos, fit.references, strict=True))
    cal = Calibration(
        id="", created=created or datetime.now(UTC).replace(microsecond=0).isoformat(),
        setup=dict(setup or {}), light=light, model=fit.model, model_reason=fit.model_reason,
        instrument=inst, scale_map=fit.scale_map, valid_range=fit.valid_range,
        residual_rms=fit.residual_rms, loo_rms=fit.loo_rms, references=refs,
        field_map=fit.field_map, field_reason=fit.field_reason,
        field_valid_range=fit.field_valid_range, field_residual_rms=fit.field_residual_rms,
        field_loo_rms=fit.field_loo_rms, warnings=tuple(fit.warnings) + tuple(extra_warnings))
    return replace(cal, id=content_id(cal))
