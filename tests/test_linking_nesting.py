"""Linking gauges to catchments, nested and incremental recharge, and subbasin maps (issue 4).

Checks against outside sources: the generator's known truth per elementary unit (incremental
depths), pyproj's transformation to EPSG:4326 (areas and links unchanged), and shapely's own
validity rules for the repaired polygons.
"""

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import MultiPolygon, Point, Polygon, box

from recharge_atlas.algorithms.basins import link_spatially, repair_polygons
from recharge_atlas.algorithms.errors import InputError
from recharge_atlas.algorithms.nesting import find_nesting
from recharge_atlas.algorithms.pipeline import Settings, run_atlas, run_atlas_subbasins
from recharge_atlas.algorithms.subbasins import read_network

CRS = "EPSG:32624"


@pytest.fixture(scope="module")
def by_id(demo_region):
    return run_atlas(demo_region.gauges, demo_region.catchments, demo_region.discharge)


def _numbers(result):
    columns = [
        "gauge_id",
        "area_km2",
        "recession_index_days",
        "recharge_mm_per_year",
        "incremental_area_km2",
        "incremental_recharge_mm_per_year",
        "downstream_gauge",
    ]
    return result.catchments.dropna(subset=["gauge_id"])[columns].set_index("gauge_id").sort_index()


def test_spatial_linking_gives_the_same_results_as_the_id_field(demo_region, by_id):
    without_ids = demo_region.catchments.drop(columns="gauge_id")
    spatial = run_atlas(demo_region.gauges, without_ids, demo_region.discharge)
    assert spatial.summary["link"] == "spatial" and by_id.summary["link"] == "id"
    pd.testing.assert_frame_equal(_numbers(spatial), _numbers(by_id))
    assert (spatial.links["link"] == "linked").all()


def test_geographic_layers_give_the_same_areas_and_links(demo_region, by_id):
    catchments = demo_region.catchments.to_crs("EPSG:4326").drop(columns="gauge_id")
    gauges = demo_region.gauges.to_crs("EPSG:4326")
    result = run_atlas(gauges, catchments, demo_region.discharge)
    a, b = _numbers(result), _numbers(by_id)
    np.testing.assert_allclose(a["area_km2"], b["area_km2"], rtol=0.005)  # issue 4: within 0.5 %
    np.testing.assert_allclose(a["incremental_area_km2"], b["incremental_area_km2"], rtol=0.005)
    assert list(a.index) == list(b.index)


def test_nesting_and_incremental_areas_of_the_demo(demo_region, by_id):
    c = by_id.catchments.dropna(subset=["gauge_id"]).set_index("gauge_id")
    assert c.loc["QM04", "downstream_gauge"] == "QM02"
    assert c.loc["QM02", "downstream_gauge"] == "QM01"
    assert c.loc["QT03", "downstream_gauge"] == "QM01"
    assert c.loc["QM01", "upstream_gauges"] == "QM02, QT03"
    units = demo_region.truth_units.drop_duplicates("unit_id").set_index("gauge_id")["area_km2"]
    for gid in ["QM01", "QM02", "QT03", "QM04", "HB05"]:
        assert c.loc[gid, "incremental_area_km2"] == pytest.approx(units.loc[gid], rel=1e-3)


@pytest.mark.parametrize("seed", [7, 8])
def test_incremental_depths_within_twenty_percent_of_the_truth(seed):
    from recharge_atlas.sample_layers.generate import make_region

    region = make_region(seed=seed, poor_record=False)
    result = run_atlas(region.gauges, region.catchments, region.discharge)
    c = result.catchments.dropna(subset=["gauge_id"]).set_index("gauge_id")
    truth = region.truth_units.dropna(subset=["gauge_id"])
    for gid, row in c.iterrows():
        years = result.annual[
            (result.annual["gauge_id"] == gid) & result.annual["incremental_recharge_mm"].notna()
        ]["water_year"]
        units = truth[(truth["gauge_id"] == gid) & truth["water_year"].isin(years)]
        true_mm = (
            units["recharge_m3"].sum()
            / len(years)
            / (units.drop_duplicates("unit_id")["area_km2"].sum() * 1e3)
        )
        assert row["incremental_recharge_mm_per_year"] == pytest.approx(true_mm, rel=0.20), gid


def test_negative_incremental_recharge_is_flagged(demo_region):
    # Give the outlet the flow of its smallest tributary: the reach then loses water.
    discharge = demo_region.discharge.copy()
    small = discharge[discharge["gauge_id"] == "QM04"].copy()
    discharge = discharge[discharge["gauge_id"] != "QM01"]
    discharge = pd.concat([discharge, small.assign(gauge_id="QM01")], ignore_index=True)
    result = run_atlas(demo_region.gauges, demo_region.catchments, discharge)
    row = result.catchments.set_index("gauge_id").loc["QM01"]
    assert row["incremental_recharge_mm_per_year"] < 0
    assert "negative incremental recharge" in row["quality"]


def _square_gauge_layers():
    # Two neighbouring 10 km squares meeting along x = 10 km; gauges in, between and far away.
    west, east = box(0, 0, 10_000, 10_000), box(10_000, 0, 20_000, 10_000)
    catchments = gpd.GeoSeries([west, east], crs=CRS).translate(480_000, 4_420_000)
    points = gpd.GeoSeries(
        [Point(5_000, 0), Point(10_000, 5_000), Point(50_000, 50_000), Point(15_000, 30)], crs=CRS
    ).translate(480_000, 4_420_000)
    return catchments, points


def test_ambiguous_unlinked_and_shared_catchments_are_reported():
    catchments, points = _square_gauge_layers()
    links = link_spatially(["A", "B", "C", "D"], points, catchments, tolerance_m=100.0)
    assert links.catchment_of == {"A": 0, "D": 1}
    assert links.ambiguous == {"B": [0, 1]}
    assert "ambiguous" in links.notes["B"]
    assert links.unlinked == ["C"] and "within 100 m" in links.notes["C"]
    table = links.table(["A", "B", "C", "D"])
    assert list(table["link"]) == ["linked", "ambiguous", "unlinked", "linked"]


def test_two_gauges_in_one_catchment_the_outlet_keeps_it():
    catchments, _ = _square_gauge_layers()
    points = gpd.GeoSeries([Point(5_000, 5_000), Point(5_000, 10)], crs=CRS).translate(
        480_000, 4_420_000
    )
    links = link_spatially(["inside", "outlet"], points, catchments.iloc[:1], tolerance_m=100.0)
    assert links.catchment_of == {"outlet": 0}
    assert "nearer its boundary" in links.notes["inside"]


def test_multipart_and_invalid_polygons():
    bowtie = Polygon([(0, 0), (10_000, 10_000), (10_000, 0), (0, 10_000), (0, 0)])  # self-crossing
    islands = MultiPolygon([box(20_000, 0, 25_000, 5_000), box(30_000, 0, 35_000, 5_000)])
    series = gpd.GeoSeries([bowtie, islands, Point(0, 0), None], crs=CRS).translate(
        480_000, 4_420_000
    )
    repaired, notes = repair_polygons(series)
    assert repaired.iloc[0].is_valid and repaired.iloc[0].area == pytest.approx(50_000_000)
    assert "repaired" in notes[0] and "Self-intersection" in notes[0]
    assert repaired.iloc[1].equals(series.iloc[1]) and 1 not in notes
    assert "not a polygon" in notes[2] and "empty" in notes[3]


def test_invalid_catchment_is_repaired_and_said_so(demo_region):
    catchments = demo_region.catchments.copy()
    ring = list(catchments.geometry.iloc[3].exterior.coords)
    # Swap two neighbouring vertices to make the ring cross itself.
    ring[5], ring[6] = ring[6], ring[5]
    catchments.loc[3, "geometry"] = Polygon(ring)
    assert not catchments.geometry.iloc[3].is_valid
    result = run_atlas(demo_region.gauges, catchments, demo_region.discharge)
    row = result.catchments.iloc[3]
    assert "repaired" in row["quality"]
    assert result.catchments.geometry.iloc[3].is_valid
    assert np.isfinite(row["recharge_mm_per_year"])


def test_reported_area_mismatch_is_flagged(demo_region):
    gauges = demo_region.gauges.assign(reported_km2=[794.0, 400.0, 121.0, 55.0, 204.0, 90.0])
    result = run_atlas(
        gauges,
        demo_region.catchments,
        demo_region.discharge,
        Settings(reported_area_field="reported_km2"),
    )
    q = result.catchments.set_index("gauge_id")["quality"]
    assert "differs from the reported 400.0 km²" in q.loc["QM02"]
    assert q.loc["QM01"] == "ok"


# ---------------------------------------------------------------- subbasin maps


def test_subbasin_form_gives_the_same_gauge_results(demo_region, by_id):
    result = run_atlas_subbasins(demo_region.gauges, demo_region.subbasins, demo_region.discharge)
    a, b = _numbers(result), _numbers(by_id)
    np.testing.assert_allclose(
        a["recharge_mm_per_year"].to_numpy(float),
        b["recharge_mm_per_year"].to_numpy(float),
        rtol=1e-9,
    )
    np.testing.assert_allclose(a["area_km2"], b["area_km2"], rtol=1e-6)
    sub = result.subbasins.set_index("subbasin_id")
    inc = b["incremental_recharge_mm_per_year"]
    assert sub.loc["U4", "recharge_mm_per_year"] == pytest.approx(inc.loc["QM01"])
    assert sub.loc["U2", "downstream_gauge"] == "QM02"
    assert sub.loc["U7", "estimate_source"].startswith("donor: gauge")
    assert np.isfinite(sub.loc["U7", "recharge_mm_per_year"])


def test_subbasins_without_a_gauge_downstream_can_stay_empty(demo_region):
    result = run_atlas_subbasins(
        demo_region.gauges, demo_region.subbasins, demo_region.discharge, Settings(ungauged="empty")
    )
    sub = result.subbasins.set_index("subbasin_id")
    assert np.isnan(sub.loc["U8", "recharge_mm_per_year"])
    assert sub.loc["U8", "estimate_source"] == "no gauge downstream"


def test_subbasin_network_problems():
    frame = pd.DataFrame({"sid": ["a", "b", "c"], "down": ["b", "c", "a"]})
    with pytest.raises(InputError, match="drain in a loop"):
        read_network(frame, "sid", "down")
    with pytest.raises(InputError, match="repeated: a"):
        read_network(pd.DataFrame({"sid": ["a", "a"], "down": [None, None]}), "sid", "down")
    network = read_network(pd.DataFrame({"sid": ["a", "b"], "down": ["b", "zz"]}), "sid", "down")
    assert network.downstream == {"a": "b", "b": None}
    assert "matches no subbasin" in network.notes[0]


def test_nesting_tolerates_small_digitising_differences():
    big = box(0, 0, 10_000, 10_000)
    small = box(-100, 2_000, 4_000, 6_000)  # 2.4 % of it sticks out of the big one
    basins = gpd.GeoSeries([big, small], index=["down", "up"], crs=CRS).translate(
        480_000, 4_420_000
    )
    nested = find_nesting(basins, overlap_tolerance=0.05)
    assert nested.downstream == {"down": None, "up": "down"}
    strict = find_nesting(basins, overlap_tolerance=0.01)
    assert strict.downstream["up"] is None


def test_incremental_areas_layer_has_no_overlaps(by_id):
    layer = by_id.incremental_areas()
    assert list(layer["gauge_id"]) == ["QM01", "QM02", "QT03", "QM04", "HB05", "TB06"]
    assert layer.geometry.is_valid.all()
    total = sum(g.area for g in layer.geometry)
    from shapely.ops import unary_union

    assert unary_union(list(layer.geometry)).area == pytest.approx(total, rel=1e-6)  # no overlaps
    c = by_id.catchments.dropna(subset=["gauge_id"]).set_index("gauge_id")
    np.testing.assert_allclose(
        layer.set_index("gauge_id")["incremental_recharge_mm_per_year"].loc[["QM01", "QM02"]],
        c.loc[["QM01", "QM02"], "incremental_recharge_mm_per_year"],
    )


def test_check_links_without_hydrology(demo_region):
    from recharge_atlas.algorithms.pipeline import check_links

    layer, links = check_links(demo_region.gauges, demo_region.catchments.drop(columns="gauge_id"))
    assert (links["link"] == "linked").all() and (links["method"] == "spatial").all()
    c = layer.dropna(subset=["gauge_id"]).set_index("gauge_id")
    assert c.loc["QM04", "downstream_gauge"] == "QM02"
    assert (c["quality"] == "ok").all()
    assert "recharge_mm_per_year" not in layer.columns


def test_gauges_alone_with_an_area_field(demo_region, by_id):
    from recharge_atlas.algorithms.pipeline import run_gauges

    areas = by_id.catchments.dropna(subset=["gauge_id"]).set_index("gauge_id")["area_km2"]
    gauges = demo_region.gauges.assign(area=demo_region.gauges["gauge_id"].map(areas))
    result = run_gauges(gauges, demo_region.discharge, area_field="area")
    assert result.catchments is None
    table = result.gauge_table().set_index("gauge_id")
    expected = by_id.gauge_table().set_index("gauge_id")
    np.testing.assert_allclose(
        table["recharge_mm_per_year"].to_numpy(float),
        expected["recharge_mm_per_year"].to_numpy(float),
        rtol=1e-12,
    )
    no_area = run_gauges(demo_region.gauges, demo_region.discharge).gauge_table()
    assert (
        no_area["recharge_mm_per_year"].isna().all()
        and no_area["recession_index_days"].notna().all()
    )
