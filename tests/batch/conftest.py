import pytest

from critline.batch import stones


@pytest.fixture
def fake_core(monkeypatch):
    """The batch's calls into the identification core go to a small fake."""
    import batchfakes

    monkeypatch.setattr(stones, "_core", batchfakes.fake_core)
    return batchfakes
