"""The identification core: readings in, analysis and candidate materials out (no image code).

* :mod:`critline.core.indicatrix`: the two readings at one stone rotation (index ellipsoid)
* :mod:`critline.core.materials`: the materials table (``critline/data/materials.toml``)
* :mod:`critline.core.session`: one stone's readings reduced to RI, birefringence, character, sign
* :mod:`critline.core.matching`: the materials that fit, ranked, with separating tests
"""

from critline.core.indicatrix import section_indices, section_series
from critline.core.matching import Candidate, Identification, identify
from critline.core.materials import Material, MaterialsError, load_materials
from critline.core.session import Observation, ReadingError, SessionAnalysis, analyse_session

__all__ = [
    "Candidate",
    "Identification",
    "Material",
    "MaterialsError",
    "Observation",
    "ReadingError",
    "SessionAnalysis",
    "analyse_session",
    "identify",
    "load_materials",
    "section_indices",
    "section_series",
]
