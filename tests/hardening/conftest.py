"""Fixtures of the hardening tests: small synthesized eyepiece views (rendered once per session)."""

import pytest
from hardening_helpers import render_small


@pytest.fixture(scope="session")
def quartz_view():
    """One small eyepiece view of a stone of RI 1.544 (quartz's omega, from memory), with truth."""
    return render_small(11, stone_ris=(1.544,))


@pytest.fixture(scope="session")
def spinel_view():
    """RI 1.718 (spinel, from memory)."""
    return render_small(12, stone_ris=(1.718,))


@pytest.fixture(scope="session")
def fluorite_like_view():
    """RI 1.434 (fluorite, from memory): the low end of the scale."""
    return render_small(14, stone_ris=(1.434,))


@pytest.fixture(scope="session")
def no_edge_view():
    """The scale with no stone edge and no liquid line in the field."""
    return render_small(13, stone_ris=())
