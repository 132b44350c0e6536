"""The hydrology of one gauge (:func:`gauge_hydrology`): rises, the recession index, the
record's runoff-end lag, composite events, displacement at K and its interval, baseflow,
water years and their means, the band and the trend; then its quality (:mod:`quality`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from . import annual as annual_mod
from .baseflow import baseflow_index, separate_baseflow
from .discharge import GaugeRecord
from .displacement import (
    CleanDays,
    _displacements,
    compose_events,
    event_columns,
    event_columns_at,
    recession_rises,
)
from .quality import _record_quality
from .recession import (
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
from .results import EVENT_COLUMNS_WITH_DEPTH, GaugeResult
from .rises import find_rises, log_flow, noise_level, rise_threshold
from .settings import Settings
from .tables import ColumnTable
from .trends import recharge_trend


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
    clean = CleanDays(x)  # the nearest usable days, for every reading of the events
    lag, lag_note = _checked_lag(x, rises, lag, given, recession, settings, noise, clean)
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


class _PowersOfTen:
    """``10**x`` of the days asked for only (the displacement reads the flow on a few anchor
    days; the same numbers as indexing ``10.0**x``, at a fraction of the cost)."""

    def __init__(self, x):
        self.x = x

    def __getitem__(self, days):
        return 10.0 ** self.x[days]


def _typical_displacement(x, rises, k, lag, clean=None):
    """The median ``log10(Q2/Q1)`` of the record's measured events at ``k`` and ``lag``."""
    with np.errstate(invalid="ignore", over="ignore"):
        parts = _displacements(_PowersOfTen(x), x, rises, k, lag, None, clean, notes=False)
        ratio = np.log10(parts["q2"] / parts["q1"])[parts["used"]]
    ratio = ratio[np.isfinite(ratio)]
    return float(np.median(ratio)) if ratio.size else np.nan


def _checked_lag(x, rises, lag, given_k, recession, settings, noise=None, clean=None):
    """The runoff-end lag checked on the record's own hydrographs (see
    :func:`recession.settling_days`): ``(lag, note)``. Where runoff clearly lasts longer than
    the lag, the record's settling time is returned with a note saying so, unless the user set
    the lag (then the lag stays and the note flags it)."""
    k = float(given_k) if given_k is not None else recession.days
    if not np.isfinite(k) or k <= 0:
        return lag, ""
    settled = settling_days(
        x, rises, k, lag, noise, displacement=_typical_displacement(x, rises, k, lag, clean)
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
