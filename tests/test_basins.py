"""Geodesic drainage areas and linking gauges to catchments.

Check against a source outside the project: the closed-form area of a zone of an ellipsoid of
revolution between two parallels (e.g. Snyder 1987, *Map Projections — A Working Manual*, USGS
Professional Paper 1395, the authalic-latitude function q), with the WGS 84 ellipsoid
(a = 6378137 m, 1/f = 298.257223563), and pyproj's own CRS transformation.
"""

import math

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import MultiPolygon, Polygon, box

from recharge_atlas.algorithms.basins import geodesic_area_km2, link_by_id
from recharge_atlas.algorithms.errors import InputError

WGS84_A = 6378137.0
WGS84_F = 1.0 / 298.257223563


def _zone_area_m2(lat1, lat2, dlon):
    """Area on the WGS 84 ellipsoid between two parallels over ``dlon`` degrees of longitude."""
    e2 = WGS84_F * (2.0 - WGS84_F)
    e = math.sqrt(e2)

    def q(lat):  # Snyder (1987) eq. 3-12
        s = math.sin(math.radians(lat))
        return (1 - e2) * (
            s / (1 - e2 * s * s) - (1 / (2 * e)) * math.log((1 - e * s) / (1 + e * s))
        )

    # Zone between two parallels over the full circle: π a² (q2 − q1) (on a sphere q = 2 sin φ,
    # giving the familiar 2π R² (sin φ2 − sin φ1)).
    return math.pi * WGS84_A**2 * (q(lat2) - q(lat1)) * dlon / 360.0


def _parallel_box(lon1, lat1, lon2, lat2, step=0.01):
    """A lon/lat box whose north and south edges follow the parallels closely."""
    lons = np.arange(lon1, lon2 + step / 2, step)
    south = [(x, lat1) for x in lons]
    north = [(x, lat2) for x in lons[::-1]]
    return Polygon(south + north)


@pytest.mark.parametrize(("lat1", "lat2"), [(0.0, 1.0), (40.0, 40.5), (-61.0, -60.2)])
def test_area_matches_the_closed_form_ellipsoidal_zone(lat1, lat2):
    poly = _parallel_box(10.0, lat1, 11.0, lat2)
    layer = gpd.GeoSeries([poly], crs="EPSG:4326")
    expected = _zone_area_m2(lat1, lat2, 1.0) / 1e6
    assert geodesic_area_km2(layer)[0] == pytest.approx(expected, rel=2e-5)


def test_area_is_the_same_in_a_projected_crs():
    poly = box(-39.2, 40.0, -38.9, 40.3)
    geographic = gpd.GeoSeries([poly], crs="EPSG:4326")
    projected = geographic.to_crs("EPSG:32624")
    a = geodesic_area_km2(geographic)[0]
    b = geodesic_area_km2(projected)[0]
    assert b == pytest.approx(a, rel=1e-4)  # straight edges in each CRS differ very slightly


def test_holes_and_multiparts():
    outer = box(0.0, 0.0, 0.2, 0.2)
    hole = box(0.05, 0.05, 0.1, 0.1)
    with_hole = Polygon(outer.exterior.coords, [hole.exterior.coords])
    layer = gpd.GeoSeries(
        [outer, with_hole, hole, MultiPolygon([hole, box(0.3, 0.3, 0.35, 0.35)])], crs="EPSG:4326"
    )
    a_outer, a_with_hole, a_hole, a_multi = geodesic_area_km2(layer)
    assert a_with_hole == pytest.approx(a_outer - a_hole, rel=1e-9)
    assert a_multi == pytest.approx(2 * a_hole, rel=1e-3)


def test_missing_crs_is_an_input_error():
    with pytest.raises(InputError, match="no coordinate reference system"):
        geodesic_area_km2(gpd.GeoSeries([box(0, 0, 1, 1)]))


def test_empty_and_non_polygon_geometries_have_no_area():
    from shapely.geometry import Point

    out = geodesic_area_km2(gpd.GeoSeries([Polygon(), Point(0, 0), None], crs="EPSG:4326"))
    assert np.isnan(out).all()


def test_link_by_id_reports_everything_it_cannot_link():
    catchments = pd.DataFrame({"gauge_id": [1001, "1002", "1002", None, "9999"]})
    links = link_by_id(["1001", "1002", "1003"], catchments, "gauge_id")
    assert links.catchment_of == {"1001": 0}  # 1001 (a number) matches "1001" (text)
    assert links.several == {"1002": [1, 2]}
    assert links.unlinked == ["1003"]
    assert links.without_gauge == [3, 4]


def test_link_by_id_names_a_missing_field():
    with pytest.raises(InputError, match=r"no field 'station'.*fields found: gauge_id"):
        link_by_id(["1"], pd.DataFrame({"gauge_id": ["1"]}), "station")
