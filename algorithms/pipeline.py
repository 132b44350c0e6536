"""The one pipeline behind the command line and every Processing algorithm.

``run_atlas`` takes the gauges, the catchments and the long discharge table as pandas/geopandas
objects, and returns an :class:`AtlasResult` with the catchments layer, the annual table and
the event table. The CLI and the QGIS plugin are thin shells around it, so both give the same
numbers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from . import annual as annual_mod
from .basins import geodesic_area_km2, link_by_id
from .discharge import GaugeRecord, gauge_id_text, require_columns, tidy_discharge
from .displacement import event_displacements
from .errors import Cancelled, InputError
from .recession import (
    RecessionIndex,
    critical_time_days,
    estimate_recession_index,
    recession_warnings,
    runoff_end_lag_days,
)
from .rises import find_rises, log_flow, rise_threshold
from .units import canonical_units

#: Fields added to the catchments layer, in order.
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
    "recharge_m3_per_year",
    "complete_years",
    "events",
    "quality",
]


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
    min_segment_days : int
        Shortest recession segment used for the recession index.
    recession_index_days : float or None
        Use this K for every gauge instead of estimating it.
    min_complete_years : int
        Fewer complete water years than this is flagged in ``quality``.
    """

    units: str = "m3/s"
    water_year_start: int = 10
    gauge_id_field: str = "gauge_id"
    discharge_gauge_field: str | None = None
    date_field: str = "date"
    value_field: str = "discharge"
    catchment_gauge_field: str | None = None
    min_segment_days: int = 7
    recession_index_days: float | None = None
    min_complete_years: int = 5

    def resolved(self) -> Settings:
        """A copy with defaults filled in and values checked."""
        units = canonical_units(self.units)
        try:
            month = int(self.water_year_start)
        except (TypeError, ValueError):
            month = 0
        if not 1 <= month <= 12 or float(self.water_year_start) != month:
            raise InputError(
                f"water year start was {self.water_year_start!r}; expected a month number 1 to 12"
            )
        if self.recession_index_days is not None and not (
            math.isfinite(float(self.recession_index_days)) and float(self.recession_index_days) > 0
        ):
            raise InputError(
                f"recession index was {self.recession_index_days!r}; expected a positive number of days"
            )
        return replace(
            self,
            units=units,
            water_year_start=month,
            discharge_gauge_field=self.discharge_gauge_field or self.gauge_id_field,
            catchment_gauge_field=self.catchment_gauge_field or self.gauge_id_field,
        )


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
        """A caution about one gauge or catchment; the run goes on."""


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
    events : pandas.DataFrame
        One row per event (see :mod:`displacement`), with ``recharge_mm``.
    annual : pandas.DataFrame
        One row per water year.
    recharge_mm_per_year, recharge_m3_per_year : float
        Means over complete water years.
    complete_years : int
    quality : list of str
        Problems in words; empty when all is well.
    """

    gauge_id: str
    area_km2: float
    lag_days: float = np.nan
    rise_threshold: float = np.nan
    recession: RecessionIndex | None = None
    events: pd.DataFrame = field(default_factory=pd.DataFrame, repr=False)
    annual: pd.DataFrame = field(default_factory=pd.DataFrame, repr=False)
    recharge_mm_per_year: float = np.nan
    recharge_m3_per_year: float = np.nan
    complete_years: int = 0
    quality: list = field(default_factory=list)

    @property
    def quality_text(self) -> str:
        return "; ".join(self.quality) if self.quality else "ok"


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
    gauges : dict of str to GaugeResult
    summary : dict
        Counts of gauges computed, flagged and failed.
    """

    catchments: object
    annual: pd.DataFrame
    events: pd.DataFrame
    gauges: dict
    summary: dict

    def __repr__(self):
        s = self.summary
        return (
            f"AtlasResult({s.get('gauges', 0)} gauges: {s.get('computed', 0)} computed, "
            f"{s.get('flagged', 0)} flagged, {s.get('failed', 0)} failed; "
            f"{len(self.annual)} annual rows, {len(self.events)} events)"
        )


def gauge_hydrology(record: GaugeRecord, area_km2: float, settings: Settings) -> GaugeResult:
    """Recession index, events, displacement and water-year sums for one gauge.

    ``area_km2`` sets the runoff-end lag and turns volumes into depths; with NaN the volumes
    are still computed (the lag then defaults to that of a 100 km² basin and is flagged).
    """
    settings = settings.resolved()
    result = GaugeResult(record.gauge_id, float(area_km2))
    flow = record.flow
    quality = result.quality
    if flow.empty or record.days_with_value == 0:
        quality.append("no usable discharge values")
        return result
    has_area = np.isfinite(area_km2) and area_km2 > 0
    lag = float(runoff_end_lag_days(area_km2 if has_area else 100.0))
    x = log_flow(flow.to_numpy())
    threshold = rise_threshold(x)
    rises = find_rises(x, lag, threshold)
    result.lag_days, result.rise_threshold = lag, threshold

    if settings.recession_index_days is not None:
        k = float(settings.recession_index_days)
        recession = RecessionIndex(
            k, np.nan, np.nan, 0, source="given", warnings=recession_warnings(k)
        )
    else:
        recession = estimate_recession_index(x, rises, lag, settings.min_segment_days)
    result.recession = recession
    quality.extend(recession.warnings)

    events = event_displacements(flow, x, rises, recession.days, lag)
    events.insert(0, "event", np.arange(1, len(events) + 1))
    events["recharge_mm"] = events["recharge_m3"] / (area_km2 * 1e3) if has_area else np.nan
    result.events = events
    annual = annual_mod.annual_recharge(
        flow, events, area_km2 if has_area else np.nan, settings.water_year_start
    )
    result.annual = annual
    result.complete_years = int(annual["complete"].sum()) if len(annual) else 0
    result.recharge_m3_per_year = annual_mod.mean_annual(annual, "recharge_m3")
    result.recharge_mm_per_year = (
        annual_mod.mean_annual(annual, "recharge_mm") if has_area else np.nan
    )
    quality.extend(_record_quality(record, result, settings))
    return result


def _record_quality(record: GaugeRecord, result: GaugeResult, settings: Settings):
    notes = []
    missing_share = 1.0 - record.days_with_value / max(record.days, 1)
    if missing_share > 0.05:
        notes.append(f"{100 * missing_share:.0f}% of days in the record have no value")
    if result.complete_years == 0:
        notes.append("no complete water year: mean annual recharge not computed")
    elif result.complete_years < settings.min_complete_years:
        notes.append(
            f"only {result.complete_years} complete water years (fewer than {settings.min_complete_years})"
        )
    events = result.events
    if len(events):
        skipped = int((~events["used"].astype(bool)).sum())
        if skipped > 0.1 * len(events):
            notes.append(f"{skipped} of {len(events)} events could not be measured")
    return notes


def run_atlas(
    gauges,
    catchments,
    discharge: pd.DataFrame,
    settings: Settings | None = None,
    reporter: Reporter | None = None,
) -> AtlasResult:
    """Estimate recharge for every gauge and attach it to the catchments.

    Parameters
    ----------
    gauges : pandas.DataFrame or geopandas.GeoDataFrame
        One row per gauge with the gauge id field.
    catchments : geopandas.GeoDataFrame
        Catchment polygons with a gauge id field (total drainage area of each gauge).
    discharge : pandas.DataFrame
        Long table of gauge id, date and value.
    settings : Settings, optional
    reporter : Reporter, optional
        Receives progress, cancel checks and per-gauge warnings.

    Returns
    -------
    AtlasResult

    Notes
    -----
    One gauge that fails never stops the run: it is reported, flagged in ``quality`` and
    counted as failed.
    """
    settings = (settings or Settings()).resolved()
    reporter = reporter or Reporter()
    require_columns(gauges, [settings.gauge_id_field], "gauges layer")
    require_columns(catchments, [settings.catchment_gauge_field], "catchments layer")
    gauge_ids = [
        g
        for g in dict.fromkeys(gauge_id_text(gauges[settings.gauge_id_field].to_numpy()))
        if g is not None
    ]
    if not gauge_ids:
        raise InputError("the gauges layer holds no gauge ids", field=settings.gauge_id_field)
    records = tidy_discharge(
        discharge,
        gauge_field=settings.discharge_gauge_field,
        date_field=settings.date_field,
        value_field=settings.value_field,
        units=settings.units,
    )
    areas = geodesic_area_km2(catchments.geometry)
    links = link_by_id(gauge_ids, catchments, settings.catchment_gauge_field)
    for gid in links.unlinked:
        reporter.warning(f"gauge {gid}: no catchment carries this gauge id")
    for gid, rows in links.several.items():
        reporter.warning(
            f"gauge {gid}: {len(rows)} catchments carry this gauge id; depths not computed"
        )

    results: dict[str, GaugeResult] = {}
    failed = 0
    total = len(gauge_ids)
    for done, gid in enumerate(gauge_ids):
        if reporter.cancelled():
            raise Cancelled("run cancelled")
        reporter.progress(done, total, gid)
        row = links.catchment_of.get(gid)
        area = float(areas[row]) if row is not None else np.nan
        record = records.get(gid)
        if record is None:
            result = GaugeResult(gid, area, quality=["no discharge record for this gauge"])
        else:
            try:
                result = gauge_hydrology(record, area, settings)
            except Exception as exc:  # one bad gauge never spoils the run
                failed += 1
                reporter.warning(f"gauge {gid}: could not be computed ({exc})")
                result = GaugeResult(gid, area, quality=[f"could not be computed: {exc}"])
        if row is None:
            result.quality.insert(0, "no single catchment linked: depths not computed")
        results[gid] = result
        if result.quality:
            reporter.warning(f"gauge {gid}: {result.quality_text}")
    reporter.progress(total, total, None)
    unknown = sorted(set(records) - set(gauge_ids))
    if unknown:
        shown = ", ".join(unknown[:5]) + (" …" if len(unknown) > 5 else "")
        reporter.warning(f"{len(unknown)} gauge ids in the discharge table match no gauge: {shown}")

    out = _catchment_layer(catchments, areas, links, results, settings)
    annual = _stack(results, "annual")
    events = _stack(results, "events")
    flagged = sum(1 for r in results.values() if r.quality)
    summary = {
        "gauges": total,
        "computed": total - failed,
        "flagged": flagged,
        "failed": failed,
        "catchments": len(catchments),
        "catchments_without_gauge": len(links.without_gauge),
    }
    reporter.info(
        f"{total} gauges: {total - failed} computed ({flagged} flagged), {failed} failed; "
        f"{len(links.without_gauge)} catchments without a gauge"
    )
    return AtlasResult(out, annual, events, results, summary)


def _catchment_layer(catchments, areas, links, results, settings):
    out = catchments.copy()
    ids = list(gauge_id_text(catchments[settings.catchment_gauge_field].to_numpy()))
    gauge_of_row = {row: gid for gid, row in links.catchment_of.items()}
    for gid, rows in links.several.items():
        for row in rows:
            gauge_of_row[row] = gid
    columns = {name: [] for name in CATCHMENT_FIELDS}
    for row in range(len(out)):
        gid = gauge_of_row.get(row)
        r = results.get(gid) if gid is not None else None
        k = r.recession if r is not None and r.recession is not None else None
        columns["gauge_id"].append(gid if gid is not None else ids[row])
        columns["area_km2"].append(float(areas[row]))
        columns["recession_index_days"].append(k.days if k else np.nan)
        columns["recession_index_low"].append(k.low if k else np.nan)
        columns["recession_index_high"].append(k.high if k else np.nan)
        columns["recession_segments"].append(k.segments_used if k else 0)
        columns["critical_time_days"].append(float(critical_time_days(k.days)) if k else np.nan)
        columns["runoff_end_lag_days"].append(
            float(runoff_end_lag_days(areas[row])) if np.isfinite(areas[row]) else np.nan
        )
        columns["recharge_mm_per_year"].append(r.recharge_mm_per_year if r else np.nan)
        columns["recharge_m3_per_year"].append(r.recharge_m3_per_year if r else np.nan)
        columns["complete_years"].append(r.complete_years if r else 0)
        columns["events"].append(
            int(r.events["used"].sum()) if r is not None and len(r.events) else 0
        )
        if r is not None:
            quality = r.quality_text
            if gid in links.several:
                quality = f"{len(links.several[gid])} catchments carry gauge {gid}; " + quality
        elif gid is None and ids[row] is not None:
            quality = f"gauge {ids[row]} is not in the gauges layer"
        else:
            quality = "no gauge linked to this catchment"
        columns["quality"].append(quality)
    for name in CATCHMENT_FIELDS:
        if name in out.columns and name != "gauge_id":
            out = out.drop(columns=name)
        out[name] = columns[name]
    geometry_name = out.geometry.name
    order = [
        c for c in out.columns if c != geometry_name and c not in CATCHMENT_FIELDS
    ] + CATCHMENT_FIELDS
    out = out[order + [geometry_name]]
    out["recession_segments"] = out["recession_segments"].astype("int64")
    out["complete_years"] = out["complete_years"].astype("int64")
    out["events"] = out["events"].astype("int64")
    return out


def _stack(results, attribute):
    frames = []
    for gid, result in results.items():
        frame = getattr(result, attribute)
        if frame is not None and len(frame):
            frame = frame.copy()
            frame.insert(0, "gauge_id", gid)
            frames.append(frame)
    if not frames:
        return pd.DataFrame({"gauge_id": pd.Series(dtype=object)})
    return pd.concat(frames, ignore_index=True)
