"""The one pipeline behind the command line and every Processing algorithm.

``run_atlas`` takes the gauges, the catchments and the long discharge table as pandas/geopandas
objects, and returns an :class:`AtlasResult` with the catchments layer and the tables. The CLI
and the QGIS plugin are thin shells around it, so both give the same numbers. The work for one
gauge is :func:`gauge_hydrology`.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from .basins import repair_polygons
from .discharge import gauge_id_text, require_columns
from .groups import (
    SINK_TABLES,
    _compute_in_groups,
    compute_gauges,
)
from .hydrology import gauge_hydrology
from .inputs import (
    _gauge_ids,
    _gauge_points,
    _given_recession_index,
    _link_basins,
    _linked_how,
    _precipitation,
    _precipitation_share,
    _reported_area_notes,
)
from .nesting import incremental_recharge
from .progress import Reporter
from .quality import record_notes
from .results import (
    CATCHMENT_FIELDS,
    PRECIPITATION_FIELDS,
    AtlasResult,
    GaugeResult,
    _catchment_values,
    _stack,
)
from .settings import Settings, field_setting
from .summary import _records_problem, _summary, _summary_text, require_records

#: The public API. The command line, every Processing algorithm and scripts import these from
#: here; the work lives in the modules they come from (see docs/architecture.md).
__all__ = [
    "CATCHMENT_FIELDS",
    "PRECIPITATION_FIELDS",
    "AtlasResult",
    "GaugeResult",
    "Reporter",
    "Settings",
    "check_links",
    "compute_gauges",
    "field_setting",
    "gauge_hydrology",
    "record_notes",
    "require_records",
    "run_atlas",
    "run_atlas_subbasins",
    "run_gauges",
]


def run_atlas(
    gauges,
    catchments,
    discharge: pd.DataFrame,
    settings: Settings | None = None,
    reporter: Reporter | None = None,
    keep_series: bool = True,
    table_sink=None,
) -> AtlasResult:
    """Estimate recharge for every gauge and attach it to the catchments.

    Parameters
    ----------
    gauges : pandas.DataFrame or geopandas.GeoDataFrame
        One row per gauge with the gauge id field (points are needed for spatial linking).
    catchments : geopandas.GeoDataFrame
        Catchment polygons, the total drainage area of each gauge (nested ones overlap).
    discharge : pandas.DataFrame
        Long table of gauge id, date and value.
    settings : Settings, optional
    reporter : Reporter, optional
        Receives progress, cancel checks and per-gauge warnings.
    keep_series : bool
        Keep every gauge's daily flow and baseflow (for :meth:`AtlasResult.daily` and the
        report). A large run without them holds only its tables.
    table_sink : callable, optional
        ``table_sink(name, frame)`` receives the rows of :data:`SINK_TABLES` (events, periods,
        segments, master recession) of each gauge group as soon as it is done, so a large run
        read in gauge groups does not hold them all (the command line keeps them on disk).
        Those tables are then empty in the result (listed in ``sunk_tables``), and the gauges'
        results no longer hold them.

    Returns
    -------
    AtlasResult

    Notes
    -----
    One gauge that fails never stops the run: it is reported, flagged in ``quality`` and
    counted as failed. Invalid polygons are repaired (and said so in ``quality``); nested
    gauged basins give incremental areas and recharge.
    """
    settings = (settings or Settings()).resolved()
    reporter = reporter or Reporter()
    gauge_ids = _gauge_ids(gauges, settings, reporter)
    given_k = _given_recession_index(gauges, settings)
    _precipitation(catchments, settings)  # a wrong field stops the run before the work
    basins = _link_basins(gauges, gauge_ids, catchments, settings, reporter)
    links, nesting = basins.links, basins.nesting
    area_of = basins.area_of()

    def unlinked(gid):
        return f"no single catchment linked ({links.notes.get(gid, 'not linked')}): depths not computed"

    results, failed, tally = _compute_in_groups(
        discharge,
        gauge_ids,
        area_of,
        settings,
        reporter,
        given_k,
        unlinked,
        keep_series,
        table_sink,
    )
    for gid, row in links.catchment_of.items():
        if gid in results and not np.isfinite(area_of.get(gid, np.nan)):
            results[gid].quality.insert(
                0, f"its catchment (row {row}) has no area: depths not computed"
            )
    for gid, note in _reported_area_notes(gauges, settings, area_of).items():
        results[gid].quality.append(note)
    annual = _stack(results, "annual")
    by_year, incremental = incremental_recharge(nesting, annual)
    for gid, (m3, mm, _years) in incremental.items():
        if np.isfinite(m3) and m3 < 0 and nesting.upstream.get(gid):
            results[gid].quality.append(
                f"negative incremental recharge ({mm:,.0f} mm/yr): a losing reach or inconsistent data"
            )
    annual = annual.merge(
        by_year[["gauge_id", "water_year", "incremental_recharge_mm"]],
        on=["gauge_id", "water_year"],
        how="left",
    )
    out = _catchment_layer(catchments, basins, results, settings, incremental)
    summary = _summary(results, failed, tally)
    summary.update(
        {
            "catchments": len(catchments),
            "catchments_without_gauge": len(links.without_gauge),
            "link": links.method,
            "linked": len(links.catchment_of),
        }
    )
    if _records_problem(summary, results, settings) is None:  # else one error says it all
        for gid, result in results.items():
            if result.quality:
                reporter.warning(f"gauge {gid}: {result.quality_text}")
        reporter.info(
            f"{_summary_text(summary)}; "
            f"{len(links.catchment_of)} linked to catchments "
            f"{_linked_how(links.method, settings)}; "
            f"{len(links.without_gauge)} catchments without a gauge"
        )
    if summary["plausibility"]:
        reporter.warning(summary["plausibility"])
    names = catchments["name"].tolist() if "name" in catchments.columns else None
    return AtlasResult(
        catchments=out,
        annual=annual,
        events=_stack(results, "events"),
        gauges=results,
        summary=summary,
        periods=_stack(results, "periods"),
        segments=_stack(results, "segments"),
        master_recession=_stack(results, "master_recession"),
        links=links.table(gauge_ids, names),
        nesting=nesting,
        settings=settings,
        sunk_tables=SINK_TABLES if table_sink is not None else (),
    )


def run_gauges(
    gauges,
    discharge: pd.DataFrame,
    settings: Settings | None = None,
    reporter: Reporter | None = None,
    area_field=None,
    keep_series: bool = True,
    table_sink=None,
) -> AtlasResult:
    """The hydrology of every gauge without catchments: K, events, baseflow, annual terms.

    Volumes need no area. Depths (mm) and the runoff-end lag need one: give a field of the
    gauges layer with the drainage area in km² (``area_field``); without it depths stay empty
    and N is that of a 100 km² basin unless ``settings.runoff_end_lag_days`` is set.
    The result's ``catchments`` is None; :meth:`AtlasResult.gauge_table` gives one row per gauge.
    ``table_sink`` is as in :func:`run_atlas`.
    """
    settings = (settings or Settings()).resolved()
    reporter = reporter or Reporter()
    gauge_ids = _gauge_ids(gauges, settings, reporter)
    given_k = _given_recession_index(gauges, settings)
    area_of = {}
    if area_field:
        require_columns(gauges, [area_field], "gauges layer")
        ids = gauge_id_text(gauges[settings.gauge_id_field].to_numpy())
        values = pd.to_numeric(
            pd.Series(gauges[area_field].to_numpy(), dtype=object), errors="coerce"
        ).to_numpy(float)
        area_of = {
            g: float(v) for g, v in zip(ids, values) if g is not None and np.isfinite(v) and v > 0
        }
    results, failed, tally = _compute_in_groups(
        discharge, gauge_ids, area_of, settings, reporter, given_k, None, keep_series, table_sink
    )
    summary = _summary(results, failed, tally)
    if _records_problem(summary, results, settings) is None:  # else one error says it all
        for gid, result in results.items():
            if result.quality:
                reporter.warning(f"gauge {gid}: {result.quality_text}")
        reporter.info(_summary_text(summary))
    if summary["plausibility"]:
        reporter.warning(summary["plausibility"])
    return AtlasResult(
        catchments=None,
        annual=_stack(results, "annual"),
        events=_stack(results, "events"),
        gauges=results,
        summary=summary,
        periods=_stack(results, "periods"),
        segments=_stack(results, "segments"),
        master_recession=_stack(results, "master_recession"),
        settings=settings,
        sunk_tables=SINK_TABLES if table_sink is not None else (),
    )


def check_links(
    gauges, catchments, settings: Settings | None = None, reporter: Reporter | None = None
):
    """How gauges link to catchments and how the basins nest, before any hydrology.

    Returns
    -------
    catchments : geopandas.GeoDataFrame
        The input polygons (repaired where needed) with ``gauge_id, area_km2,
        incremental_area_km2, downstream_gauge, upstream_gauges, quality`` (linking and
        geometry notes only).
    links : pandas.DataFrame
        One row per gauge (see :meth:`basins.GaugeLinks.table`).
    """
    settings = (settings or Settings()).resolved()
    reporter = reporter or Reporter()
    gauge_ids = _gauge_ids(gauges, settings, reporter)
    basins = _link_basins(gauges, gauge_ids, catchments, settings, reporter, report_progress=True)
    area_of = basins.area_of()
    placeholders = {gid: GaugeResult(gid, area) for gid, area in area_of.items()}
    for gid, note in _reported_area_notes(gauges, settings, area_of).items():
        placeholders[gid].quality.append(note)
    reporter.progress(len(gauge_ids), len(gauge_ids), None)
    full = _catchment_layer(catchments, basins, placeholders, settings, {})
    keep = [
        "gauge_id",
        "area_km2",
        "incremental_area_km2",
        "downstream_gauge",
        "upstream_gauges",
        "quality",
    ]
    kept = [
        c for c in catchments.columns if c != catchments.geometry.name and c not in CATCHMENT_FIELDS
    ]
    layer = full[kept + keep + [full.geometry.name]]
    names = catchments["name"].tolist() if "name" in catchments.columns else None
    return layer, basins.links.table(gauge_ids, names)


def run_atlas_subbasins(
    gauges,
    subbasins,
    discharge: pd.DataFrame,
    settings: Settings | None = None,
    reporter: Reporter | None = None,
    keep_series: bool = True,
    table_sink=None,
) -> AtlasResult:
    """Estimate recharge with basins described as a subbasin map.

    Parameters
    ----------
    gauges : geopandas.GeoDataFrame
        Gauge points; each sits at the outlet of the subbasin it lies in.
    subbasins : geopandas.GeoDataFrame
        Non-overlapping subbasins with an id field and a downstream-id field
        (``settings.subbasin_id_field``, ``settings.downstream_field``).
    discharge : pandas.DataFrame
    settings, reporter, keep_series, table_sink : optional
        As in :func:`run_atlas`.

    Returns
    -------
    AtlasResult
        ``catchments`` holds each gauge's total drainage area built from the subbasins, and
        ``subbasins`` the input subbasins with the incremental recharge depth of the nearest
        gauge downstream (or a donor's, as ``estimate_source`` says).
    """
    from .subbasins import (
        SUBBASIN_FIELDS,
        gauge_basins,
        locate_gauges,
        read_network,
        subbasin_estimates,
    )

    settings = (settings or Settings()).resolved()
    reporter = reporter or Reporter()
    require_columns(gauges, [settings.gauge_id_field], "gauges layer")
    network = read_network(subbasins, settings.subbasin_id_field, settings.downstream_field)
    for note in network.notes:
        reporter.warning(note)
    geometry, repairs = repair_polygons(subbasins.geometry)
    for row, note in repairs.items():
        reporter.warning(f"subbasin {network.ids[row]}: {note}")
    clean = subbasins.set_geometry(geometry) if len(repairs) else subbasins
    ids = list(gauge_id_text(gauges[settings.gauge_id_field].to_numpy()))
    located, notes = locate_gauges(
        network, clean, ids, _gauge_points(gauges), settings.link_tolerance_m
    )
    located = {gid: located[gid] for gid in ids if gid in located}  # in the gauges' order
    for gid, note in notes.items():
        reporter.warning(f"gauge {gid}: {note}")
    basins = gauge_basins(network, clean, located, settings.subbasin_id_field)
    basin_settings = replace(
        settings, link="id", catchment_gauge_field="gauge_id", catchment_field_given=True
    )
    result = run_atlas(gauges, basins, discharge, basin_settings, reporter, keep_series, table_sink)
    # Say in the links table why a gauge found no subbasin.
    for gid, note in notes.items():
        result.links.loc[result.links["gauge_id"] == gid, "note"] = note
    depth = {
        gid: result.catchments.loc[
            result.catchments["gauge_id"] == gid, "incremental_recharge_mm_per_year"
        ].iloc[0]
        for gid in located
    }
    estimates = subbasin_estimates(network, clean, located, depth, settings.ungauged)
    # quality: the repair of the subbasin's own polygon, and any flag on the gauge it takes its
    # depth from (directly or as a donor).
    notes = []
    for row, gid in enumerate(estimates["downstream_gauge"]):
        source = estimates["estimate_source"].iloc[row]
        donor = (
            source.split("donor: gauge ", 1)[1].split(" ", 1)[0]
            if source.startswith("donor: gauge ")
            else None
        )
        lender = gid if isinstance(gid, str) else donor
        parts = [repairs[row]] if row in repairs else []
        if lender is not None and result.gauges[lender].quality:
            parts.append(f"gauge {lender}: {result.gauges[lender].quality_text}")
        notes.append("; ".join(parts) if parts else "ok")
    estimates["quality"] = notes
    layer = clean.copy()
    for name in SUBBASIN_FIELDS:
        layer[name] = estimates[name].to_numpy()
    geometry_name = layer.geometry.name
    layer = layer[[c for c in layer.columns if c != geometry_name] + [geometry_name]]
    result.subbasins = layer
    result.summary["subbasins"] = len(layer)
    result.summary["subbasins_without_estimate"] = int(layer["recharge_mm_per_year"].isna().sum())
    return result


def _catchment_layer(catchments, basins, results, settings, incremental):
    geometry, areas, links, repairs, nesting = (
        basins.geometry,
        basins.areas,
        basins.links,
        basins.repairs,
        basins.nesting,
    )
    out = catchments.copy()
    if repairs:
        out = (
            out.set_geometry(geometry.to_numpy(), crs=catchments.crs)
            if out.geometry.name == "geometry"
            else out.set_geometry(geometry)
        )
    if links.method == "id":
        ids = list(gauge_id_text(catchments[settings.catchment_gauge_field].to_numpy()))
    else:
        ids = [None] * len(catchments)
    gauge_of_row = {row: gid for gid, row in links.catchment_of.items()}
    for gid, rows in links.several.items():
        for row in rows:
            gauge_of_row[row] = gid
    rows = []
    for row in range(len(out)):
        gid = gauge_of_row.get(row)
        result = results.get(gid) if gid is not None else None
        values = {"gauge_id": gid if gid is not None else ids[row]}
        values.update(_catchment_values(result, areas[row]))
        linked = gid is not None and links.catchment_of.get(gid) == row
        m3, mm, years = incremental.get(gid, (np.nan, np.nan, 0)) if linked else (np.nan, np.nan, 0)
        values["incremental_area_km2"] = (
            nesting.incremental_area_km2.get(gid, np.nan) if linked else np.nan
        )
        values["incremental_recharge_mm_per_year"] = mm
        values["incremental_recharge_m3_per_year"] = m3
        values["incremental_years"] = years
        values["downstream_gauge"] = nesting.downstream.get(gid) if linked else None
        values["upstream_gauges"] = ", ".join(nesting.upstream.get(gid, [])) if linked else ""
        notes = []
        if row in repairs:
            notes.append(repairs[row])
        if result is not None:
            if gid in links.several:
                notes.append(f"{len(links.several[gid])} catchments carry gauge {gid}")
            if result.quality:
                notes.append(result.quality_text)
        elif gid is None and ids[row] is not None:
            notes.append(f"gauge {ids[row]} is not in the gauges layer")
        else:
            notes.append("no gauge linked to this catchment")
        values["quality"] = "; ".join(notes) if notes else "ok"
        rows.append(values)
    fields = list(CATCHMENT_FIELDS)
    precipitation = _precipitation(catchments, settings)
    if precipitation is not None:
        fields += PRECIPITATION_FIELDS
        for values, p in zip(rows, precipitation):
            share, note = _precipitation_share(values["recharge_mm_per_year"], p)
            values["precipitation_mm_per_year"] = p
            values["recharge_share_of_precipitation"] = share
            if note:
                quality = values["quality"]
                values["quality"] = note if quality == "ok" else f"{quality}; {note}"
    added = pd.DataFrame(rows, columns=fields, index=out.index)
    for name in ("recession_segments", "complete_years", "events", "incremental_years"):
        added[name] = added[name].astype("int64")
    geometry_name = out.geometry.name
    kept = [c for c in out.columns if c != geometry_name and c not in fields]
    for name in fields:
        out[name] = added[name]
    return out[kept + fields + [geometry_name]]
