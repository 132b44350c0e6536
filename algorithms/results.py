"""What a run returns: one gauge's :class:`GaugeResult`, the whole run's :class:`AtlasResult`,
and the fields and tables they hold (:data:`CATCHMENT_FIELDS`, :data:`GAUGE_TABLES`, ...).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from . import annual as annual_mod
from .discharge import gauge_id_text
from .displacement import EVENT_COLUMNS
from .recession import (
    MASTER_RECESSION_COLUMNS,
    SEGMENT_COLUMNS,
    RecessionIndex,
    critical_time_days,
    runoff_end_lag_days,
)
from .tables import ColumnTable, empty_table, stack

#: Fields added to the catchments layer, in order. Later versions add; they never rename.
CATCHMENT_FIELDS = [
    "gauge_id",
    "area_km2",
    "recession_index_days",
    "recession_index_low",
    "recession_index_high",
    "recession_segments",
    "critical_time_days",
    "runoff_end_lag_days",
    "recharge_mm_per_year",
    "recharge_mm_per_year_low",
    "recharge_mm_per_year_high",
    "recharge_m3_per_year",
    "baseflow_index",
    "baseflow_mm_per_year",
    "seasonal_recharge_mm_per_year",
    "incremental_area_km2",
    "incremental_recharge_mm_per_year",
    "incremental_recharge_m3_per_year",
    "incremental_years",
    "downstream_gauge",
    "upstream_gauges",
    "complete_years",
    "events",
    "quality",
    "recharge_mm_per_year_fully_measured",
    "fully_measured_years",
    "recharge_between_events_mm_per_year",
    "recharge_trend_mm_per_decade",
    "recharge_trend_p_value",
    "recharge_trend",
]


#: Fields added after :data:`CATCHMENT_FIELDS` when a run is given precipitation.
PRECIPITATION_FIELDS = ["precipitation_mm_per_year", "recharge_share_of_precipitation"]


#: Fields the gauge table has besides the catchment ones.
GAUGE_EXTRA_FIELDS = ["events_skipped", "mean_event_recharge_m3", "mean_event_recharge_mm"]


#: Columns of the daily table.
DAILY_COLUMNS = ["gauge_id", "date", "discharge_m3s", "baseflow_m3s"]


#: Columns of the event table as the run reports it (the event number first, the depth last).
EVENT_COLUMNS_WITH_DEPTH = ["event", *EVENT_COLUMNS, "recharge_mm"]


#: The tables of one gauge, with their columns.
GAUGE_TABLES = {
    "events": EVENT_COLUMNS_WITH_DEPTH,
    "annual": annual_mod.ANNUAL_COLUMNS,
    "periods": annual_mod.PERIOD_COLUMNS,
    "segments": SEGMENT_COLUMNS,
    "master_recession": MASTER_RECESSION_COLUMNS,
}


@dataclass
class GaugeResult:
    """The hydrology of one gauge.

    Attributes
    ----------
    gauge_id : str
    area_km2 : float
        Drainage area (NaN when no single catchment is linked).
    lag_days : float
        Runoff-end lag N.
    rise_threshold : float
        Smallest rise treated as an event, log10 units.
    recession : RecessionIndex
        K with its interval, segments and warnings.
    tables : dict of str to tables.ColumnTable
        ``events``, ``annual``, ``periods``, ``segments`` and ``master_recession`` as columns;
        the properties of the same names give them as DataFrames.
    baseflow : pandas.Series
        Daily baseflow (m³/s) by the chosen method.
    baseflow_index : float
    recharge_mm_per_year, recharge_m3_per_year : float
        Means over the water years whose discharge record is complete (storm runs measured
        as composite events); ``recharge_mm_per_year_low``/``_high`` from the K interval.
    complete_years : int
    recharge_mm_per_year_fully_measured : float
        Mean over the complete years whose events were all measured (``fully_measured_years``
        of them).
    fully_measured_years : int
    recharge_between_events_mm_per_year : float
        Mean over the complete years of the rises of the recession between measured events
        (:func:`displacement.recession_rises`): a lower-bound term beside the recharge.
    recharge_trend_mm_per_decade, recharge_trend_p_value : float
    recharge_trend : str
        The trend of annual recharge over the complete water years (:func:`trends.recharge_trend`:
        Sen's slope, the Mann–Kendall p-value, rising / falling / no clear trend); NaN and ""
        with fewer than :data:`trends.MIN_YEARS` complete years.
    quality : list of str
        Problems in words; empty when all is well.
    implausible : list of str
        Keys of the plausibility checks the gauge fails (see :data:`PLAUSIBILITY_CHECKS`);
        each has its note in ``quality`` too.
    """

    gauge_id: str
    area_km2: float
    lag_days: float = np.nan
    rise_threshold: float = np.nan
    recession: RecessionIndex | None = None
    tables: dict = field(default_factory=dict, repr=False)
    baseflow: pd.Series | None = field(default=None, repr=False)
    flow: pd.Series | None = field(default=None, repr=False)
    baseflow_index: float = np.nan
    recharge_mm_per_year: float = np.nan
    recharge_mm_per_year_low: float = np.nan
    recharge_mm_per_year_high: float = np.nan
    recharge_m3_per_year: float = np.nan
    baseflow_mm_per_year: float = np.nan
    seasonal_recharge_mm_per_year: float = np.nan
    complete_years: int = 0
    quality: list = field(default_factory=list)
    recharge_mm_per_year_fully_measured: float = np.nan
    fully_measured_years: int = 0
    recharge_between_events_mm_per_year: float = np.nan
    recharge_trend_mm_per_decade: float = np.nan
    recharge_trend_p_value: float = np.nan
    recharge_trend: str = ""
    #: :meth:`event_figures`, kept when the events table itself went to a table sink.
    kept_event_figures: dict | None = field(default=None, repr=False)
    implausible: list = field(default_factory=list)

    @property
    def quality_text(self) -> str:
        return "; ".join(self.quality) if self.quality else "ok"

    def event_figures(self) -> dict:
        """Events measured and skipped, and the mean measured event in m³ and mm."""
        if self.kept_event_figures is not None and "events" not in self.tables:
            return self.kept_event_figures
        events = self.table("events")
        used = np.asarray(events["used"], dtype=bool)
        return {
            "measured": int(used.sum()),
            "skipped": int(used.size - used.sum()),
            "mean_m3": float(np.mean(events["recharge_m3"][used])) if used.any() else np.nan,
            "mean_mm": float(np.mean(events["recharge_mm"][used])) if used.any() else np.nan,
        }

    def table(self, name) -> ColumnTable:
        """One of the gauge's tables as columns (empty, with its columns, when not computed)."""
        found = self.tables.get(name)
        return found if found is not None else ColumnTable.empty(GAUGE_TABLES[name])

    @property
    def events(self) -> pd.DataFrame:
        """One row per event (see :mod:`displacement`), with ``event`` and ``recharge_mm``."""
        return self.table("events").frame()

    @property
    def annual(self) -> pd.DataFrame:
        """One row per water year (see :data:`annual.ANNUAL_COLUMNS`)."""
        return self.table("annual").frame()

    @property
    def periods(self) -> pd.DataFrame:
        """Recharge by month or season."""
        return self.table("periods").frame()

    @property
    def master_recession(self) -> pd.DataFrame:
        """K by flow level."""
        return self.table("master_recession").frame()

    @property
    def segments(self) -> pd.DataFrame:
        """Recession segments with dates, for diagnostics."""
        return self.table("segments").frame()


@dataclass
class AtlasResult:
    """Everything a run produces.

    Attributes
    ----------
    catchments : geopandas.GeoDataFrame
        The input polygons, in input order, with :data:`CATCHMENT_FIELDS` added.
    annual : pandas.DataFrame
        One row per gauge and water year.
    events : pandas.DataFrame
        One row per gauge and event.
    periods : pandas.DataFrame
        One row per gauge and month (or season).
    segments : pandas.DataFrame
        One row per gauge and recession segment.
    master_recession : pandas.DataFrame
        One row per gauge and flow class.
    links : pandas.DataFrame
        One row per gauge: how it linked to a catchment, or why it did not.
    nesting : nesting.Nesting
        Which gauged basins lie inside which, and their incremental areas.
    subbasins : geopandas.GeoDataFrame or None
        With a subbasin map: the subbasins with the recharge depth of the gauge downstream.
    settings : Settings
        The settings the run used (resolved).
    gauges : dict of str to GaugeResult
    summary : dict
        Counts of gauges computed, flagged and failed.
    """

    catchments: object
    annual: pd.DataFrame
    events: pd.DataFrame
    gauges: dict
    summary: dict
    periods: pd.DataFrame = field(default_factory=pd.DataFrame)
    segments: pd.DataFrame = field(default_factory=pd.DataFrame)
    master_recession: pd.DataFrame = field(default_factory=pd.DataFrame)
    links: pd.DataFrame = field(default_factory=pd.DataFrame)
    nesting: object = None
    settings: object = None
    #: Tables whose rows went to the run's table sink as it went (they are empty here).
    sunk_tables: tuple = ()

    def gauge_table(self) -> pd.DataFrame:
        """One row per gauge with its results: the catchment fields, without the geometry.

        Works for every kind of run, catchments or not (see :func:`run_gauges`).
        """
        rows = []
        for gid, result in self.gauges.items():
            row = {"gauge_id": gid}
            row.update(_catchment_values(result, result.area_km2))
            figures = result.event_figures()
            row["events_skipped"] = figures["skipped"]
            row["mean_event_recharge_m3"] = figures["mean_m3"]
            row["mean_event_recharge_mm"] = figures["mean_mm"]
            row["quality"] = result.quality_text
            rows.append(row)
        fields = [
            c
            for c in CATCHMENT_FIELDS
            if c != "quality" and c in _catchment_values(None, np.nan) or c == "gauge_id"
        ]
        fields += GAUGE_EXTRA_FIELDS + ["quality"]
        return pd.DataFrame(rows, columns=fields) if rows else empty_table(fields)

    def gauge_layer(self, gauges, id_field="gauge_id"):
        """The gauges layer (points or a plain table) with :meth:`gauge_table` joined on.

        Rows keep their order and own fields; a row without a gauge id, or whose gauge was not
        run, gets empty values and a quality saying so.
        """
        table = self.gauge_table().set_index("gauge_id")
        ids = gauge_id_text(gauges[id_field].to_numpy())
        out = gauges.copy()
        known = [g is not None and g in table.index for g in ids]
        for name in table.columns:
            column = table[name]
            if name == "quality":
                values = [
                    column.at[g] if ok else ("no gauge id" if g is None else "gauge not run")
                    for g, ok in zip(ids, known)
                ]
                out[name] = pd.Series(values, index=out.index, dtype=object)
                continue
            # An integer field reads 0 where there is no gauge, as on the catchments layer.
            empty = 0 if pd.api.types.is_integer_dtype(column) else np.nan
            values = [column.at[g] if ok else empty for g, ok in zip(ids, known)]
            out[name] = pd.Series(values, index=out.index, dtype=column.dtype)
        if hasattr(out, "geometry"):
            geometry_name = out.geometry.name
            out = out[[c for c in out.columns if c != geometry_name] + [geometry_name]]
        return out

    def incremental_areas(self):
        """The incremental area of each linked gauge as a polygon layer (no overlaps).

        Columns ``gauge_id, incremental_area_km2, incremental_recharge_mm_per_year,
        incremental_recharge_m3_per_year, incremental_years, downstream_gauge, quality``: a
        map of recharge across the intervening areas between gauges.
        """
        import geopandas as gpd

        columns = [
            "gauge_id",
            "incremental_area_km2",
            "incremental_recharge_mm_per_year",
            "incremental_recharge_m3_per_year",
            "incremental_years",
            "downstream_gauge",
            "quality",
        ]
        crs = self.catchments.crs
        if self.nesting is None or not self.nesting.incremental_geometry:
            return gpd.GeoDataFrame(
                empty_table(columns), geometry=gpd.GeoSeries([], crs=crs), crs=crs
            )
        linked = (
            self.catchments.dropna(subset=["gauge_id"])
            .drop_duplicates("gauge_id")
            .set_index("gauge_id")
        )
        ids = [g for g in self.nesting.incremental_geometry if g in linked.index]
        table = linked.loc[ids, columns[1:]].reset_index()
        shapes = [self.nesting.incremental_geometry[g] for g in ids]
        return gpd.GeoDataFrame(table, geometry=gpd.GeoSeries(shapes, crs=crs), crs=crs)

    subbasins: object = None

    def daily(self) -> pd.DataFrame:
        """Daily flow and baseflow of every gauge: ``gauge_id, date, discharge_m3s, baseflow_m3s``."""
        frames = []
        for gid, result in self.gauges.items():
            if result.flow is None or result.baseflow is None:
                continue
            frames.append(
                pd.DataFrame(
                    {
                        "gauge_id": gid,
                        "date": result.flow.index,
                        "discharge_m3s": result.flow.to_numpy(),
                        "baseflow_m3s": result.baseflow.to_numpy(),
                    }
                )
            )
        if not frames:
            return empty_table(DAILY_COLUMNS)
        return pd.concat(frames, ignore_index=True)

    def __repr__(self):
        s = self.summary
        return (
            f"AtlasResult({s.get('gauges', 0)} gauges: {s.get('computed', 0)} computed, "
            f"{s.get('flagged', 0)} flagged, {s.get('failed', 0)} failed; "
            f"{len(self.annual)} annual rows, "
            + (
                "events written as the run went)"
                if "events" in self.sunk_tables
                else f"{len(self.events)} events)"
            )
        )


def _catchment_values(result: GaugeResult | None, area):
    """The recharge fields of one catchment row (without gauge id and quality)."""
    k = result.recession if result is not None else None
    has_k = k is not None
    return {
        "area_km2": float(area),
        "recession_index_days": k.days if has_k else np.nan,
        "recession_index_low": k.low if has_k else np.nan,
        "recession_index_high": k.high if has_k else np.nan,
        "recession_segments": k.segments_used if has_k else 0,
        "critical_time_days": float(critical_time_days(k.days)) if has_k else np.nan,
        "runoff_end_lag_days": result.lag_days
        if result is not None and np.isfinite(result.lag_days)
        else (float(runoff_end_lag_days(area)) if np.isfinite(area) else np.nan),
        "recharge_mm_per_year": result.recharge_mm_per_year if result else np.nan,
        "recharge_mm_per_year_low": result.recharge_mm_per_year_low if result else np.nan,
        "recharge_mm_per_year_high": result.recharge_mm_per_year_high if result else np.nan,
        "recharge_m3_per_year": result.recharge_m3_per_year if result else np.nan,
        "baseflow_index": result.baseflow_index if result else np.nan,
        "baseflow_mm_per_year": result.baseflow_mm_per_year if result else np.nan,
        "seasonal_recharge_mm_per_year": result.seasonal_recharge_mm_per_year if result else np.nan,
        "complete_years": result.complete_years if result else 0,
        "events": result.event_figures()["measured"] if result is not None else 0,
        "recharge_mm_per_year_fully_measured": result.recharge_mm_per_year_fully_measured
        if result
        else np.nan,
        "fully_measured_years": result.fully_measured_years if result else 0,
        "recharge_between_events_mm_per_year": result.recharge_between_events_mm_per_year
        if result
        else np.nan,
        "recharge_trend_mm_per_decade": result.recharge_trend_mm_per_decade if result else np.nan,
        "recharge_trend_p_value": result.recharge_trend_p_value if result else np.nan,
        "recharge_trend": result.recharge_trend if result else "",
    }


def _stack(results, name, share=True):
    """One table of every gauge's rows of table ``name``, led by ``gauge_id`` (with ``share``
    the gauges' tables become views of it, see :func:`tables.stack`)."""
    order = GAUGE_TABLES[name]
    return stack(
        [r.table(name) for r in results.values()], list(results), "gauge_id", order, share=share
    )
