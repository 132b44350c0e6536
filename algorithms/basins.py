"""Drainage areas on the ellipsoid, polygon repair, and the link between gauges and catchments.

Gauges link to catchments by a shared id field or, when the catchments have none, spatially:
the gauge is the outlet, so it takes the smallest catchment whose boundary lies within a
tolerance of it or that contains it. Nothing is fixed silently: every gauge that is unlinked,
ambiguous or claimed by several catchments, and every catchment without a gauge, is reported.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .discharge import gauge_id_text, require_columns
from .errors import InputError, quoted

#: Default distance (m) within which a gauge may lie from its catchment's boundary.
LINK_TOLERANCE_M = 100.0


def _layer_crs(geometries, what):
    """The layer's CRS, or a clear error when it has none (or one that says "undefined", as a
    GeoPackage written without a CRS reads back) or one not tied to the earth."""
    from pyproj import CRS

    if geometries.crs is None:
        raise InputError(f"the {what} layer has no coordinate reference system (CRS)")
    crs = CRS(geometries.crs)
    name = crs.name or ""
    if name.lower().startswith("undefined"):
        raise InputError(
            f"the {what} layer has no coordinate reference system (CRS): it says {quoted(name)}"
        )
    if crs.geodetic_crs is None:
        raise InputError(
            f"the {what} layer's coordinate reference system ({quoted(name)}) is not tied to the "
            "earth, so areas cannot be measured; give the layer its real CRS"
        )
    return crs


def geodesic_area_km2(geometries, what="catchments") -> np.ndarray:
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
    crs = _layer_crs(geometries, what)
    lonlat = geometries.to_crs(crs.geodetic_crs)
    geod = crs.get_geod()
    areas = np.array([_polygon_area(geod, g) for g in lonlat], dtype=float) / 1e6
    areas[~fits_the_earth(lonlat)] = np.nan
    return areas


def fits_the_earth(lonlat) -> np.ndarray:
    """Whether each geometry (in longitude and latitude) has finite coordinates with latitudes
    within ±90°: coordinates beyond mean a wrong CRS (metres read as degrees) or a bad vertex.
    Missing and empty geometries count as fitting."""
    if not len(lonlat):
        return np.zeros(0, dtype=bool)
    bounds = np.asarray(lonlat.bounds, dtype=float)
    empty = np.asarray([g is None or g.is_empty for g in lonlat], dtype=bool)
    with np.errstate(invalid="ignore"):
        fine = np.isfinite(bounds).all(axis=1) & (bounds[:, 1] >= -90.0) & (bounds[:, 3] <= 90.0)
    return fine | empty


def _polygon_area(geod, geometry):
    from shapely.geometry.polygon import orient

    parts = polygon_parts(geometry)
    if not parts:
        return np.nan
    total = 0.0
    for part in parts:
        area, _ = geod.geometry_area_perimeter(orient(part, sign=1.0))
        total += area
    return abs(total)


def polygon_parts(geometry):
    """The polygons of a geometry (its parts, or those inside a collection); [] when none."""
    if geometry is None or geometry.is_empty:
        return []
    kind = geometry.geom_type
    if kind == "Polygon":
        return [geometry]
    if kind in ("MultiPolygon", "GeometryCollection"):
        return [p for g in geometry.geoms for p in polygon_parts(g)]
    return []


def repair_polygons(geometries):
    """Check catchment polygons and repair invalid ones.

    Returns
    -------
    repaired : geopandas.GeoSeries
        The same rows; invalid polygons replaced by their valid form (``make_valid``, keeping
        polygonal parts), and rows that hold no polygon set to None.
    notes : dict
        Row position to a sentence: what was wrong and what was done.
    """
    from shapely.geometry import MultiPolygon
    from shapely.validation import explain_validity, make_valid

    out = []
    notes = {}
    for row, geometry in enumerate(geometries):
        if geometry is None or geometry.is_empty:
            notes[row] = "empty geometry: no area"
            out.append(None)
            continue
        if geometry.geom_type not in ("Polygon", "MultiPolygon"):
            notes[row] = f"geometry is a {geometry.geom_type}, not a polygon: no area"
            out.append(None)
            continue
        if not np.isfinite(np.asarray(geometry.bounds, dtype=float)).all():
            notes[row] = "polygon with coordinates that are not finite numbers: no area"
            out.append(None)
            continue
        if geometry.is_valid:
            out.append(geometry)
            continue
        reason = explain_validity(geometry)
        parts = polygon_parts(make_valid(geometry))
        if not parts:
            notes[row] = f"invalid polygon ({reason}) could not be repaired: no area"
            out.append(None)
            continue
        fixed = parts[0] if len(parts) == 1 else MultiPolygon(parts)
        notes[row] = f"invalid polygon ({reason}) repaired"
        out.append(fixed)
    import geopandas as gpd

    return gpd.GeoSeries(out, index=geometries.index, crs=geometries.crs), notes


# --------------------------------------------------------------------------- links


@dataclass
class GaugeLinks:
    """How gauges link to catchments.

    Attributes
    ----------
    method : str
        ``id`` or ``spatial``.
    catchment_of : dict
        Gauge id to the row position of its single catchment.
    unlinked : list
        Gauge ids with no catchment.
    several : dict
        Gauge ids carried by more than one catchment (id linking), with their row positions.
    ambiguous : dict
        Gauge ids that fit several catchments equally (spatial linking), with the rows.
    without_gauge : list
        Row positions of catchments no gauge links to.
    notes : dict
        Gauge id to a sentence explaining its link or why it has none.
    distance_m : dict
        Spatial linking: gauge id to its distance from the linked catchment's boundary (m).
    """

    method: str = "id"
    catchment_of: dict = field(default_factory=dict)
    unlinked: list = field(default_factory=list)
    several: dict = field(default_factory=dict)
    ambiguous: dict = field(default_factory=dict)
    without_gauge: list = field(default_factory=list)
    notes: dict = field(default_factory=dict)
    distance_m: dict = field(default_factory=dict)

    def table(self, gauge_ids, catchment_names=None) -> pd.DataFrame:
        """One row per gauge: ``gauge_id, link, catchment_row, catchment, distance_m, note``."""
        rows = []
        for gid in gauge_ids:
            row = self.catchment_of.get(gid)
            if row is not None:
                status = "linked"
            elif gid in self.several:
                status = "several catchments"
            elif gid in self.ambiguous:
                status = "ambiguous"
            else:
                status = "unlinked"
            name = None
            if row is not None and catchment_names is not None:
                name = catchment_names[row]
            rows.append(
                {
                    "gauge_id": gid,
                    "link": status,
                    "method": self.method,
                    "catchment_row": row if row is not None else -1,
                    "catchment": name,
                    "distance_m": self.distance_m.get(gid, np.nan),
                    "note": self.notes.get(gid, ""),
                }
            )
        return pd.DataFrame(
            rows,
            columns=[
                "gauge_id",
                "link",
                "method",
                "catchment_row",
                "catchment",
                "distance_m",
                "note",
            ],
        )


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
    links = GaugeLinks(method="id")
    for gid in gauge_ids:
        rows = positions.get(gid, [])
        if not rows:
            links.unlinked.append(gid)
            links.notes[gid] = f"no catchment carries this gauge id in field {field_name!r}"
        elif len(rows) > 1:
            links.several[gid] = rows
            links.notes[gid] = (
                f"{len(rows)} catchments carry this gauge id (rows {', '.join(str(r) for r in rows)})"
            )
        else:
            links.catchment_of[gid] = rows[0]
    links.without_gauge = [row for row, gid in enumerate(ids) if gid is None or gid not in wanted]
    return links


def link_spatially(
    gauge_ids,
    gauge_points,
    catchments,
    tolerance_m=LINK_TOLERANCE_M,
    overlap_tolerance=0.05,
    reporter=None,
) -> GaugeLinks:
    """Link each gauge to the smallest catchment it is the outlet of.

    Parameters
    ----------
    gauge_ids : list of str
        Gauge ids, one per point.
    gauge_points : geopandas.GeoSeries
        The gauges' points (any CRS; transformed to the catchments' CRS).
    catchments : geopandas.GeoSeries
        Catchment polygons (total drainage area of each gauge; nested ones overlap).
    tolerance_m : float
        A gauge may lie this far (metres, on the ellipsoid) from its catchment's boundary.
    overlap_tolerance : float
        Share of a smaller catchment that may lie outside a larger one that still contains it.

    Notes
    -----
    Candidates are the catchments that contain the gauge or whose boundary lies within the
    tolerance. The smallest (by geodesic area) wins. If another candidate does not contain the
    winner (two neighbouring catchments meet at the gauge), the gauge is ambiguous and stays
    unlinked. When several gauges pick one catchment, the one nearest its boundary (its
    outlet) keeps it and the others are reported. Distances are measured in a local azimuthal
    equidistant projection centred on each gauge.
    """
    import geopandas as gpd
    from pyproj import CRS, Transformer

    if tolerance_m is None or not np.isfinite(tolerance_m) or tolerance_m < 0:
        raise InputError(
            f"link tolerance was {tolerance_m!r}; expected a distance in metres, 0 or more"
        )
    crs = _layer_crs(catchments, "catchments")
    _layer_crs(gauge_points, "gauges")
    points = gauge_points.to_crs(crs)
    to_lonlat = Transformer.from_crs(crs, CRS.from_epsg(4326), always_xy=True)
    areas = geodesic_area_km2(catchments)
    bounds = np.array(
        [g.bounds if g is not None and not g.is_empty else (np.nan,) * 4 for g in catchments]
    )
    # A generous first filter on bounding boxes, in the layer's units.
    pad = tolerance_m if not crs.is_geographic else tolerance_m / 90_000.0
    links = GaugeLinks(method="spatial")
    chosen = {}
    total = len(gauge_ids)
    for done, (gid, point) in enumerate(zip(gauge_ids, points)):
        if reporter is not None:
            if reporter.cancelled():
                from .errors import Cancelled

                raise Cancelled("run cancelled")
            reporter.progress(done, total, gid)
        if gid is None:
            continue
        if point is None or point.is_empty:
            links.unlinked.append(gid)
            links.notes[gid] = "gauge has no location"
            continue
        if point.geom_type != "Point":
            point = point.representative_point()
        near = np.flatnonzero(
            (bounds[:, 0] - pad <= point.x)
            & (point.x <= bounds[:, 2] + pad)
            & (bounds[:, 1] - pad <= point.y)
            & (point.y <= bounds[:, 3] + pad)
        )
        near = [
            r for r in near if catchments.iloc[r] is not None and not catchments.iloc[r].is_empty
        ]
        lon, lat = to_lonlat.transform(point.x, point.y)
        if not (np.isfinite(lon) and np.isfinite(lat) and -90.0 <= lat <= 90.0):
            links.unlinked.append(gid)
            links.notes[gid] = "gauge location lies outside its CRS's range of the earth"
            continue
        local = CRS.from_proj4(f"+proj=aeqd +lat_0={lat} +lon_0={lon} +datum=WGS84 +units=m")
        shapes = gpd.GeoSeries([point] + [catchments.iloc[r] for r in near], crs=crs).to_crs(local)
        origin = shapes.iloc[0]
        candidates = []
        for k, row in enumerate(near):
            polygon = catchments.iloc[row]
            shape = shapes.iloc[k + 1]
            distance = shape.boundary.distance(origin)
            if shape.covers(origin) or distance <= tolerance_m:
                candidates.append((areas[row], row, distance, polygon))
        if not candidates:
            links.unlinked.append(gid)
            links.notes[gid] = (
                f"no catchment contains the gauge or passes within {tolerance_m:g} m of it"
            )
            continue
        candidates.sort(key=lambda c: (c[0], c[1]))
        area, row, distance, polygon = candidates[0]
        rivals = [c for c in candidates[1:] if not _contains(c[3], polygon, overlap_tolerance)]
        if rivals:
            rows = [row] + [c[1] for c in rivals]
            links.ambiguous[gid] = rows
            links.notes[gid] = (
                f"ambiguous: catchments in rows {', '.join(str(r) for r in rows)} meet at the gauge and none contains the other"
            )
            continue
        chosen.setdefault(row, []).append((distance, gid))
        links.distance_m[gid] = float(distance)
    for row, claims in chosen.items():
        claims.sort()
        owner = claims[0][1]
        links.catchment_of[owner] = row
        for _distance, gid in claims[1:]:
            links.unlinked.append(gid)
            links.notes[gid] = (
                f"catchment in row {row} is the basin of gauge {owner}, which lies nearer its boundary"
            )
            links.distance_m.pop(gid, None)
    linked_rows = set(links.catchment_of.values())
    links.without_gauge = [row for row in range(len(catchments)) if row not in linked_rows]
    return links


def _contains(big, small, overlap_tolerance):
    """True when all but ``overlap_tolerance`` of ``small``'s area lies inside ``big``."""
    small_area = small.area
    if small_area <= 0:
        return False
    return big.intersection(small).area >= (1.0 - overlap_tolerance) * small_area
