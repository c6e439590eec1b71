"""Dispersion of the prism glass, the contact liquid and the stone.

The prism glass and a few gem materials use their published Sellmeier
formulas, kept with their sources in the plain data files ``data/glasses.csv``
and ``data/stones.csv`` (so runtime needs no database).  Any other stone, and
the contact liquid, use a two-term Cauchy formula through the index at the
sodium D line with a given Abbe number.

References
----------
W. Sellmeier (1871), the dispersion formula; SCHOTT and OHARA optical glass
catalogues; G. Ghosh (1999), quartz; I. H. Malitson and M. J. Dodge (1972),
sapphire; W. J. Tropf and M. E. Thomas (1991), spinel; D. L. Wood and K. Nassau
(1982), cubic zirconia.  Abbe number from the Fraunhofer F, C and d/D lines.
"""

from __future__ import annotations

import csv
import functools
from dataclasses import dataclass
from importlib import resources

import numpy as np

from critline.optics import SODIUM_D_NM

#: Fraunhofer F and C lines (hydrogen), nanometres, for the Abbe number.
F_LINE_NM = 486.13
C_LINE_NM = 656.27

DEFAULT_GLASS = "N-LASF31A"


@dataclass(frozen=True)
class SellmeierFormula:
    """``n^2 - 1 = A + sum B_i lambda^2 / (lambda^2 - C_i)``, lambda in micrometres."""

    name: str
    a: float
    terms: tuple[tuple[float, float], ...]
    source: str

    def index(self, wavelength_nm):
        lam2 = (np.asarray(wavelength_nm, dtype=float) / 1000.0) ** 2
        n2 = 1.0 + self.a + sum(b * lam2 / (lam2 - c) for b, c in self.terms)
        return np.sqrt(n2)

    def abbe(self) -> float:
        nd, nf, nc = (float(self.index(w)) for w in (SODIUM_D_NM, F_LINE_NM, C_LINE_NM))
        return (nd - 1.0) / (nf - nc)


def _rows(filename: str):
    text = resources.files("critline.synth").joinpath("data", filename).read_text(encoding="utf-8")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.startswith("#")]
    return list(csv.DictReader(lines))


def _terms(row, count):
    terms = []
    for i in range(1, count + 1):
        b, c = float(row[f"B{i}"]), float(row[f"C{i}"])
        if b:
            terms.append((b, c))
    return tuple(terms)


@functools.cache
def glasses() -> dict[str, SellmeierFormula]:
    """Prism glasses by name (``data/glasses.csv``)."""
    return {r["name"]: SellmeierFormula(r["name"], 0.0, _terms(r, 3), r["source"])
            for r in _rows("glasses.csv")}


@functools.cache
def stone_formulas() -> dict[tuple[str, str], SellmeierFormula]:
    """Published formulas of a few gem materials, keyed ``(material, ray)``.

    ``ray`` is ``'o'``/``'e'`` for uniaxial materials and ``'n'`` for isotropic ones.
    """
    return {(r["key"], r["ray"]): SellmeierFormula(f"{r['key']} {r['ray']}", float(r["A"]),
                                                     _terms(r, 3), r["source"])
            for r in _rows("stones.csv")}


def glass(name: str) -> SellmeierFormula:
    try:
        return glasses()[name]
    except KeyError:
        raise ValueError(f"unknown prism glass {name!r}; known: {sorted(glasses())}") from None


def cauchy_index(n_d: float, abbe: float, wavelength_nm):
    """Two-term Cauchy formula ``n = A + B / lambda^2`` through ``n_d`` at 589.3 nm.

    ``B`` follows from the Abbe number: ``n_F - n_C = (n_d - 1) / abbe``.
    """
    lam = np.asarray(wavelength_nm, dtype=float)
    b = (n_d - 1.0) / abbe / (1.0 / F_LINE_NM**2 - 1.0 / C_LINE_NM**2)
    return n_d + b * (1.0 / lam**2 - 1.0 / SODIUM_D_NM**2)


def stone_index(n_d: float, wavelength_nm, abbe: float = 55.0, material: str | None = None):
    """Index of a stone ray with index ``n_d`` at the D line, at other wavelengths.

    With ``material`` one of :func:`stone_formulas` the published formula's
    dispersion (``n(lambda) - n(D)``) of the nearest ray is added to ``n_d``;
    otherwise :func:`cauchy_index` with ``abbe``.
    """
    if material is not None:
        rays = [f for (key, _), f in stone_formulas().items() if key == material]
        if rays:
            best = min(rays, key=lambda f: abs(float(f.index(SODIUM_D_NM)) - n_d))
            return n_d + best.index(wavelength_nm) - float(best.index(SODIUM_D_NM))
    return cauchy_index(n_d, abbe, wavelength_nm)
