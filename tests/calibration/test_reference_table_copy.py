"""The package's copy of the reference table is the repository's calibration/references.csv.

The reader loads the copy shipped as package data (so an installed wheel has it); the table a
lab edits is the one at the top of the repository.  The two must not drift apart.
"""

from pathlib import Path

import pytest

from critline.calibration import load_references
from critline.calibration.references import TABLE

REPO_TABLE = Path(__file__).resolve().parents[2] / "calibration" / "references.csv"


def test_packaged_table_is_the_repository_table():
    if not REPO_TABLE.is_file():
        pytest.skip("not run from a repository checkout")
    assert TABLE.read_bytes() == REPO_TABLE.read_bytes(), (
        "src/critline/calibration/data/references.csv differs from calibration/references.csv: copy it over")


def test_default_table_loads_from_package_data():
    table = load_references()
    # the keys a manifest names most (calibration/README.md's example)
    assert {"fluorite", "quartz-o", "quartz-e", "corundum-e", "corundum-o"} <= set(table)
    assert load_references(REPO_TABLE) == table if REPO_TABLE.is_file() else True
