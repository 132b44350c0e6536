"""Shared fixtures. Core tests need no QGIS; tests that do live in tests/qgis/."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_layers"

#: True in the run inside QGIS's Python (make test-qgis).
IN_QGIS = os.environ.get("RECHARGE_ATLAS_IN_QGIS") == "1"


@pytest.fixture(scope="session")
def sample_paths():
    """Paths of the committed demo region."""
    return {
        "gauges": SAMPLE / "gauges.gpkg",
        "catchments": SAMPLE / "catchments.gpkg",
        "discharge": SAMPLE / "discharge.csv",
        "truth_gauges": SAMPLE / "truth_gauges.csv",
        "truth_annual": SAMPLE / "truth_annual.csv",
    }


@pytest.fixture(scope="session")
def demo_region():
    """The demo region rebuilt in memory by the generator (same seed as the committed files)."""
    from recharge_atlas.sample_layers.generate import make_region

    return make_region()


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    """The bad-input cases' small region and its clean run (see tests/bad_input_cases.py)."""
    from bad_input_cases import clean_region

    return clean_region(tmp_path_factory)


@pytest.fixture
def case(tmp_path, clean):
    """One bad-input case: a copy of the clean region to spoil (tests/bad_input_cases.py)."""
    from bad_input_cases import Case

    return Case(tmp_path, clean)
