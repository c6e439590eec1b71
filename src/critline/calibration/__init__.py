"""Calibration against reference stones: fit, check, store, and track drift.

Typical use::

    from critline.calibration import ReferencePair, fit_calibration, make_calibration
    fit = fit_calibration(pairs, first=1.30, step=0.01)
    cal = make_calibration(fit, photos=..., setup={"liquid": "1.79"}, light="monochromatic")
    write_calibration(cal, "bench-2026-12.toml")
    ri, sigma, flags = load_calibration("bench-2026-12.toml").scale_to_ri(24.4, 0.03)
"""

from critline.calibration.drift import DRIFT_LIMIT, Drift, compare, find_previous
from critline.calibration.fitting import (
    CalibrationError,
    CalibrationFit,
    PolynomialMap,
    ReferencePair,
    SuspectReferenceError,
    allowed_models,
    find_suspects,
    fit_calibration,
)
from critline.calibration.record import Calibration, StoredReference, make_calibration
from critline.calibration.references import load_references, resolve_known
from critline.calibration.store import load_calibration, write_calibration

__all__ = [
    "DRIFT_LIMIT", "Calibration", "CalibrationError", "CalibrationFit", "Drift", "PolynomialMap",
    "ReferencePair", "StoredReference", "SuspectReferenceError", "allowed_models", "compare",
    "find_previous", "find_suspects", "fit_calibration", "load_calibration", "load_references",
    "make_calibration", "resolve_known", "write_calibration",
]
