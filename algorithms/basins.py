"""Drainage areas on the ellipsoid and the link between gauges and catchments."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .discharge import gauge_id_text, require_columns
from .errors import InputError


def geodesic_area_km2(geometries) -> np.ndarray:
    """Area of each polygon on the ellipsoid of its layer's CRS, in km².

    Parameters
    ----------
    geometries : geopandas.GeoSeries
        Polygons or multipolygons in any CRS, projected or geographic.

    Returns
    -------
    numpy.ndarray
        Area in km²; NaN for missing, empty or non-polygon geometries.

    Notes
    -----
    The polygons are expressed in longitude and latitude on the CRS's own datum and their area
    is computed on its ellipsoid with ``pyproj.Geod`` (Karney 2013, *Algorithms for
    geodesics*), so no map projection distorts it. Exteriors count positive and holes negative.
    """
    from pyproj import CRS

    if geometries.crs is None:
        raise InputError("the catchments layer has no coordinate reference system (CRS)")
    crs = CRS(geometries.crs)
    lonlat = geometries.to_crs(crs.geodetic_crs)
    geod = crs.get_geod()
    return np.array([_polygon_area(geod, g) for g in lonlat], dtype=float) / 1e6


def _polygon_area(geod, geometry):
    from shapely.geometry.polygon import orient

    if geometry is None or geometry.is_empty:
        return np.nan
    kind = geometry.geom_type
    if kind == "Polygon":
        parts = [geometry]
    elif kind == "MultiPolygon":
        parts = list(geometry.geoms)
    else:
        return np.nan
    total = 0.0
    for part in parts:
        area, _ = geod.geometry_area_perimeter(orient(part, sign=1.0))
        total += area
    return abs(total)


@dataclass
class GaugeLinks:
    """How gauges link to catchments.

    Attributes
    ----------
    catchment_of : dict
        Gauge id to the row position of its single catchment.
    unlinked : list
        Gauge ids no catchment carries.
    several : dict
        Gauge ids carried by more than one catchment, with their row positions.
    without_gauge : list
        Row positions of catchments whose gauge id matches no gauge.
    """

    catchment_of: dict = field(default_factory=dict)
    unlinked: list = field(default_factory=list)
    several: dict = field(default_factory=dict)
    without_gauge: list = field(default_factory=list)


def link_by_id(gauge_ids, catchments, field_name) -> GaugeLinks:
    """Link gauges to catchments through a shared gauge-id field.

    Ids are compared as text (``1001`` and ``"1001"`` match). Nothing is fixed silently:
    unlinked gauges, gauges carried by several catchments and catchments without a gauge are
    all reported.
    """
    require_columns(catchments, [field_name], "catchments layer")
    ids = list(gauge_id_text(catchments[field_name].to_numpy()))
    wanted = set(gauge_ids)
    positions = {}
    for row, gid in enumerate(ids):
        if gid is not None:
            positions.setdefault(gid, []).append(row)
    links = GaugeLinks()
    for gid in gauge_ids:
        rows = positions.get(gid, [])
        if not rows:
            links.unlinked.append(gid)
        elif len(rows) > 1:
            links.several[gid] = rows
        else:
            links.catchment_of[gid] = rows[0]
    links.without_gauge = [row for row, gid in enumerate(ids) if gid is None or gid not in wanted]
    return links
