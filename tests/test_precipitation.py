"""Recharge as a share of precipitation (issue 15, item 6): from a field of the catchments
layer, or from a raster read into one; a share above 1 is flagged."""

import numpy as np
import pytest

from recharge_atlas.algorithms import files
from recharge_atlas.algorithms.errors import InputError
from recharge_atlas.algorithms.pipeline import PRECIPITATION_FIELDS, Settings, run_atlas


@pytest.fixture(scope="module")
def demo_inputs(sample_paths):
    gauges = files.read_layer(sample_paths["gauges"], "gauges")
    catchments = files.read_layer(sample_paths["catchments"], "catchments")
    discharge = files.read_table(sample_paths["discharge"])
    return gauges, catchments, discharge


@pytest.fixture(scope="module")
def with_field(demo_inputs):
    gauges, catchments, discharge = demo_inputs
    catchments = catchments.copy()
    # an invented climate: 900 mm/yr, one catchment with a value too small (recharge > rain)
    # and one without a value
    precipitation = np.full(len(catchments), 900.0)
    precipitation[0], precipitation[1] = 50.0, np.nan
    catchments["rain_mm"] = precipitation
    settings = Settings(precipitation_field="rain_mm")
    return run_atlas(gauges, catchments, discharge, settings), catchments


def test_share_is_recharge_over_precipitation(with_field):
    result, catchments = with_field
    layer = result.catchments
    assert list(layer.columns[-3:-1]) == PRECIPITATION_FIELDS
    np.testing.assert_allclose(layer["precipitation_mm_per_year"], catchments["rain_mm"])
    expected = layer["recharge_mm_per_year"] / catchments["rain_mm"]
    np.testing.assert_allclose(layer["recharge_share_of_precipitation"], expected)
    assert np.isnan(layer["recharge_share_of_precipitation"].iloc[1])


def test_a_share_above_one_is_flagged(with_field):
    result, _ = with_field
    first = result.catchments.iloc[0]
    assert first["recharge_share_of_precipitation"] > 1
    assert "times the precipitation (50 mm/yr)" in first["quality"]
    others = result.catchments.iloc[2:]
    assert not others["quality"].str.contains("times the precipitation").any()


def test_without_precipitation_the_fields_are_absent(demo_inputs):
    gauges, catchments, discharge = demo_inputs
    result = run_atlas(gauges, catchments.iloc[:3], discharge, Settings())
    assert not set(PRECIPITATION_FIELDS) & set(result.catchments.columns)


@pytest.mark.parametrize(
    "value, match",
    [(None, "no field 'rain'"), ("lots", "holds 'lots', not a number")],
)
def test_a_wrong_precipitation_field_is_a_short_error(demo_inputs, value, match):
    gauges, catchments, discharge = demo_inputs
    catchments = catchments.copy()
    if value is not None:
        catchments["rain"] = [value] + [800.0] * (len(catchments) - 1)
    with pytest.raises(InputError, match=match) as caught:
        run_atlas(gauges, catchments, discharge, Settings(precipitation_field="rain"))
    if value is not None:
        assert "row 1" in str(caught.value) and "mm/yr" in str(caught.value)


# --------------------------------------------------------------------------- raster


def _raster(path, values, transform, crs, nodata=None):
    rasterio = pytest.importorskip("rasterio")
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=values.shape[1],
        height=values.shape[0],
        count=1,
        dtype="float32",
        crs=crs,
        transform=transform,
        nodata=nodata,
    ) as out:
        out.write(values.astype("float32"), 1)
    return path


def test_projected_raster_mean_of_cells_inside(tmp_path):
    gpd = pytest.importorskip("geopandas")
    rasterio = pytest.importorskip("rasterio")
    from shapely.geometry import box

    from recharge_atlas.algorithms.precipitation import zonal_means

    # 10 × 10 cells of 100 m; columns 0-4 hold 600 mm/yr, 5-9 1,200; one no-data cell.
    values = np.where(np.arange(10)[None, :] < 5, 600.0, 1200.0) * np.ones((10, 1))
    values[0, 0] = -9999
    transform = rasterio.transform.from_origin(500000, 4000000, 100, 100)
    path = _raster(tmp_path / "p.tif", values, transform, "EPSG:32630", nodata=-9999)
    polygons = gpd.GeoDataFrame(
        geometry=[
            box(500000, 3999000, 500800, 4000000),  # 8 columns: 5 at 600 (one no-data), 3 at 1,200
            box(
                500520, 3999520, 500540, 3999540
            ),  # inside one cell, no centre: the cell it touches
            box(600000, 3000000, 600100, 3000100),  # outside the raster
        ],
        crs="EPSG:32630",
    )
    means = zonal_means(polygons, path)
    # by hand: 49 cells of 600 and 30 of 1,200 → (49·600 + 30·1200) / 79
    assert means[0] == pytest.approx((49 * 600 + 30 * 1200) / 79)
    assert means[1] == 1200.0
    assert np.isnan(means[2])


def test_raster_in_another_crs_is_overlaid_in_its_own(tmp_path):
    gpd = pytest.importorskip("geopandas")
    rasterio = pytest.importorskip("rasterio")
    from shapely.geometry import box

    from recharge_atlas.algorithms.precipitation import zonal_means

    # 0.01° cells over 10°E-11°E, 45°N-46°N; each column's value is its centre longitude × 100.
    columns = np.arange(100)
    values = (10.005 + columns / 100)[None, :] * 100 * np.ones((100, 1))
    transform = rasterio.transform.from_origin(10, 46, 0.01, 0.01)
    path = _raster(tmp_path / "g.tif", values, transform, "EPSG:4326")
    # A 2 km square around 10.5°E 45.5°N, given in UTM zone 32N (pyproj takes it there).
    from pyproj import Transformer

    x, y = Transformer.from_crs("EPSG:4326", "EPSG:32632", always_xy=True).transform(10.5, 45.5)
    polygons = gpd.GeoDataFrame(
        geometry=[box(x - 1000, y - 1000, x + 1000, y + 1000)], crs="EPSG:32632"
    )
    mean = zonal_means(polygons, path)[0]
    assert mean == pytest.approx(1050.0, abs=0.6)  # the cells about 10.5°E


def test_run_reads_a_raster_into_the_share(tmp_path, sample_paths):
    pytest.importorskip("rasterio")
    from recharge_atlas.algorithms.precipitation import RASTER_FIELD, zonal_means

    catchments = files.read_layer(sample_paths["catchments"], "catchments")
    import rasterio

    xmin, ymin, xmax, ymax = catchments.total_bounds
    transform = rasterio.transform.from_origin(xmin - 1000, ymax + 1000, 500, 500)
    shape = (int((ymax - ymin + 2000) / 500) + 1, int((xmax - xmin + 2000) / 500) + 1)
    path = _raster(tmp_path / "rain.tif", np.full(shape, 850.0), transform, catchments.crs)
    means = zonal_means(catchments, path)
    np.testing.assert_allclose(means, 850.0)
    assert RASTER_FIELD == "precipitation_mm_per_year"


def test_missing_rasterio_is_named_with_what_to_do(monkeypatch, tmp_path):
    import builtins

    from recharge_atlas.algorithms import precipitation

    real = builtins.__import__

    def no_rasterio(name, *args, **kwargs):
        if name.startswith("rasterio"):
            raise ImportError(name)
        return real(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_rasterio)
    with pytest.raises(InputError, match=r"needs rasterio.*recharge-atlas\[raster\]"):
        precipitation.zonal_means(None, tmp_path / "p.tif")


def test_unreadable_or_missing_raster_names_the_file(tmp_path):
    pytest.importorskip("rasterio")
    gpd = pytest.importorskip("geopandas")
    from shapely.geometry import box

    from recharge_atlas.algorithms.precipitation import zonal_means

    polygons = gpd.GeoDataFrame(geometry=[box(0, 0, 1, 1)], crs="EPSG:32630")
    with pytest.raises(InputError, match="does not exist"):
        zonal_means(polygons, tmp_path / "none.tif")
    bad = tmp_path / "bad.tif"
    bad.write_text("not a raster")
    with pytest.raises(InputError, match="could not be read") as caught:
        zonal_means(polygons, bad)
    assert "bad.tif" in str(caught.value)


# --------------------------------------------------------------------------- command line


def _cli_args(paths, catchments, out, *extra):
    return [
        "run",
        "--gauges", str(paths["gauges"]),
        "--catchments", str(catchments),
        "--discharge", str(paths["discharge"]),
        "--out", str(out),
        *extra,
    ]  # fmt: skip


def test_command_line_field_and_raster_give_the_same_share(tmp_path, sample_paths):
    pytest.importorskip("rasterio")
    import rasterio

    from recharge_atlas.cli import main

    catchments = files.read_layer(sample_paths["catchments"], "catchments")
    with_rain = catchments.assign(rain_mm=700.0)
    layer_path = tmp_path / "catchments_rain.gpkg"
    with_rain.to_file(layer_path, layer="catchments", driver="GPKG")
    before = layer_path.read_bytes()
    xmin, ymin, xmax, ymax = catchments.total_bounds
    transform = rasterio.transform.from_origin(xmin - 1000, ymax + 1000, 500, 500)
    shape = (int((ymax - ymin + 2000) / 500) + 1, int((xmax - xmin + 2000) / 500) + 1)
    raster = _raster(tmp_path / "rain.tif", np.full(shape, 700.0), transform, catchments.crs)

    by_field, by_raster = tmp_path / "field.gpkg", tmp_path / "raster.gpkg"
    args = _cli_args(sample_paths, layer_path, by_field, "--precipitation-field", "rain_mm")
    assert main(args) == 0
    args = _cli_args(sample_paths, layer_path, by_raster, "--precipitation-raster", str(raster))
    assert main(args) == 0
    assert layer_path.read_bytes() == before  # the input is not changed
    a = files.read_layer(by_field, "catchments")
    b = files.read_layer(by_raster, "catchments")
    np.testing.assert_allclose(
        a["recharge_share_of_precipitation"], a["recharge_mm_per_year"] / 700
    )
    np.testing.assert_allclose(
        a["recharge_share_of_precipitation"], b["recharge_share_of_precipitation"]
    )
    run = files.read_attribute_table(by_raster, "run")
    assert "rain.tif" in " ".join(map(str, run.to_numpy().ravel()))


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--precipitation-field", "rain"], "no field 'rain'"),
        (["--precipitation-field", "gauge_id"], "not a number"),
        (["--precipitation-raster", "missing.tif"], "precipitation raster does not exist"),
    ],
)
def test_command_line_precipitation_mistakes_exit_2(tmp_path, sample_paths, capsys, extra, message):
    from recharge_atlas.cli import main

    out = tmp_path / "out.gpkg"
    if extra[0] == "--precipitation-raster":
        pytest.importorskip("rasterio")
    code = main(_cli_args(sample_paths, sample_paths["catchments"], out, *extra))
    err = capsys.readouterr().err
    assert code == 2 and message in err and "Traceback" not in err
    assert not out.exists()
