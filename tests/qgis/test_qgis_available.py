"""QGIS itself is there: its Python bindings, a release the plugin supports, the runner."""

from __future__ import annotations

import pytest
from support_qgis import QGIS_PROCESS


def test_qgis_is_installed_and_supported():
    core = pytest.importorskip("qgis.core")
    assert core.Qgis.QGIS_VERSION_INT >= 32200, core.Qgis.QGIS_VERSION
    assert QGIS_PROCESS.exists(), f"{QGIS_PROCESS} is missing"
