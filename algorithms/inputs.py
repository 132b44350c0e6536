"""What a run takes from its layers before the hydrology: gauge ids, numeric fields (a given K,
a reported area, precipitation), each gauge's daily record, and the gauges linked to their
basins (areas, nesting).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .basins import geodesic_area_km2, link_by_id, link_spatially, repair_polygons
from .discharge import (
    MISSING_MARKERS,
    NO_FIELDS_REASON,
    gauge_id_codes,
    gauge_id_text,
    require_columns,
    tidy_discharge,
)
from .errors import InputError, counted, listed, quoted
from .nesting import find_nesting
from .quality import AREA_MISMATCH
from .settings import check_recession_index


def _given_recession_index(gauges, settings):
    """K per gauge from the gauges layer's field, when the settings name one."""
    if not settings.recession_index_field:
        return {}
    ids = gauge_id_text(gauges[settings.gauge_id_field].to_numpy())
    values = _number_field(gauges, settings.recession_index_field, ids, "a recession index in days")
    given = {}
    for gid, value in zip(ids, values):
        if gid is None or not np.isfinite(value):
            continue
        given[gid] = check_recession_index(value, field=settings.recession_index_field, gauge=gid)
    return given


def _number_field(gauges, field, ids, expected, what="gauges layer"):
    """A numeric field of the gauges layer (or ``what``) as floats (NaN where empty). A value
    that is not a number is an error naming the gauge (``ids``; None: the row): a text field
    given by mistake would otherwise be ignored without a word."""
    require_columns(gauges, [field], what)
    column = pd.Series(gauges[field].to_numpy(), dtype=object)
    values = pd.to_numeric(column, errors="coerce").to_numpy(float)
    text = column.astype(str).str.strip()
    empty = column.isna().to_numpy() | text.str.lower().isin(MISSING_MARKERS).to_numpy()
    wrong = np.flatnonzero(np.isnan(values) & ~empty)
    if wrong.size:
        first = int(wrong[0])
        raise InputError(
            f"the {what}'s field holds {quoted(column.iloc[first])}, not a number "
            f"({counted(wrong.size, 'feature')} so); expected {expected}, or an empty value",
            field=field,
            gauge=ids[first] if ids is not None else None,
            row=None if ids is not None else first + 1,
        )
    return values


def _precipitation(catchments, settings):
    """Mean annual precipitation (mm/yr) of each catchment row, or None when not given."""
    if not settings.precipitation_field:
        return None
    return _number_field(
        catchments,
        settings.precipitation_field,
        None,
        "a mean annual precipitation in mm/yr",
        what="catchments layer",
    )


def _precipitation_share(recharge, precipitation):
    """``(share, note)``: recharge ÷ precipitation (NaN without a precipitation above 0), and
    a caution when the share is above 1 (else "")."""
    if not (np.isfinite(recharge) and np.isfinite(precipitation) and precipitation > 0):
        return np.nan, ""
    share = recharge / precipitation
    if share > 1:
        return share, (
            f"recharge is {share:.1f} times the precipitation ({precipitation:,.0f} mm/yr): "
            "check that the precipitation is a yearly mean in mm, and the catchment"
        )
    return share, ""


def _gauge_points(gauges, what="gauges"):
    """The gauges' geometry, or a clear error when spatial work needs it and there is none."""
    geometry = getattr(gauges, "geometry", None)
    if geometry is None or not hasattr(gauges, "crs"):
        raise InputError(
            f"the {what} layer has no point geometry, so gauges cannot be located spatially"
        )
    return geometry


def _reported_area_notes(gauges, settings, areas_by_gauge):
    """Quality notes for gauges whose reported area differs from the computed one."""
    if not settings.reported_area_field:
        return {}
    ids = gauge_id_text(gauges[settings.gauge_id_field].to_numpy())
    reported = _number_field(gauges, settings.reported_area_field, ids, "an area in km²")
    notes = {}
    for gid, value in zip(ids, reported):
        area = areas_by_gauge.get(gid, np.nan)
        if gid is None or not (np.isfinite(value) and value > 0 and np.isfinite(area)):
            continue
        share = area / value - 1.0
        if abs(share) > AREA_MISMATCH:
            notes[gid] = (
                f"computed area {area:,.1f} km² differs from the reported {value:,.1f} km² by {100 * share:+.0f}%"
            )
    return notes


def _gauge_ids(gauges, settings, reporter=None):
    """The gauges layer's ids, in order. A repeated id is an error (its flows could go to the
    wrong catchment); features without an id are left out and counted in a caution."""
    require_columns(gauges, [settings.gauge_id_field], "gauges layer")
    codes, ids = gauge_id_codes(gauges[settings.gauge_id_field])
    blank = np.flatnonzero(codes < 0)
    if blank.size and ids and reporter is not None:
        reporter.warning(
            f"gauges layer: {counted(blank.size, 'feature')} without a gauge id in field "
            f"{quoted(settings.gauge_id_field)} left out ({'row' if blank.size == 1 else 'rows'} "
            f"{', '.join(map(str, blank[:5] + 1))}{' …' if blank.size > 5 else ''})"
        )
    named = codes[codes >= 0]
    repeated = np.flatnonzero(np.bincount(named, minlength=len(ids)) > 1) if named.size else []
    if len(repeated):
        rows = np.flatnonzero(codes == repeated[0]) + 1
        raise InputError(
            f"the gauges layer has gauge id {quoted(ids[repeated[0]])} on "
            f"{counted(len(rows), 'feature')} (rows {', '.join(map(str, rows[:5]))}"
            f"{' …' if len(rows) > 5 else ''}): each gauge needs an id of its own, or its flows "
            "could go to the wrong catchment"
            + (f" ({counted(len(repeated), 'id')} repeated)" if len(repeated) > 1 else ""),
            field=settings.gauge_id_field,
        )
    if not ids:
        raise InputError("the gauges layer holds no gauge ids", field=settings.gauge_id_field)
    return ids


def _records(discharge, settings, left_out=None):
    return tidy_discharge(
        discharge,
        gauge_field=settings.discharge_gauge_field,
        date_field=settings.date_field,
        value_field=settings.value_field,
        units=settings.units,
        flag_field=settings.flag_field,
        flag_values=settings.flag_values,
        min_day_coverage=settings.min_day_coverage,
        left_out=left_out,
    )


@dataclass
class _Basins:
    """Catchments after repair, their areas, the links and the nesting of the linked gauges."""

    geometry: object
    repairs: dict
    areas: np.ndarray
    links: object
    nesting: object

    def area_of(self):
        return {gid: float(self.areas[row]) for gid, row in self.links.catchment_of.items()}


def _link_basins(
    gauges, gauge_ids, catchments, settings, reporter, report_progress=False
) -> _Basins:
    """Repair the catchments, measure them, link the gauges and find the nesting.

    With ``report_progress`` the spatial linking reports progress and can be cancelled per
    gauge (when linking is the whole job).
    """
    import geopandas as gpd

    method = settings.link_method(list(catchments.columns))
    if method == "id":
        require_columns(catchments, [settings.catchment_gauge_field], "catchments layer")
    elif settings.link == "auto":  # chosen because the id field is absent: say so
        found = [c for c in catchments.columns if c != catchments.geometry.name]
        why = getattr(catchments, "attrs", {}).get(NO_FIELDS_REASON)
        reporter.warning(
            f"the catchments layer has no field {quoted(settings.catchment_gauge_field)}"
            + (f" ({why})" if why else f" (fields found: {listed(found)})")
            + ": gauges are linked to catchments by location instead (a gauge at a "
            "catchment's outlet); name the id field with --catchment-gauge-field / "
            "CATCHMENT_GAUGE_FIELD, or choose --link spatial / LINK"
        )
    if not len(catchments):
        raise InputError("the catchments layer has no features")
    geometry, repairs = repair_polygons(catchments.geometry)
    if len(repairs) == len(catchments) and all(g is None for g in geometry):
        kinds = sorted({_kind_of(g) for g in catchments.geometry})
        raise InputError(
            f"the catchments layer holds no polygon (its geometries are {', '.join(kinds)})"
        )
    areas = geodesic_area_km2(geometry)
    outside = [
        row for row, g in enumerate(geometry) if g is not None and not np.isfinite(areas[row])
    ]
    if outside and len(outside) == sum(g is not None for g in geometry):
        raise InputError(
            "the catchments layer's coordinates do not fit its coordinate reference system "
            f"({quoted(str(getattr(geometry.crs, 'name', geometry.crs)))}): is it the right one?"
        )
    if outside:
        geometry = geometry.copy()
        for row in outside:
            geometry.iloc[row] = None
            repairs[row] = "coordinates outside the earth's range in the layer's CRS: no area"
    for row, note in repairs.items():
        reporter.warning(f"catchment in row {row}: {note}")
    if method == "id":
        links = link_by_id(gauge_ids, catchments, settings.catchment_gauge_field)
    else:
        ids = list(gauge_id_text(gauges[settings.gauge_id_field].to_numpy()))
        links = link_spatially(
            ids,
            _gauge_points(gauges),
            geometry,
            settings.link_tolerance_m,
            settings.overlap_tolerance,
            reporter if report_progress else None,
        )
    if report_progress:  # linking is the whole job; otherwise each gauge's quality says it
        for gid in links.unlinked + list(links.several) + list(links.ambiguous):
            reporter.warning(f"gauge {gid}: {links.notes.get(gid, 'not linked to a catchment')}")
    linked = [
        gid
        for gid in gauge_ids
        if gid in links.catchment_of and geometry.iloc[links.catchment_of[gid]] is not None
    ]
    basins = gpd.GeoSeries(
        [geometry.iloc[links.catchment_of[g]] for g in linked], index=linked, crs=geometry.crs
    )
    return _Basins(
        geometry, repairs, areas, links, find_nesting(basins, settings.overlap_tolerance)
    )


def _linked_how(method, settings):
    """How gauges were linked to catchments, in words for the run's summary."""
    if method == "id":
        return f"by the id field {quoted(settings.catchment_gauge_field)}"
    return "by location (each gauge at its catchment's outlet), not by an id field"


def _kind_of(geometry):
    """A geometry's type in words, for messages ("empty" for none)."""
    if geometry is None or geometry.is_empty:
        return "empty"
    return geometry.geom_type
