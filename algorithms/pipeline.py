"""The one pipeline behind the command line and every Processing algorithm.

``run_atlas`` takes the gauges, the catchments and the long discharge table as pandas/geopandas
objects, and returns an :class:`AtlasResult` with the catchments layer and the tables. The CLI
and the QGIS plugin are thin shells around it, so both give the same numbers. The work for one
gauge is :func:`gauge_hydrology`.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from . import annual as annual_mod
from .baseflow import BFIMAX_TYPICAL, METHODS, baseflow_index, separate_baseflow
from .basins import LINK_TOLERANCE_M, geodesic_area_km2, link_by_id, link_spatially, repair_polygons
from .discharge import (
    MIN_DAY_COVERAGE,
    MISSING_MARKERS,
    NO_FIELDS_REASON,
    GaugeRecord,
    gauge_id_codes,
    gauge_id_text,
    require_columns,
    tidy_discharge,
)
from .displacement import (
    EVENT_COLUMNS,
    CleanDays,
    _displacements,
    compose_events,
    event_columns,
    event_columns_at,
    recession_rises,
)
from .errors import InputError, counted, describe, listed, quoted
from .nesting import OVERLAP_TOLERANCE, find_nesting, incremental_recharge
from .recession import (
    MASTER_RECESSION_COLUMNS,
    SEGMENT_COLUMNS,
    RecessionIndex,
    critical_time_days,
    estimate_recession_index,
    master_columns,
    master_recession_warnings,
    reading_error,
    recession_warnings,
    rising_share,
    rising_share_warnings,
    runoff_end_lag_days,
    settling_days,
)
from .rises import find_rises, log_flow, noise_level, rise_threshold
from .subbasins import UNGAUGED_CHOICES
from .tables import ColumnTable, empty_table, pack_tables, stack, unpack_tables
from .trends import recharge_trend
from .units import DISCHARGE_UNITS, canonical_units

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

#: How gauges link to catchments.
LINK_METHODS = ("auto", "id", "spatial")
#: A reported drainage area differing from the computed one by more than this share is flagged.
AREA_MISMATCH = 0.10

#: Drainage areas the method is commonly applied to, km² (common practice, not a published limit).
USUAL_AREA_KM2 = (3.0, 1300.0)
#: Below this baseflow index a stream is too flashy for the method (our own rule). The index is
#: the Institute of Hydrology (1980) one, by smoothed minima, whatever the chosen method: it has
#: no parameter, so the check does not move with BFImax.
FLASHY_BASEFLOW_INDEX = 0.2
#: Fewer measured events than this in the whole record is flagged (our own rule).
FEW_EVENTS = 10


@dataclass
class Settings:
    """Everything a run can be told. Defaults suit a daily record in m³/s.

    Attributes
    ----------
    units : str
        Discharge units: ``m3/s``, ``L/s``, ``ft3/s`` (alias ``cfs``) or ``ML/d``.
    water_year_start : int
        First month of the water year (10 = October).
    gauge_id_field : str
        Gauge id field of the gauges layer.
    discharge_gauge_field, date_field, value_field : str
        Fields of the discharge table (the gauge field defaults to ``gauge_id_field``).
    catchment_gauge_field : str
        Field of the catchments layer holding the gauge id (defaults to ``gauge_id_field``).
    flag_field : str or None
        Quality-code field of the discharge table; flagged days are not used by the method.
    flag_values : list of str or None
        Codes that flag a day (None: any non-empty code).
    min_day_coverage : float
        Share of a day's sub-daily values needed for its daily mean.
    runoff_end_lag_days : float or None
        Days after a peak when surface runoff has ended; None derives it from the area.
    min_segment_days : int
        Shortest recession segment used for the recession index.
    recession_index_days : float or None
        Use this K for every gauge instead of estimating it.
    recession_index_field : str or None
        Field of the gauges layer giving K per gauge (empty values: estimate).
    baseflow_method : str
        ``eckhardt`` (default), ``lyne_hollick`` or ``smoothed_minima``.
    bfi_max : float
        BFImax of the Eckhardt filter (0.80 perennial/porous, 0.50 ephemeral/porous,
        0.25 perennial/hard rock; Eckhardt 2005).
    period : str
        Sub-annual sums: ``month`` or ``season``.
    min_complete_years : int
        Fewer complete water years than this is flagged in ``quality``.
    link : str
        ``auto`` (by the id field when the catchments have it, else spatially), ``id`` or
        ``spatial``.
    link_tolerance_m : float
        Spatial linking: how far (m) a gauge may lie from its catchment's boundary.
    overlap_tolerance : float
        Nesting: share of a basin that may lie outside a larger basin that contains it.
    reported_area_field : str or None
        Field of the gauges layer with a reported drainage area (km²); a mismatch of more than
        10 % with the computed area is flagged.
    precipitation_field : str or None
        Field of the catchments layer with mean annual precipitation (mm/yr). The catchments
        then get ``precipitation_mm_per_year`` and ``recharge_share_of_precipitation``; a share
        above 1 is flagged. (A precipitation raster is read into such a field first, by QGIS's
        zonal statistics or :mod:`precipitation`.)
    ungauged : str
        Subbasin maps: ``donor`` (borrow the nearest gauged depth, said in ``estimate_source``)
        or ``empty``.
    subbasin_id_field, downstream_field : str
        Subbasin maps: the subbasins' id field and the field naming the subbasin each drains into.
    workers : int
        Processes that share the gauges (1: this process only). Results are identical.
    dask_scheduler : str or None
        Address of a Dask distributed scheduler to send the gauges to instead.
    """

    units: str = "m3/s"
    water_year_start: int = 10
    gauge_id_field: str = "gauge_id"
    discharge_gauge_field: str | None = None
    date_field: str = "date"
    value_field: str = "discharge"
    catchment_gauge_field: str | None = None
    flag_field: str | None = None
    flag_values: list | None = None
    min_day_coverage: float = MIN_DAY_COVERAGE
    runoff_end_lag_days: float | None = None
    min_segment_days: int = 7
    recession_index_days: float | None = None
    recession_index_field: str | None = None
    baseflow_method: str = "eckhardt"
    bfi_max: float = BFIMAX_TYPICAL["perennial stream, porous aquifer"]
    period: str = "month"
    min_complete_years: int = 5
    link: str = "auto"
    link_tolerance_m: float = LINK_TOLERANCE_M
    overlap_tolerance: float = OVERLAP_TOLERANCE
    reported_area_field: str | None = None
    precipitation_field: str | None = None
    ungauged: str = "donor"
    subbasin_id_field: str = "subbasin_id"
    downstream_field: str = "downstream_id"
    workers: int = 1
    dask_scheduler: str | None = None
    catchment_field_given: bool | None = None

    def resolved(self) -> Settings:
        """A copy with defaults filled in and values checked (raises :class:`InputError`)."""
        units = canonical_units(self.units)
        month = _whole_number(self.water_year_start)
        if month is None or not 1 <= month <= 12:
            raise InputError(
                f"water year start was {self.water_year_start!r}; expected a month number 1 to 12"
            )
        if self.recession_index_days is not None:
            check_recession_index(self.recession_index_days)
        lag = self.runoff_end_lag_days
        if lag is not None and not (_positive(lag) and float(lag) <= MAX_RUNOFF_END_LAG_DAYS):
            raise InputError(
                f"runoff end lag was {lag!r}; expected a number of days above 0 and at most "
                f"{MAX_RUNOFF_END_LAG_DAYS:g} (runoff that lasts longer leaves no recession)"
            )
        min_days = _whole_number(self.min_segment_days)
        if min_days is None or not 2 <= min_days <= MAX_SEGMENT_DAYS:
            raise InputError(
                f"minimum segment length was {self.min_segment_days!r}; expected a whole "
                f"number of days from 2 to {MAX_SEGMENT_DAYS} (a fit needs two days; no "
                "recession lasts a year without a rise)"
            )
        if self.baseflow_method not in METHODS:
            raise InputError(
                f"baseflow method was {self.baseflow_method!r}; expected one of {list(METHODS)}"
            )
        if not (_positive(self.bfi_max) and float(self.bfi_max) < 1.0):
            raise InputError(f"BFImax was {self.bfi_max!r}; expected a number between 0 and 1")
        try:
            coverage = float(self.min_day_coverage)
        except (TypeError, ValueError):
            coverage = math.nan
        if not 0.0 <= coverage <= 1.0:
            raise InputError(
                f"minimum day coverage was {self.min_day_coverage!r}; expected a share between 0 and 1"
            )
        if self.period not in ("month", "season"):
            raise InputError(f"period was {self.period!r}; expected 'month' or 'season'")
        if self.link not in LINK_METHODS:
            raise InputError(f"link was {self.link!r}; expected one of {list(LINK_METHODS)}")
        try:
            tolerance = float(self.link_tolerance_m)
        except (TypeError, ValueError):
            tolerance = math.nan
        if not (math.isfinite(tolerance) and tolerance >= 0):
            raise InputError(
                f"link tolerance was {self.link_tolerance_m!r}; expected a distance in metres, 0 or more"
            )
        try:
            overlap = float(self.overlap_tolerance)
        except (TypeError, ValueError):
            overlap = math.nan
        if not 0.0 <= overlap < 0.5:
            raise InputError(
                f"overlap tolerance was {self.overlap_tolerance!r}; expected a share from 0 to 0.5"
            )
        workers = _whole_number(self.workers)
        if workers is None or workers < 1:
            raise InputError(f"workers was {self.workers!r}; expected a whole number, 1 or more")
        if self.ungauged not in UNGAUGED_CHOICES:
            raise InputError(
                f"ungauged was {self.ungauged!r}; expected one of {list(UNGAUGED_CHOICES)}"
            )
        flags = self.flag_values
        if isinstance(flags, str):
            flags = [v.strip() for v in flags.split(",") if v.strip()] or None
        return replace(
            self,
            units=units,
            water_year_start=month,
            min_segment_days=min_days,
            discharge_gauge_field=self.discharge_gauge_field or self.gauge_id_field,
            catchment_gauge_field=self.catchment_gauge_field or self.gauge_id_field,
            catchment_field_given=(
                self.catchment_field_given
                if self.catchment_field_given is not None
                else bool(self.catchment_gauge_field)
            ),
            link_tolerance_m=tolerance,
            overlap_tolerance=overlap,
            reported_area_field=self.reported_area_field or None,
            precipitation_field=self.precipitation_field or None,
            workers=workers,
            dask_scheduler=self.dask_scheduler or None,
            flag_field=self.flag_field or None,
            flag_values=flags,
            recession_index_field=self.recession_index_field or None,
        )

    def link_method(self, catchment_columns) -> str:
        """``id`` or ``spatial`` for these catchments (``auto`` decides by the columns)."""
        if self.link != "auto":
            return self.link
        if (
            self.catchment_field_given
            or (self.catchment_gauge_field or self.gauge_id_field) in catchment_columns
        ):
            return "id"
        return "spatial"


#: The recession indexes (days per log cycle) a run accepts when given: a tenfold fall within
#: a day cannot be seen in daily means (and Tc = 0.2144 K would fall inside the peak's day), and
#: one slower than ten years cannot be seen in any record (our own bounds; measured indexes of
#: perennial streams lie well inside, commonly tens to a few hundred days).
RECESSION_INDEX_RANGE = (1.0, 3650.0)
#: The longest runoff-end lag (days) and shortest-segment setting a run accepts (our own bounds).
MAX_RUNOFF_END_LAG_DAYS = 365.0
MAX_SEGMENT_DAYS = 365


def check_recession_index(value, **where) -> float:
    """``value`` as a float when it is a recession index a run accepts
    (:data:`RECESSION_INDEX_RANGE`); else :class:`InputError` saying the range and why,
    located by ``where`` (``field=``, ``gauge=``)."""
    low, high = RECESSION_INDEX_RANGE
    try:
        number = float(value)
    except (TypeError, ValueError):
        number = math.nan
    if not low <= number <= high:
        shown = f"{number:g}" if math.isfinite(number) else quoted(value)
        raise InputError(
            f"recession index {shown} is outside {low:g} to {high:,.0f} days per log cycle: "
            "a faster fall cannot be seen in daily means, a slower one in any record",
            **where,
        )
    return number


#: The settings that name a field, by the layer or table that must hold it.
FIELD_SETTINGS = {
    "gauges layer": ("gauge_id_field", "recession_index_field", "reported_area_field"),
    "discharge table": ("discharge_gauge_field", "date_field", "value_field", "flag_field"),
    "catchments layer": ("catchment_gauge_field", "precipitation_field"),
    "subbasins layer": ("subbasin_id_field", "downstream_field"),
}


def field_setting(missing_field, settings) -> str | None:
    """The :class:`Settings` attribute that named a field missing from a layer
    (``InputError.missing_field``: what, field), or None when none did."""
    if not missing_field or settings is None:
        return None
    what, name = missing_field
    for attribute in FIELD_SETTINGS.get(what, ()):
        if getattr(settings, attribute, None) == name:
            return attribute
    return None


def _whole_number(value):
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return int(number) if math.isfinite(number) and number == int(number) else None


def _positive(value):
    try:
        number = float(value)
    except (TypeError, ValueError):
        return False
    return math.isfinite(number) and number > 0


class Reporter:
    """Where the pipeline reports progress and messages. The default says nothing.

    The QGIS plugin passes one that talks to ``QgsProcessingFeedback``; the CLI one prints
    warnings to stderr.
    """

    def progress(self, done: int, total: int, gauge_id: str | None = None) -> None:
        """Called before each gauge (``done`` finished so far) and once at the end."""

    def cancelled(self) -> bool:
        """Return True to stop the run; the pipeline then raises :class:`Cancelled`."""
        return False

    def info(self, text: str) -> None:
        """A plain message."""

    def warning(self, text: str) -> None:
        """A caution about one gauge or catchment, or about most of them (a plausibility
        check most gauges fail); the run goes on."""


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


def gauge_hydrology(
    record: GaugeRecord, area_km2: float, settings: Settings, recession_index_days=None
) -> GaugeResult:
    """Recession index, events, displacement, baseflow and water-year terms for one gauge.

    Parameters
    ----------
    record : GaugeRecord
        The gauge's daily record.
    area_km2 : float
        Drainage area: sets the runoff-end lag and turns volumes into depths. With NaN the
        volumes are still computed (the lag then defaults to that of a 100 km² basin).
    settings : Settings
    recession_index_days : float, optional
        K for this gauge (overrides ``settings.recession_index_days``).
    """
    return _gauge_hydrology(record, area_km2, settings.resolved(), recession_index_days)


def _gauge_hydrology(record, area_km2, settings, recession_index_days=None, series=True):
    """:func:`gauge_hydrology` with ``settings`` already resolved; ``series`` False leaves the
    daily flow and baseflow out of the result (a large run keeps only its tables)."""
    result = GaugeResult(record.gauge_id, float(area_km2))
    flow = record.flow
    result.flow = flow if series else None
    quality = result.quality
    if flow.empty or record.days_with_value == 0:
        quality.append("no usable discharge values")
        return result
    has_area = bool(np.isfinite(area_km2) and area_km2 > 0)
    area = float(area_km2) if has_area else np.nan
    if settings.runoff_end_lag_days is not None:
        lag = float(settings.runoff_end_lag_days)
    else:
        lag = float(runoff_end_lag_days(area if has_area else 100.0))
    q = flow.to_numpy(dtype=float)
    first = flow.index[0]
    if first.tzinfo is not None:
        first = first.tz_localize(None)  # the local day
    day0 = np.datetime64(first.to_datetime64(), "D")
    days = day0 + np.arange(q.size).astype("timedelta64[D]")
    # Flagged days stay in the flow but neither the method nor the baseflow filters use them.
    flagged = record.flagged.to_numpy(dtype=bool)
    usable = np.where(flagged, np.nan, q) if flagged.any() else q
    x = log_flow(usable)
    noise = noise_level(x)  # worked out once: the rise threshold, segment breaks, the band
    threshold = rise_threshold(x, noise=noise)
    rises = find_rises(x, lag, threshold)
    result.lag_days, result.rise_threshold = lag, threshold

    given = (
        recession_index_days if recession_index_days is not None else settings.recession_index_days
    )
    # The record's own estimate is made even when K is given: its segments and master
    # recession curve are diagnostics, and a given K far from it deserves a word.
    # K's interval resamples whole water years (a segment in the year of its first day).
    day_years = annual_mod.day_water_years(days, settings.water_year_start)
    recession = estimate_recession_index(
        x, rises, lag, settings.min_segment_days, years=day_years, noise=noise
    )
    lag, lag_note = _checked_lag(x, rises, lag, given, recession, settings, noise)
    if lag_note:
        quality.append(lag_note)
        if settings.runoff_end_lag_days is None:  # the record's lag is used from here on
            result.lag_days = lag
            recession = estimate_recession_index(
                x, rises, lag, settings.min_segment_days, years=day_years, noise=noise
            )
    if given is not None:
        k = float(given)
        notes = recession_warnings(k)
        if np.isfinite(recession.days) and not 1 / 1.5 <= k / recession.days <= 1.5:
            notes.append(
                f"given recession index {k:.0f} days; the record suggests {recession.days:.0f} days"
            )
        recession = RecessionIndex(
            k,
            np.nan,
            np.nan,
            recession.segments_used,
            source="given",
            segment_columns=recession.segment_columns,
            warnings=notes,
        )
    result.recession = recession
    segments = recession.segment_columns
    master = master_columns(segments)
    quality.extend(recession.warnings)
    quality.extend(master_recession_warnings(master))
    quality.extend(rising_share_warnings(rising_share(x, segments, recession.days)))
    k = recession.days
    if np.isfinite(k) and k > 0 and np.isnan(x).any():
        # With K known, a rise hidden in a gap (missing, zero or flagged days) is judged
        # against the recession carried along K across it, not the flow before it.
        rises = find_rises(x, lag, threshold, recession_index_days=k)

    clean = CleanDays(x)
    # Storm runs that cannot be read one by one are measured as composite events.
    rises = compose_events(
        rises, x, lag, clean, settle_days=critical_time_days(k) if np.isfinite(k) else None
    )
    # The events with K, and again with K at both ends of its interval, in one pass.
    if np.isfinite(k) and k > 0:
        events, ends = event_columns_at(
            usable, day0, x, rises, [k, recession.low, recession.high], lag, clean=clean
        )
    else:
        events, ends = event_columns(usable, day0, x, rises, k, lag, clean=clean), (None, None)
    event_table = dict(events.columns)
    event_table["event"] = np.arange(1, len(events) + 1, dtype=np.int64)
    if lag_note and settings.runoff_end_lag_days is None and len(events):
        plain = (event_table["note"] == "") & event_table["used"]
        event_table["note"] = np.where(
            plain,
            f"read at least {lag:.0f} days after the peak (the record's runoff-end lag)",
            event_table["note"],
        )
    event_table["recharge_mm"] = (
        event_table["recharge_m3"] / (area * 1e3) if has_area else np.full(len(events), np.nan)
    )
    events = ColumnTable(event_table, EVENT_COLUMNS_WITH_DEPTH)
    events_low, events_high = (
        None
        if end is None
        else {"peak_date": event_table["peak_date"], "recharge_m3": end[0], "used": end[1]}
        for end in ends
    )
    reading = _reading_errors(event_table, k, noise) if ends[0] is not None else None

    if np.isfinite(k):
        baseflow = separate_baseflow(usable, settings.baseflow_method, k, settings.bfi_max)
    elif settings.baseflow_method != "eckhardt":
        baseflow = separate_baseflow(usable, settings.baseflow_method)
    else:
        baseflow = np.full(q.size, np.nan)
    if series:
        result.baseflow = pd.Series(baseflow, index=flow.index, name="baseflow_m3s")
    result.baseflow_index = baseflow_index(q, baseflow)

    annual = annual_mod.annual_columns(
        days,
        q,
        events,
        area,
        settings.water_year_start,
        baseflow=baseflow,
        recession_index_days=k if np.isfinite(k) else None,
        events_low=events_low,
        events_high=events_high,
        flagged=flagged if flagged.any() else None,
        reading_error=reading,
        # Small rises the events did not measure: a term beside the recharge, not in it.
        between_events=recession_rises(event_table, x, day0, k) if np.isfinite(k) else None,
    )
    periods = annual_mod.period_columns(
        days,
        q,
        events,
        area,
        settings.period,
        settings.water_year_start,
        flagged=flagged if flagged.any() else None,
    )
    dated = {
        "first_date": (day0 + segments["first"].astype("timedelta64[D]")).astype("datetime64[ns]"),
        "last_date": (day0 + segments["last"].astype("timedelta64[D]")).astype("datetime64[ns]"),
    }
    dated.update({c: segments[c] for c in SEGMENT_COLUMNS[2:]})
    result.tables = {
        "events": events,
        "annual": annual,
        "periods": periods,
        "segments": ColumnTable(dated, SEGMENT_COLUMNS),
        "master_recession": master,
    }
    result.complete_years = int(np.sum(annual["complete"]))
    result.fully_measured_years = int(np.sum(annual["all_events_measured"]))
    mean = annual_mod.mean_annual
    result.recharge_m3_per_year = mean(annual, "recharge_m3")
    result.recharge_mm_per_year = mean(annual, "recharge_mm")
    result.recharge_mm_per_year_fully_measured = mean(
        annual, "recharge_mm", years="all_events_measured"
    )
    # The band of the mean: K's interval (the same for every year) and the reading error
    # (independent between years) together; it always holds the estimate.
    result.recharge_mm_per_year_low, result.recharge_mm_per_year_high = (
        annual_mod.mean_recharge_band(
            annual, events_low, events_high, reading, settings.water_year_start, area
        )
    )
    result.baseflow_mm_per_year = mean(annual, "baseflow_mm")
    result.recharge_between_events_mm_per_year = mean(annual, "recharge_between_events_mm")
    complete = np.asarray(annual["complete"], dtype=bool)
    trend = recharge_trend(
        np.asarray(annual["water_year"])[complete], np.asarray(annual["recharge_mm"])[complete]
    )
    result.recharge_trend_mm_per_decade = trend["recharge_trend_mm_per_decade"]
    result.recharge_trend_p_value = trend["recharge_trend_p_value"]
    result.recharge_trend = trend["recharge_trend"]
    result.seasonal_recharge_mm_per_year = mean(annual, "seasonal_recharge_mm")
    quality.extend(_record_quality(record, result, settings))
    return result


def _reading_errors(events, k, noise):
    """The reading error of each event (:func:`recession.reading_error`), for the band."""
    used = np.asarray(events["used"], dtype=bool)
    day = np.timedelta64(1, "D")
    reading_days = (events["post_anchor_date"] - events["last_peak_date"]) / day
    systematic, spread = reading_error(
        k,
        np.where(used, reading_days, np.nan),
        events["q_before_m3s"],
        events["q_after_m3s"],
        noise,
        np.where(used, events["reading_share"], 1.0),
    )
    return {
        "peak_date": events["peak_date"],
        "used": used,
        "systematic_m3": systematic,
        "spread_m3": spread,
    }


#: The record's settling time replaces the later of the area's lag and Tc as soon as it exceeds
#: it (``settled > a·reading + b``; our own rule). An earlier rule waited for a quarter and a
#: day more (two aquifers in parallel also bend the recession for a while after Tc), but
#: readings one or two days before the record settles still carried enough quickflow to put
#: recharge 28–63 % high with quality ok (slow-runoff family, seed 4); reading later costs
#: little, since Q2 is moved back along K.
LAG_MARGIN = (1.0, 0.0)


def _typical_displacement(x, rises, k, lag):
    """The median ``log10(Q2/Q1)`` of the record's measured events at ``k`` and ``lag``."""
    with np.errstate(invalid="ignore", over="ignore"):
        parts = _displacements(10.0**x, x, rises, k, lag, None, None, notes=False)
        ratio = np.log10(parts["q2"] / parts["q1"])[parts["used"]]
    ratio = ratio[np.isfinite(ratio)]
    return float(np.median(ratio)) if ratio.size else np.nan


def _checked_lag(x, rises, lag, given_k, recession, settings, noise=None):
    """The runoff-end lag checked on the record's own hydrographs (see
    :func:`recession.settling_days`): ``(lag, note)``. Where runoff clearly lasts longer than
    the lag, the record's settling time is returned with a note saying so, unless the user set
    the lag (then the lag stays and the note flags it)."""
    k = float(given_k) if given_k is not None else recession.days
    if not np.isfinite(k) or k <= 0:
        return lag, ""
    settled = settling_days(
        x, rises, k, lag, noise, displacement=_typical_displacement(x, rises, k, lag)
    )
    reading = max(lag, float(critical_time_days(k)))
    if not (np.isfinite(settled) and settled > LAG_MARGIN[0] * reading + LAG_MARGIN[1]):
        return lag, ""
    if settings.runoff_end_lag_days is not None:
        return lag, (
            f"runoff lasts about {settled:.0f} days after peaks (recessions settle that late), "
            f"longer than the given runoff-end lag of {lag:.1f} days and the critical time: "
            "readings may carry quickflow"
        )
    return settled, (
        f"runoff lasts about {settled:.0f} days after peaks (recessions settle that late: "
        f"slow runoff or a faster second aquifer), longer than the {lag:.1f} days the drainage "
        f"area suggests (N = A^0.2): readings and recession segments start after "
        f"{settled:.0f} days"
    )


def _record_quality(record: GaugeRecord, result: GaugeResult, settings: Settings):
    """Plain-language cautions about a gauge's record and the method's fit to it (the
    plausibility checks first: when they fail, nothing else about the gauge can be trusted)."""
    notes = _plausibility_notes(record, result, settings)
    missing_share = 1.0 - record.days_with_value / max(record.days, 1)
    if missing_share > 0.05:
        notes.append(f"{100 * missing_share:.0f}% of days in the record have no value")
    if result.complete_years == 0:
        notes.append("no complete water year: mean annual recharge not computed")
    elif result.complete_years < settings.min_complete_years:
        notes.append(
            f"only {result.complete_years} complete water years (fewer than {settings.min_complete_years})"
        )
    notes.extend(_fair_sample_notes(record, result))
    notes.extend(between_events_notes(result))
    events = result.table("events")
    used = int(np.sum(events["used"])) if len(events) else 0
    if len(events):
        skipped = len(events) - used
        if skipped > 0.1 * len(events):
            notes.append(f"{skipped} of {len(events)} events could not be measured")
    if used < FEW_EVENTS:
        notes.append(f"only {used} events measured (fewer than {FEW_EVENTS})")
    lo, hi = USUAL_AREA_KM2
    if np.isfinite(result.area_km2) and not lo <= result.area_km2 <= hi:
        notes.append(
            f"drainage area {result.area_km2:,.0f} km² is outside the {lo:,.0f}–{hi:,.0f} km² the method is usually applied to"
        )
    flow = record.flow.to_numpy()
    reference = baseflow_index(flow, separate_baseflow(flow, "smoothed_minima"))
    if np.isfinite(reference) and reference < FLASHY_BASEFLOW_INDEX:
        notes.append(
            f"flashy stream (baseflow index {reference:.2f} by smoothed minima, under {FLASHY_BASEFLOW_INDEX}): "
            "the method suits baseflow-dominated streams"
        )
    return notes


#: The rises of the recession between measured events, as a share of the recharge, beyond
#: which a gauge is flagged (our own rule: on invented records where the method's assumptions
#: hold they stay within ±2 %; a term this size puts the recharge off by more than its band).
BETWEEN_EVENTS_SHARE = 0.10


def between_events_notes(result: GaugeResult):
    """A caution when the recession rises (or falls) between measured events by more than
    :data:`BETWEEN_EVENTS_SHARE` of the recharge."""
    term, recharge = result.recharge_between_events_mm_per_year, result.recharge_mm_per_year
    if not (np.isfinite(term) and np.isfinite(recharge) and recharge > 0):
        return []
    share = term / recharge
    if share > BETWEEN_EVENTS_SHARE:
        return [
            f"the recession rises between events by about {term:.0f} mm/yr ({100 * share:.0f}% "
            "of the recharge) that no event measured: storms too small to count as events; "
            "the recharge is likely low by at least that much"
        ]
    if share < -BETWEEN_EVENTS_SHARE:
        return [
            f"the recession falls faster than K between events (about {-term:.0f} mm/yr, "
            f"{-100 * share:.0f}% of the recharge): flow lost from the stream, or K too long"
        ]
    return []


#: A river's mean annual flow depth (mean flow volume over the drainage area) lies in this
#: range, mm/yr (common practice, not a published limit: the driest perennial streams carry
#: about a millimetre a year, the wettest mountain basins a few metres). A gauge outside it is
#: flagged: most often the discharge units are wrong, sometimes the catchment.
FLOW_DEPTH_MM_PER_YEAR = (1.0, 5000.0)
#: A typical river's mean flow depth, mm/yr: about the world's mean runoff (from memory: some
#: 40,000 km³ of river flow a year over some 135 million km² of land). Of the unit mix-ups
#: that would bring a depth from outside the range into it, the one bringing it nearest this
#: is named (our own rule).
TYPICAL_FLOW_DEPTH_MM_PER_YEAR = 300.0
#: A depth this many times beyond the range is "far" beyond it.
FAR_OUTSIDE = 10.0
#: The words every flow-depth note ends with: the command-line option / the QGIS parameter.
UNITS_HINT = "check the discharge units (--units / UNITS)"
#: The plausibility checks, by key (see ``GaugeResult.implausible``), with what the run's
#: summary says of the gauges that fail one.
PLAUSIBILITY_CHECKS = {
    "flow_depth_high": f"have a mean flow depth above what rivers carry: {UNITS_HINT}",
    "flow_depth_low": f"have a mean flow depth below what rivers carry: {UNITS_HINT}",
    "recharge_over_flow": (
        "have more mean annual recharge than flow: check the recession index "
        "(--recession-index / RECESSION_INDEX)"
    ),
    "baseflow_over_flow": (
        "have more baseflow than flow: check the baseflow method "
        "(--baseflow-method / BASEFLOW_METHOD)"
    ),
}
#: Mean annual recharge may exceed the mean flow of the same years by this share before the
#: gauge is flagged (our own rule: on a stream fed wholly by groundwater the two are equal, and
#: the method's estimate is good to about this share, so a small excess is its error).
RECHARGE_OVER_FLOW = 0.10
#: The baseflow index may exceed 1 by this much, rounding only (the filters keep baseflow at
#: or below the flow on every day).
BASEFLOW_OVER_FLOW = 1e-6
#: Seconds in a mean (Julian) year of 365.25 days.
_SECONDS_PER_YEAR = 86400.0 * 365.25


def _log10_mean(values) -> float:
    """log10 of the mean of the finite values (all ≥ 0), with neither overflow nor warnings
    for any size, subnormal numbers included: -inf when they are all zero, NaN when none."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return np.nan
    top = float(v.max())
    if top <= 0.0:
        return -np.inf
    # Scaled by the largest value the sum cannot overflow; log10 of a subnormal is finite.
    return float(np.log10(top)) + float(np.log10(np.mean(v / top)))


def _number(log10_value: float) -> str:
    """A positive number given by its log10, in words for a note: ``177,000``, ``12.3``,
    ``0.18``, ``3.0×10^-298`` (three significant digits at most; never overflows)."""
    if not np.isfinite(log10_value):
        return "0" if log10_value < 0 else "infinity"
    if -2.0 <= log10_value < 9.0:
        value = float(f"{10.0**log10_value:.3g}")
        if value >= 100:
            return f"{value:,.0f}"
        return f"{value:.3g}" if value >= 1 else f"{value:.2g}"
    exponent = math.floor(log10_value)
    mantissa = round(10.0 ** (log10_value - exponent), 1)
    if mantissa >= 10.0:
        mantissa, exponent = mantissa / 10.0, exponent + 1
    return f"{mantissa:.1f}×10^{exponent}"


def _at_least(log10_factor: float) -> str:
    """A factor given by its log10, rounded down (it is a lower bound): ``20,000``, ``10^297``."""
    if log10_factor >= 6.0:
        return f"10^{math.floor(log10_factor)}"
    step = 10.0 ** (math.floor(log10_factor) - 1)  # two significant digits
    value = math.floor(10.0**log10_factor / step) * step
    return f"{value:,.0f}" if value >= 100 else f"{value:.2g}"


def _unit_mix_ups(units):
    """Every other unit read as ``units``: ``(factor, written, read)``, the flow coming out
    ``factor`` times the truth (factors from :data:`units.DISCHARGE_UNITS`, NIST SP 811)."""
    read = canonical_units(units)
    return [
        (DISCHARGE_UNITS[read] / to_m3s, written, read)
        for written, to_m3s in DISCHARGE_UNITS.items()
        if written != read
    ]


def flow_depth_note(flow_m3s, area_km2, units="m3/s"):
    """A gauge's mean annual flow depth checked against what rivers carry.

    The depth is the mean flow over the days with a value, as a volume per year of 365.25
    days, over the drainage area: d = Q̄ · 31,557,600 s / (A · 10⁶ m²) · 10³ mm/m. Outside
    :data:`FLOW_DEPTH_MM_PER_YEAR` (common practice) the gauge is flagged with the likely
    cause: when reading the values in another of the offered units would bring d into the
    range, that unit mix-up is named (the one bringing d nearest
    :data:`TYPICAL_FLOW_DEPTH_MM_PER_YEAR`); otherwise the least factor that would.
    Worked in log10 throughout, so values of any size (1e-300 m³/s, subnormal ones) neither
    overflow nor warn.

    Parameters
    ----------
    flow_m3s : array_like
        Daily flows, m³/s (NaN for days without a value).
    area_km2 : float
        Drainage area; NaN (or not positive) skips the check.
    units : str
        The units the values were read in (names the mix-up).

    Returns
    -------
    tuple of (str, str) or None
        The check's key (``flow_depth_high`` or ``flow_depth_low``) and the note; None when
        the depth is in the range, or cannot be worked out (no area, no value, no flow).

    Examples
    --------
    >>> flow_depth_note([1.0] * 365, 100.0) is None  # 316 mm/yr
    True
    >>> flow_depth_note([1000.0] * 365, 100.0)[1][:60]
    'mean flow depth 316,000 mm/yr is far above what rivers carry'
    """
    area = float(area_km2)
    if not (np.isfinite(area) and area > 0):
        return None
    log_flow_mean = _log10_mean(flow_m3s)
    if not np.isfinite(log_flow_mean):  # no value, or no flow at all (noted elsewhere)
        return None
    depth = log_flow_mean + math.log10(_SECONDS_PER_YEAR) - math.log10(area * 1e3)
    low, high = (math.log10(v) for v in FLOW_DEPTH_MM_PER_YEAR)
    if low <= depth <= high:
        return None
    above = depth > high
    beyond = depth - high if above else low - depth
    typical = math.log10(TYPICAL_FLOW_DEPTH_MM_PER_YEAR)
    best = None
    for factor, written, read in _unit_mix_ups(units):
        corrected = depth - math.log10(factor)
        if (factor > 1.0) == above and low <= corrected <= high:
            if best is None or abs(corrected - typical) < best[0]:
                best = (abs(corrected - typical), factor, written, read)
    lo_text, hi_text = (f"{v:,.0f}" for v in FLOW_DEPTH_MM_PER_YEAR)
    far = "far " if beyond >= math.log10(FAR_OUTSIDE) else ""
    way = "large" if above else "small"
    text = (
        f"mean flow depth {_number(depth)} mm/yr is {far}{'above' if above else 'below'} what "
        f"rivers carry (about {lo_text} to {hi_text} mm/yr): "
    )
    if best is not None:
        _, factor, written, read = best
        times = factor if factor > 1 else 1.0 / factor
        times_text = f"{times:,.0f}" if times >= 100 else f"{times:.3g}"
        text += (
            f"the discharge {'looks' if far else 'may be'} about {times_text} times too {way} "
            "for the drainage area, "
            f"as when values in {written} are read as {read}; {UNITS_HINT}"
        )
    else:
        text += (
            f"the discharge is at least {_at_least(beyond)} times too {way} for the drainage "
            f"area, which no mix-up of the offered units explains; {UNITS_HINT} and the "
            "catchment linked to the gauge"
        )
    return ("flow_depth_high" if above else "flow_depth_low"), text


def _flow_m3_by_water_year(flow: pd.Series, start_month, years) -> np.ndarray:
    """The flow volume (m³) of each water year in ``years``, from every day with a value (as
    the annual table's ``flow_mm``, but needing no area)."""
    q = flow.to_numpy(dtype=float)
    years = np.asarray(years, dtype=np.int64)
    out = np.zeros(years.size)
    if q.size == 0 or years.size == 0:
        return out
    first = flow.index[0]
    if first.tzinfo is not None:
        first = first.tz_localize(None)  # the local day
    days = np.datetime64(first.to_datetime64(), "D") + np.arange(q.size).astype("timedelta64[D]")
    slot = annual_mod._water_year_of_days(days, start_month) - years[0]
    inside = (slot >= 0) & (slot < years.size)
    volume = np.where(np.isfinite(q), q, 0.0) * 86400.0
    return np.bincount(slot[inside], weights=volume[inside], minlength=years.size)[: years.size]


def _amount(value: float, area_km2: float) -> str:
    """A yearly volume in words: as a depth where there is an area, else in m³."""
    if np.isfinite(area_km2) and area_km2 > 0:
        return f"{_number(_log10_amount(value) - math.log10(area_km2 * 1e3))} mm/yr"
    return f"{_number(_log10_amount(value))} m³/yr"


def _log10_amount(value: float) -> float:
    return math.log10(value) if value > 0 else -math.inf


def water_balance_notes(result: GaugeResult, flow_m3_by_year=None):
    """Recharge and baseflow checked against the flow they are part of.

    Recharge that returns to the stream, and the baseflow, are parts of the flow: over the
    same years neither can exceed it (a single year's recharge may, while the aquifer fills;
    a mean over the complete years may not). Flagged: mean annual recharge over the complete
    water years more than :data:`RECHARGE_OVER_FLOW` above the mean annual flow of the same
    years (on a stream fed wholly by groundwater the two are equal, so the method's own error
    is allowed), and a baseflow index (Σ baseflow / Σ flow) above 1.

    Parameters
    ----------
    result : GaugeResult
        With its ``annual`` table, ``baseflow_index`` and recession index.
    flow_m3_by_year : array_like, optional
        Flow volume of each row of the annual table, m³ (default: the table's ``flow_mm``
        times the area).

    Returns
    -------
    list of (str, str)
        ``(check key, note)`` for each check failed.
    """
    out = []
    annual = result.table("annual")
    area = result.area_km2
    if len(annual):
        if flow_m3_by_year is None:
            flow_m3_by_year = np.asarray(annual["flow_mm"], dtype=float) * area * 1e3
        flow = np.asarray(flow_m3_by_year, dtype=float)
        recharge = np.asarray(annual["recharge_m3"], dtype=float)
        same = np.asarray(annual["complete"], dtype=bool) & np.isfinite(recharge)
        same &= np.isfinite(flow)
        if same.any():
            mean_recharge, mean_flow = float(recharge[same].mean()), float(flow[same].mean())
            if mean_recharge > (1.0 + RECHARGE_OVER_FLOW) * mean_flow:
                k = result.recession
                k_text = (
                    f"the given recession index ({k.days:,.0f} days) is likely far too long"
                    if k is not None and k.source == "given"
                    else f"the recession index ({k.days:,.0f} days) or the events are likely wrong"
                    if k is not None and np.isfinite(k.days)
                    else "the recession index or the events are likely wrong"
                )
                out.append(
                    (
                        "recharge_over_flow",
                        f"mean annual recharge {_amount(mean_recharge, area)} is more than the "
                        f"mean flow of the same {counted(int(same.sum()), 'water year')} "
                        f"({_amount(mean_flow, area)}), which recharge returning to the stream "
                        f"cannot be: {k_text}",
                    )
                )
    bfi = result.baseflow_index
    if np.isfinite(bfi) and bfi > 1.0 + BASEFLOW_OVER_FLOW:
        out.append(
            (
                "baseflow_over_flow",
                f"baseflow index {bfi:.2f} is above 1: the baseflow exceeds the flow, which "
                "cannot be; the baseflow separation went wrong (check the baseflow method, "
                "--baseflow-method / BASEFLOW_METHOD)",
            )
        )
    return out


def _plausibility_notes(record: GaugeRecord, result: GaugeResult, settings: Settings):
    """The plausibility checks of one gauge (:func:`flow_depth_note`,
    :func:`water_balance_notes`): their notes, with the keys of the failed checks kept in
    ``result.implausible``."""
    found = []
    depth = flow_depth_note(record.flow.to_numpy(dtype=float), result.area_km2, settings.units)
    if depth is not None:
        found.append(depth)
    annual = result.table("annual")
    flow = (
        _flow_m3_by_water_year(record.flow, settings.water_year_start, annual["water_year"])
        if len(annual)
        else None
    )
    found.extend(water_balance_notes(result, flow))
    result.implausible = [key for key, _ in found]
    return [note for _, note in found]


#: The complete years' mean flow depth may differ from the whole record's by this share before
#: the gauge is flagged as kept on an unfair sample of its years (our own rule).
UNFAIR_SAMPLE = 0.10


def _fair_sample_notes(record: GaugeRecord, result: GaugeResult):
    """A caution when the water years the mean covers are wetter or drier than the record.

    The mean flow of the complete years is compared with the mean flow over every day with a
    value in the whole record: when a few missing years were the wet (or dry) ones, the mean
    annual recharge of the rest does not represent the gauge.
    """
    annual = result.table("annual")
    if not len(annual) or result.complete_years == 0:
        return []
    complete = np.asarray(annual["complete"], dtype=bool)
    if complete.all():
        return []
    flow = record.flow.to_numpy(dtype=float)
    with_value = flow[np.isfinite(flow)]
    if with_value.size == 0 or not np.isfinite(result.area_km2) or result.area_km2 <= 0:
        return []
    record_mm = with_value.mean() * 86400.0 * 365.25 / (result.area_km2 * 1e3)
    kept = np.asarray(annual["flow_mm"], dtype=float)[complete]
    kept_mm = float(np.mean(kept[np.isfinite(kept)])) if np.isfinite(kept).any() else np.nan
    if not (np.isfinite(kept_mm) and record_mm > 0):
        return []
    change = kept_mm / record_mm - 1.0
    if abs(change) <= UNFAIR_SAMPLE:
        return []
    return [
        f"the {result.complete_years} water years with a complete record are "
        f"{'wetter' if change > 0 else 'drier'} than the whole record (mean flow "
        f"{kept_mm:,.0f} against {record_mm:,.0f} mm/yr): the mean recharge may not represent it"
    ]


#: Values that are not usable numbers (text, negative, infinite, missing-value codes) are
#: flagged when they are more than this share of a gauge's rows (our own rule).
MANY_BAD_VALUES = 0.01
#: Flow is flagged as ephemeral when it is zero on at least this share of the days with a
#: value (our own rule; the method suits perennial streams).
EPHEMERAL_ZERO_SHARE = 0.10
#: A record shorter than this many days is flagged as too short for the method (our own rule:
#: the recession index needs several recessions, the annual sums a water year).
SHORT_RECORD_DAYS = 365


def record_notes(record: GaugeRecord) -> list:
    """Plain-language flags about a gauge's input rows: what was left out or merged, and why.

    They lead the gauge's ``quality``: unreadable dates, values that are not usable numbers
    (when many), missing-value codes that repeat, times given twice with different values, a
    record that is dry, ephemeral or shorter than a year.
    """
    counts = record.counts
    notes = []
    rows = counts.get("rows") or 0
    unreadable = counts.get("unreadable_dates", 0)
    if unreadable:
        example = counts.get("unreadable_date_example")
        notes.append(
            f"{counted(unreadable, 'row')} with a date that could not be read left out"
            + (f" (e.g. {quoted(example)})" if example else "")
        )
    for key, words in (
        ("stray_dates", "dated more than a century from the rest of the record"),
        ("future_dates", "dated in the future"),
    ):
        if counts.get(key):
            examples = counts.get(key.replace("dates", "date_examples")) or []
            more = " …" if counts[key] > len(examples) else ""
            notes.append(
                f"{counted(counts[key], 'row')} {words} ({', '.join(examples)}{more}): a typo?"
            )
    for value, count in counts.get("missing_value_codes", []):
        if count >= 2:
            notes.append(f"{value:g} used as a missing-value code on {count:,} rows (left out)")
    bad = counts.get("non_numeric", 0) + counts.get("negative", 0)
    if bad and bad > MANY_BAD_VALUES * max(rows, 1):
        notes.append(f"{counted(bad, 'value')} that are text, negative or infinite left out")
    implausible = counts.get("implausible", 0)
    if implausible:
        notes.append(
            f"{counted(implausible, 'value')} over 10 million m³/s left out (no river carries "
            "so much: wrong units or a code?)"
        )
    conflicting = counts.get("conflicting_times", 0)
    if conflicting:
        what = ("time", "times") if counts.get("sub_daily") else ("day", "days")
        notes.append(
            f"{counted(conflicting, *what)} given more than once with different values (averaged)"
        )
    flow = record.flow.to_numpy(dtype=float)
    with_value = flow[np.isfinite(flow)]
    if with_value.size:
        zero = int(np.count_nonzero(with_value == 0))
        if zero == with_value.size:
            notes.append("flow is zero on every day with a value (a dry or ephemeral record)")
        elif zero >= EPHEMERAL_ZERO_SHARE * with_value.size:
            notes.append(
                f"flow is zero on {100 * zero / with_value.size:.0f}% of the days with a value: "
                "an ephemeral stream (the method suits perennial streams)"
            )
    if 0 < record.days < SHORT_RECORD_DAYS:
        notes.append(
            f"record only {counted(record.days, 'day')} long: too short for the method "
            "(a year or more)"
        )
    return notes


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


def _gauge_group(payload):
    """The hydrology of a group of gauges (run here or in a worker process).

    The payload's items carry their daily records, or None when a forked worker reads them
    from the records it inherited. A worker packs the group's results (see
    :func:`_pack_group`) so they travel back cheaply.
    """
    from .parallel import shared

    items, settings, keep_series, packed = payload  # settings resolved by compute_gauges
    inherited = shared()
    out = []
    for gid, record, area, given in items:
        if record is None and inherited is not None:
            record = inherited.get(gid)
        failure = None
        if record is None:
            result = GaugeResult(gid, area, quality=["no discharge record for this gauge"])
        else:
            try:
                result = _gauge_hydrology(record, area, settings, given, keep_series)
            except Exception as exc:  # one bad gauge never spoils the run
                failure = describe(exc)
                result = GaugeResult(
                    gid, area, quality=[f"could not be computed (internal error: {failure})"]
                )
            result.quality[:0] = record_notes(record)
        out.append((gid, result, failure))
    return _pack_group(out) if packed else out


#: Marks a gauge group's results packed by :func:`_pack_group`.
_PACKED = "packed gauge group"


def _pack_group(out):
    """A gauge group's results with each kind of table joined across its gauges.

    Pickling a few long arrays costs a fraction of pickling many short ones; this is what makes
    the workers' results cheap to send and to receive. :func:`_unpack_group` restores them
    exactly (same values, same dtypes).
    """
    results = [result for _, result, _ in out]
    tables = {
        name: pack_tables([result.tables.get(name) for result in results])
        for name in {name for result in results for name in result.tables}
    }
    has_tables = [list(result.tables) for result in results]
    segments = pack_tables(
        [None if r.recession is None else r.recession.segment_columns for r in results]
    )
    for result in results:
        result.tables = {}
        if result.recession is not None:
            result.recession.segment_columns = None
    return (_PACKED, out, has_tables, tables, segments)


def _unpack_group(group):
    """The ``(gauge id, result, failure)`` list of a gauge group, packed or not."""
    if not (isinstance(group, tuple) and group and group[0] == _PACKED):
        return group
    _, out, has_tables, tables, segments = group
    unpacked = {name: unpack_tables(packed) for name, packed in tables.items()}
    for i, ((_, result, _), names) in enumerate(zip(out, has_tables)):
        result.tables = {name: unpacked[name][i] for name in names}
    for (_, result, _), columns in zip(out, unpack_tables(segments)):
        if result.recession is not None:
            result.recession.segment_columns = columns
    return out


def compute_gauges(
    gauge_ids,
    records,
    area_of,
    settings,
    reporter,
    given_k,
    unlinked_note=None,
    workers=None,
    scheduler=None,
    keep_series=True,
):
    """The hydrology of every gauge; one that fails is flagged and the run goes on.

    Parameters
    ----------
    gauge_ids : list of str
    records : dict of str to GaugeRecord
    area_of : dict of str to float
        Drainage area of each linked gauge (km²).
    settings : Settings
    reporter : Reporter
    given_k : dict of str to float
        Recession index given per gauge.
    unlinked_note : callable, optional
        Gives the quality note for a gauge without an area.
    workers : int, optional
        Processes to use (default ``settings.workers``); gauges go out in groups.
    scheduler : str, optional
        Address of a Dask distributed scheduler (default ``settings.dask_scheduler``).
    keep_series : bool
        Keep each gauge's daily flow and baseflow in its result (for the daily table and the
        report); without them a large run holds only its tables.

    Returns
    -------
    results : dict of str to GaugeResult
        In the order of ``gauge_ids``; identical whatever the workers or scheduler.
    failed : int
    """
    from .parallel import group_size, groups, map_groups

    settings = settings.resolved()  # once here, not once per gauge group
    workers = settings.workers if workers is None else workers
    scheduler = settings.dask_scheduler if scheduler is None else scheduler
    total = len(gauge_ids)
    serial = int(workers or 1) <= 1 and not scheduler
    # One gauge at a time when serial, so progress and cancel follow every gauge.
    batches = groups(gauge_ids, 1 if serial else group_size(total, workers, scheduler))
    # Payloads name their gauges; the records go along only where workers cannot inherit them.
    payloads = [
        (
            [(gid, None, area_of.get(gid, np.nan), given_k.get(gid)) for gid in batch],
            settings,
            keep_series,
            not serial,
        )
        for batch in batches
    ]

    def pack(payload, all_records):
        items, group_settings, keep, packed = payload
        return (
            [(gid, all_records.get(gid), area, given) for gid, _, area, given in items],
            group_settings,
            keep,
            packed,
        )

    results: dict[str, GaugeResult] = {}
    failed = 0
    done = 0
    reporter.progress(0, total, gauge_ids[0] if gauge_ids else None)
    for group in map_groups(
        _gauge_group,
        payloads,
        workers,
        scheduler,
        reporter.cancelled,
        shared_data=records,
        pack=pack,
    ):
        for gid, result, failure in _unpack_group(group):
            if failure is not None:
                failed += 1
                reporter.warning(f"gauge {gid}: could not be computed ({failure})")
            if unlinked_note is not None and gid not in area_of:
                result.quality.insert(0, unlinked_note(gid))
            results[gid] = result
            done += 1
        reporter.progress(done, total, gauge_ids[done] if done < total else None)
    unknown = sorted(set(records) - set(gauge_ids))
    if unknown and any(gid in records for gid in gauge_ids):  # else the run stops: one error
        shown = ", ".join(unknown[:5]) + (" …" if len(unknown) > 5 else "")
        reporter.warning(f"{len(unknown)} gauge ids in the discharge table match no gauge: {shown}")
    return results, failed


class _Offset(Reporter):
    """Passes progress on as part of a larger whole (one gauge group of many)."""

    def __init__(self, reporter, before, total):
        self.reporter, self.before, self.total = reporter, before, total

    def progress(self, done, total, gauge_id=None):
        self.reporter.progress(self.before + done, self.total, gauge_id)

    def cancelled(self):
        return self.reporter.cancelled()

    def info(self, text):
        self.reporter.info(text)

    def warning(self, text):
        self.reporter.warning(text)


def _compute_in_groups(
    discharge, gauge_ids, area_of, settings, reporter, given_k, unlinked, keep_series, sink=None
):
    """:func:`compute_gauges` over the whole discharge table, or over it group by group.

    ``discharge`` is one table, or an iterable of tables each holding every row of its gauges
    (see :func:`files.discharge_groups`): then only one group's daily records are in memory at
    a time. With a ``sink`` (see :func:`run_atlas`) each group's :data:`SINK_TABLES` go there
    as soon as the group is done.
    """
    chunks = [discharge] if isinstance(discharge, pd.DataFrame) else discharge
    wanted = set(gauge_ids)
    results: dict[str, GaugeResult] = {}
    failed = 0
    tally = _Tally()
    grouped = not isinstance(discharge, pd.DataFrame)
    tally.grouped = grouped
    for chunk in chunks:
        try:
            records = _records(chunk, settings, tally.left_out)
        except InputError as exc:
            if grouped and exc.row is not None:  # a row of the group, not of the file
                exc.row = None
                exc.args = (str(exc),)
            raise
        tally.add(len(chunk), records, wanted)
        del chunk  # the records hold the group's flows now; its table is not needed
        here = [gid for gid in gauge_ids if gid in records and gid not in results]
        extra = {gid: record for gid, record in records.items() if gid not in wanted}
        part, lost = compute_gauges(
            here,
            {**extra, **{g: records[g] for g in here}},
            area_of,
            settings,
            _Offset(reporter, len(results), len(gauge_ids)),
            given_k,
            unlinked,
            keep_series=keep_series,
        )
        results.update(part)
        failed += lost
        if sink is not None:
            _to_sink(part, sink)
        del records  # before the next group is read, not after
    missing = [gid for gid in gauge_ids if gid not in results]
    if missing:
        rest, _ = compute_gauges(
            missing,
            {},
            area_of,
            settings,
            _Offset(reporter, len(results), len(gauge_ids)),
            given_k,
            unlinked,
            keep_series=keep_series,
        )
        results.update(rest)
    if not tally.rows:
        raise InputError("the discharge table has no rows")
    if tally.matched or not tally.unmatched:  # else the run stops with one error
        tally.report(reporter)
    return {gid: results[gid] for gid in gauge_ids}, failed, tally


#: Tables a run can hand to a table sink group by group (``annual`` stays: the nesting and
#: the per-year maps need it whole, and it is small).
SINK_TABLES = ("events", "periods", "segments", "master_recession")


def _to_sink(results, sink):
    """Hand these gauges' :data:`SINK_TABLES` to ``sink(name, frame)`` (one frame per table,
    the gauges in order) and let the gauges' own copies go (the recession's segment columns
    too: they are the segments table's)."""
    for name in SINK_TABLES:
        sink(name, _stack(results, name, share=False))
    for result in results.values():
        result.kept_event_figures = result.event_figures()
        for name in SINK_TABLES:
            result.tables.pop(name, None)
        if result.recession is not None:
            result.recession.segment_columns = None


class _Tally:
    """What reading the discharge table left out or merged, over all its gauge groups: said
    once in the run's log, and the gauge ids it holds that match no gauge."""

    COUNTS = (
        ("unreadable_dates", "rows with an unreadable date left out"),
        ("repeated_rows", "rows repeating a date (or time) already given merged"),
        ("conflicting_times", "of them with a different value (averaged)"),
        ("missing_value_code", "missing-value codes such as -999 left out"),
        ("non_numeric", "values that are not numbers left out"),
        ("negative", "negative or infinite values left out"),
        ("implausible", "values over 10 million m³/s left out"),
        ("dates_with_offset", "time-zone offsets ignored (clock time as written)"),
    )

    def __init__(self):
        self.rows = 0
        self.totals = {name: 0 for name, _ in self.COUNTS}
        self.unmatched = []
        self.matched = 0
        self.order = None
        self.left_out = {}
        self.grouped = False

    def add(self, rows, records, wanted):
        self.rows += int(rows)
        for gid, record in records.items():
            for name in self.totals:
                self.totals[name] += int(record.counts.get(name) or 0)
            self.order = self.order or record.counts.get("date_order")
            if gid in wanted:
                self.matched += 1
            else:
                self.unmatched.append(gid)

    def report(self, reporter):
        parts = [f"{self.totals[name]:,} {text}" for name, text in self.COUNTS if self.totals[name]]
        if self.left_out.get("rows_without_id"):
            reporter.warning(
                f"discharge table: {counted(self.left_out['rows_without_id'], 'row')} without "
                "a gauge id left out"
                + ("" if self.grouped else f" (the first: row {self.left_out['row_without_id']})")
            )
        if self.order:
            parts.append(f"dates with the year last read {self.order}")
        if parts:
            reporter.info(f"discharge table: {'; '.join(parts)}")


def _summary(results, failed, tally=None):
    """Counts of a run. A gauge is skipped when it has no hydrology at all (no discharge
    record, no usable value, or a failure inside the computation); it is flagged when it was
    computed but its quality is not ok. ``with_record`` counts the gauges the discharge table
    holds rows for; ``unmatched_ids`` lists (some of) the table's gauge ids that match no
    gauge, ``unmatched`` how many there are. ``implausible`` counts the gauges failing each
    plausibility check, and ``plausibility`` is the line said when most gauges fail one (see
    :func:`_plausibility_line`; empty otherwise)."""
    skipped = sum(1 for r in results.values() if r.recession is None)
    flagged = sum(1 for r in results.values() if r.recession is not None and r.quality)
    implausible = {}
    for result in results.values():
        for key in result.implausible:
            implausible[key] = implausible.get(key, 0) + 1
    summary = {
        "gauges": len(results),
        "computed": len(results) - skipped,
        "flagged": flagged,
        "skipped": skipped,
        "failed": failed,
        "implausible": implausible,
        "plausibility": _plausibility_line(implausible, len(results)),
    }
    if tally is not None:
        summary.update(
            {
                "with_record": tally.matched,
                "unmatched": len(tally.unmatched),
                "unmatched_ids": tally.unmatched[:5],
                "unmatched_all": tally.unmatched[:10_000],
            }
        )
    return summary


def _plausibility_line(implausible, gauges):
    """One line for the run's summary when most gauges (more than half, and at least 2) fail
    the same plausibility check, e.g. ``5 of 6 gauges have a mean flow depth above what rivers
    carry: check the discharge units (--units / UNITS)``: a fault of the whole input (most
    often its units) rather than of a gauge. The check failed by the most gauges is named
    (the first in :data:`PLAUSIBILITY_CHECKS` on a tie); empty when there is none."""
    most = [
        (count, -order, key)
        for order, key in enumerate(PLAUSIBILITY_CHECKS)
        if (count := implausible.get(key, 0)) >= 2 and count > gauges / 2
    ]
    if not most:
        return ""
    count, _, key = max(most)
    return f"{count} of {gauges} gauges {PLAUSIBILITY_CHECKS[key]}"


def _some(ids, total, shown=3):
    """A few ids and how many there are: ``'a', 'b', 'c' … (12)``."""
    text = ", ".join(quoted(i) for i in ids[:shown])
    return text + (f" … ({total})" if total > shown else "")


def require_records(result: AtlasResult) -> None:
    """Raise :class:`InputError` when no gauge of the run has a row in the discharge table,
    or none has a single usable value.

    The run itself goes on in those cases (every gauge flagged "no discharge record" or "no
    usable discharge values"), so a script can still look at its links; the command line and
    the QGIS algorithms call this before writing anything, as a result without any hydrology is
    almost always a wrong field, or a gauge id written differently in the two files (``0123``
    and ``123``).
    """
    problem = _records_problem(result.summary, result.gauges, result.settings)
    if problem is not None:
        raise problem


def _records_problem(summary, gauges, settings):
    """The :class:`InputError` :func:`require_records` raises for a run, or None. The runs
    check it before their per-gauge cautions: when the run is going to stop, the error is
    said alone, not after a caution for every gauge."""
    if summary.get("with_record") and not summary.get("computed") and not summary.get("failed"):
        return InputError(
            "no gauge has a usable discharge value: the field is empty (or holds only missing "
            "values) in every row",
            field=settings.value_field if settings is not None else None,
        )
    if summary.get("with_record", 1) or not summary.get("gauges"):
        return None
    if summary.get("unmatched"):
        theirs = _some(summary["unmatched_ids"], summary["unmatched"])
        ours = _some(list(gauges), len(gauges))
        message = (
            f"no gauge id of the discharge table matches the gauges layer: "
            f"the table has {theirs}, the layer {ours}"
        ) + _id_hint(summary.get("unmatched_all", summary["unmatched_ids"]), list(gauges))
    else:
        message = "the discharge table holds no row with a gauge id and a readable date"
    field = settings.discharge_gauge_field if settings is not None else None
    return InputError(message, field=field)


#: Ways two spellings of one gauge id commonly differ, and how to make them alike.
_ID_DIFFERENCES = (
    ("leading zeros", lambda text: text.lstrip("0") or "0"),
    ("letter case", str.casefold),
    ("spaces", lambda text: "".join(text.split())),
)


def _id_hint(theirs, ours) -> str:
    """``'; they match when leading zeros are ignored (...)'`` when ignoring one or more of
    :data:`_ID_DIFFERENCES` makes some ids of the two sides meet; empty otherwise."""
    ours = [str(g) for g in ours]
    theirs = [str(g) for g in theirs]
    for size in (1, 2, 3):
        for chosen in itertools.combinations(_ID_DIFFERENCES, size):

            def alike(text, chosen=chosen):
                for _, change in chosen:
                    text = change(text)
                return text

            if {alike(g) for g in ours} & {alike(g) for g in theirs}:
                words = " and ".join(name for name, _ in chosen)
                advice = (
                    "; ids read as numbers lose their leading zeros: keep the column as text"
                    if chosen[0][0] == "leading zeros"
                    else ""
                )
                verb = "is" if words == "letter case" else "are"
                return f"; some match when {words} {verb} ignored{advice}"
    return ""


def _summary_text(summary):
    text = f"{summary['gauges']} gauges: {summary['computed']} computed ({summary['flagged']} flagged), {summary['skipped']} skipped"
    if summary["failed"]:
        text += f" ({summary['failed']} of them failed)"
    return text


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


def _stack(results, name, share=True):
    """One table of every gauge's rows of table ``name``, led by ``gauge_id`` (with ``share``
    the gauges' tables become views of it, see :func:`tables.stack`)."""
    order = GAUGE_TABLES[name]
    return stack(
        [r.table(name) for r in results.values()], list(results), "gauge_id", order, share=share
    )
