"""catchmentrecharge with a precipitation raster (issue 15, item 6): QGIS's own zonal
statistics give each catchment's mean, the same as the cells whose centres lie inside it
(computed here with shapely and numpy), and the share is recharge over it."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("qgis.core")

from qgis.core import QgsProcessingException, QgsVectorLayer  # noqa: E402
from support_qgis import SAMPLE, gpkg_layer, sample_parameters  # noqa: E402

ALGORITHM = "recharge_atlas:catchmentrecharge"
CELL = 500.0


@pytest.fixture(scope="module")
def raster(tmp_path_factory):
    """A GeoTIFF over the demo region in its CRS: 600 mm/yr rising by 1 mm per column."""
    import geopandas as gpd
    from osgeo import gdal, osr

    catchments = gpd.read_file(SAMPLE / "catchments.gpkg")
    xmin, ymin, xmax, ymax = catchments.total_bounds
    x0, y0 = xmin - 2 * CELL, ymax + 2 * CELL
    width = int((xmax - xmin) / CELL) + 4
    height = int((ymax - ymin) / CELL) + 4
    values = 600.0 + np.arange(width)[None, :] * np.ones((height, 1))
    path = tmp_path_factory.mktemp("rain") / "rain.tif"
    data = gdal.GetDriverByName("GTiff").Create(str(path), width, height, 1, gdal.GDT_Float32)
    data.SetGeoTransform((x0, CELL, 0, y0, 0, -CELL))
    srs = osr.SpatialReference()
    srs.ImportFromWkt(catchments.crs.to_wkt())
    data.SetProjection(srs.ExportToWkt())
    data.GetRasterBand(1).WriteArray(values)
    data = None
    centres_x = x0 + (np.arange(width) + 0.5) * CELL
    centres_y = y0 - (np.arange(height) + 0.5) * CELL
    return path, values, centres_x, centres_y, catchments


@pytest.fixture(scope="module")
def run(qgis_app, raster, tmp_path_factory):
    import processing

    out = tmp_path_factory.mktemp("share") / "share.gpkg"
    parameters = sample_parameters(
        OUTPUT=gpkg_layer(out, "catchments", geometry=True),
        PRECIPITATION_RASTER=str(raster[0]),
    )
    processing.run(ALGORITHM, parameters)
    layer = QgsVectorLayer(f"{out}|layername=catchments", "c", "ogr")
    assert layer.isValid()
    return list(layer.getFeatures())  # in the catchments' order


def test_zonal_mean_is_the_mean_of_the_cells_whose_centres_lie_inside(raster, run):
    from shapely.geometry import Point

    _, values, xs, ys, catchments = raster
    assert len(run) == len(catchments)
    for feature, polygon in zip(run, catchments.geometry):
        inside = [
            values[r, c]
            for r, y in enumerate(ys)
            for c, x in enumerate(xs)
            if polygon.contains(Point(x, y))
        ]
        assert feature["precipitation_mm_per_year"] == pytest.approx(np.mean(inside), rel=1e-6)


def test_share_is_recharge_over_the_raster_mean(run):
    shares = 0
    for feature in run:
        recharge = feature["recharge_mm_per_year"]
        if recharge is None or not np.isfinite(float(recharge or np.nan)):
            continue
        expected = float(recharge) / float(feature["precipitation_mm_per_year"])
        assert float(feature["recharge_share_of_precipitation"]) == pytest.approx(expected)
        shares += 1
    assert shares >= 3


def test_field_and_raster_together_are_refused(qgis_app, raster, tmp_path):
    import processing

    out = tmp_path / "both.gpkg"
    parameters = sample_parameters(
        OUTPUT=gpkg_layer(out, "catchments", geometry=True),
        PRECIPITATION_RASTER=str(raster[0]),
        PRECIPITATION_FIELD="gauge_id",
    )
    with pytest.raises(QgsProcessingException, match="not both"):
        processing.run(ALGORITHM, parameters)
    assert not out.exists()
