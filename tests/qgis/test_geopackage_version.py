"""Every GeoPackage the project ships or writes opens in QGIS's own GDAL without a version
warning (GDAL 3.6, in QGIS 3.22 on Debian 12, says a 1.4 file "may only be partially
supported"; we write 1.2, OGC 12-128r15)."""

from __future__ import annotations

import pytest

pytest.importorskip("qgis.core")

from osgeo import gdal, ogr  # noqa: E402
from qgis.core import QgsVectorLayer  # noqa: E402
from support_qgis import SAMPLE  # noqa: E402

from recharge_atlas.cli import main  # noqa: E402


def _messages_opening(path):
    said = []

    def handler(level, number, text):
        said.append(text)

    gdal.PushErrorHandler(handler)
    try:
        source = ogr.Open(str(path))
        assert source is not None and source.GetLayerCount() > 0
        for i in range(source.GetLayerCount()):
            source.GetLayer(i).GetFeatureCount()
        source = None
    finally:
        gdal.PopErrorHandler()
    return said


def test_shipped_and_written_geopackages_open_without_warnings(tmp_path):
    out = tmp_path / "recharge.gpkg"
    code = main(
        [
            "run",
            "--gauges", str(SAMPLE / "gauges.gpkg"),
            "--catchments", str(SAMPLE / "catchments.gpkg"),
            "--discharge", str(SAMPLE / "discharge.csv"),
            "--out", str(out),
        ]
    )  # fmt: skip
    assert code == 0
    for path in [*sorted(SAMPLE.glob("*.gpkg")), out]:
        assert _messages_opening(path) == [], path
        layer = QgsVectorLayer(f"{path}", "check", "ogr")
        assert layer.isValid(), path
