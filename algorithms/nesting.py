"""Nested gauged basins and the incremental (intervening) area between them.

Catchments are the total drainage areas of their gauges, so a gauge upstream of another has its
basin inside the other's. For each gauged basin, the gauged basins directly upstream are those
inside it with no other gauged basin in between. The incremental area is the basin minus them;
its recharge is the basin's volume minus theirs, and its depth that volume over the
incremental area. A negative incremental volume means a losing reach or inconsistent data: it is
flagged, never hidden.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .tables import empty_table

#: Share of a smaller basin that may lie outside a larger one that still contains it.
OVERLAP_TOLERANCE = 0.05


@dataclass
class Nesting:
    """How gauged basins nest.

    Attributes
    ----------
    downstream : dict
        Gauge id to the gauge directly downstream (whose basin most closely contains it), or None.
    upstream : dict
        Gauge id to the list of gauges directly upstream.
    incremental_geometry : dict
        Gauge id to the polygon of its incremental area (the basin minus the basins directly
        upstream).
    incremental_area_km2 : dict
        Gauge id to the geodesic area of its incremental area.
    """

    downstream: dict = field(default_factory=dict)
    upstream: dict = field(default_factory=dict)
    incremental_geometry: dict = field(default_factory=dict)
    incremental_area_km2: dict = field(default_factory=dict)


def find_nesting(basins, overlap_tolerance=OVERLAP_TOLERANCE) -> Nesting:
    """Find which gauged basins lie inside which.

    Parameters
    ----------
    basins : geopandas.GeoSeries
        One total-drainage polygon per gauge, indexed by gauge id.
    overlap_tolerance : float
        A basin counts as inside a larger one when at most this share of its area lies outside
        (digitising never matches exactly).
    """
    from shapely.ops import unary_union

    from .basins import geodesic_area_km2

    if not 0.0 <= overlap_tolerance < 0.5:
        raise ValueError(
            f"overlap tolerance was {overlap_tolerance!r}; expected a share from 0 to 0.5"
        )
    ids = list(basins.index)
    geoms = list(basins)
    planar = np.array([g.area if g is not None and not g.is_empty else 0.0 for g in geoms])
    bounds = np.array(
        [g.bounds if g is not None and not g.is_empty else (np.nan,) * 4 for g in geoms]
    )
    order = np.argsort(planar, kind="stable")
    rank = np.empty(len(ids), dtype=np.int64)
    rank[order] = np.arange(len(ids))  # candidates are tried from the smallest basin up
    nesting = Nesting()
    for i in range(len(ids)):
        nesting.upstream[ids[i]] = []
    for i in range(len(ids)):
        if planar[i] <= 0:
            nesting.downstream[ids[i]] = None
            continue
        # Candidates: larger basins whose box holds this one's (all found at once); the smallest
        # that contains it wins.
        b = bounds[i]
        width = max(b[2] - b[0], b[3] - b[1])
        slack = overlap_tolerance * width
        parent = None
        with np.errstate(invalid="ignore"):  # empty basins have NaN boxes: never candidates
            holds = (
                (bounds[:, 0] - slack <= b[0])
                & (bounds[:, 1] - slack <= b[1])
                & (b[2] <= bounds[:, 2] + slack)
                & (b[3] <= bounds[:, 3] + slack)
                & (planar > planar[i])
            )
        candidates = np.flatnonzero(holds)
        for j in candidates[np.argsort(rank[candidates], kind="stable")]:
            if geoms[j].intersection(geoms[i]).area >= (1.0 - overlap_tolerance) * planar[i]:
                parent = ids[j]
                break
        nesting.downstream[ids[i]] = parent
        if parent is not None:
            nesting.upstream[parent].append(ids[i])
    pieces = {}
    row_of = {}
    for i, gid in enumerate(ids):
        row_of.setdefault(gid, i)
    for i, gid in enumerate(ids):
        geom = geoms[i]
        inner = [geoms[row_of[u]] for u in nesting.upstream[gid]]
        if geom is not None and inner:
            geom = geom.difference(unary_union(inner))
        pieces[gid] = geom
    import geopandas as gpd

    series = gpd.GeoSeries([pieces[g] for g in ids], index=ids, crs=basins.crs)
    areas = geodesic_area_km2(series)
    nesting.incremental_geometry = pieces
    nesting.incremental_area_km2 = dict(zip(ids, areas))
    return nesting


def incremental_recharge(nesting: Nesting, annual: pd.DataFrame):
    """Incremental recharge of each gauged basin, by water year and on average.

    Parameters
    ----------
    nesting : Nesting
    annual : pandas.DataFrame
        The run's annual table (``gauge_id, water_year, recharge_m3, complete``).

    Returns
    -------
    by_year : pandas.DataFrame
        ``gauge_id, water_year, incremental_recharge_m3, incremental_recharge_mm`` for the
        years complete at the gauge and at every gauge directly upstream.
    summary : dict
        Gauge id to ``(mean m³/yr, mean mm/yr, years)`` over those years.
    """
    complete = annual[annual["complete"].astype(bool)] if len(annual) else annual
    # The complete years' volumes as a table of gauges by water years, and which are there.
    gauges = np.asarray(complete.get("gauge_id", []), dtype=object)
    years = np.asarray(complete.get("water_year", []), dtype=np.int64)
    row_of = {g: i for i, g in enumerate(dict.fromkeys(gauges.tolist()))}
    first = int(years.min()) if years.size else 0
    shape = (len(row_of), int(years.max()) - first + 1 if years.size else 0)
    volume, present = np.full(shape, np.nan), np.zeros(shape, bool)
    cells = ([row_of[g] for g in gauges.tolist()], years - first)
    volume[cells] = np.asarray(complete.get("recharge_m3", []), dtype=float)
    present[cells] = True
    nowhere = np.zeros(shape[1], bool)
    parts = []
    summary = {}
    for gid, ups in nesting.upstream.items():
        # The gauge's complete years that are complete at every gauge directly upstream; the
        # volumes upstream taken off in order, as a sum from zero would take them.
        kept = present[row_of[gid]] if gid in row_of else nowhere
        taken = 0.0
        for u in ups:
            kept = kept & (present[row_of[u]] if u in row_of else nowhere)
        kept = np.flatnonzero(kept)
        m3 = np.empty(0)
        if kept.size:  # then the gauge and every gauge upstream have rows
            for u in ups:
                taken = taken + volume[row_of[u], kept]
            m3 = volume[row_of[gid], kept] - taken
        area = nesting.incremental_area_km2.get(gid, np.nan)
        has_area = bool(np.isfinite(area) and area > 0)
        mm = m3 / (area * 1e3) if has_area else np.full(kept.size, np.nan)
        if kept.size:
            parts.append((gid, kept + first, m3, mm))
            mean = float(np.mean(m3))
            summary[gid] = (mean, mean / (area * 1e3) if has_area else np.nan, int(kept.size))
        else:
            summary[gid] = (np.nan, np.nan, 0)
    columns = ["gauge_id", "water_year", "incremental_recharge_m3", "incremental_recharge_mm"]
    if not parts:
        return empty_table(columns), summary
    ids = np.empty(len(parts), dtype=object)
    ids[:] = [gid for gid, *_ in parts]
    by_year = pd.DataFrame(
        {
            "gauge_id": ids.repeat([p[1].size for p in parts]),
            "water_year": np.concatenate([p[1] for p in parts]).astype(np.int64),
            "incremental_recharge_m3": np.concatenate([p[2] for p in parts]),
            "incremental_recharge_mm": np.concatenate([p[3] for p in parts]),
        },
        columns=columns,
    )
    return by_year, summary
