"""Sums by water year and by month or season, the water balance, and means over complete years.

How the annual terms fit together (all in mm over the drainage area, or m³):

* ``recharge`` — the sum of the year's event recharge by recession-curve displacement
  (Rorabaugh 1964), events counted in the water year of their peak;
* ``baseflow`` — groundwater discharge to the stream during the year, from baseflow separation;
* ``storage_change`` — the change in total potential groundwater discharge V = Q_b K / ln 10
  from the first to the last day of the year (Rorabaugh 1964): positive when the aquifer ends
  the year fuller than it began;
* ``residual = recharge − baseflow − storage_change`` — what the aquifer water balance does not
  explain: evapotranspiration from the water table, underflow, and the errors of each term. Over
  many years storage change averages out, so mean recharge ≈ mean baseflow + mean residual;
* ``seasonal_recharge`` — recharge by the seasonal recession method (Meyboom 1961): the total
  potential groundwater discharge at the start of the year's seasonal recession minus what
  remained at the end of the previous year's. Seasonal recessions are read on the baseflow: each
  ends on the water year's lowest day and the next starts at the highest baseflow after it. The
  method ignores groundwater discharged during the recharge season itself, so it is a lower
  bound, far below the event sum where K is short next to the wet season.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .recession import potential_groundwater_discharge_m3
from .tables import empty_table

#: A period is complete when at most this share of its days lacks a value (our own rule).
MAX_MISSING_SHARE = 0.02

#: Columns of the annual table that always exist, in order.
ANNUAL_COLUMNS = [
    "water_year",
    "recharge_mm",
    "recharge_m3",
    "complete",
    "recharge_low_mm",
    "recharge_high_mm",
    "baseflow_mm",
    "baseflow_m3",
    "storage_change_mm",
    "storage_change_m3",
    "residual_mm",
    "seasonal_recharge_mm",
    "flow_mm",
    "baseflow_index",
    "days",
    "days_missing",
    "events",
    "events_skipped",
]

#: Columns of the table of months or seasons.
PERIOD_COLUMNS = [
    "water_year",
    "period",
    "first_date",
    "last_date",
    "recharge_mm",
    "recharge_m3",
    "complete",
    "days_missing",
    "events",
    "events_skipped",
]

#: Labels of the seasons (months of each, December to February first).
SEASONS = ("Dec-Feb", "Mar-May", "Jun-Aug", "Sep-Nov")


def water_year(dates, start_month=10):
    """Water year of each date, named by the calendar year in which it ends.

    With ``start_month=10`` the water year 2024 runs from 1 October 2023 to 30 September 2024
    (the usual convention). With ``start_month=1`` it is the calendar year.

    Examples
    --------
    >>> list(water_year(pd.to_datetime(["2023-09-30", "2023-10-01"]), 10))
    [2023, 2024]
    """
    if not 1 <= int(start_month) <= 12:
        raise ValueError(f"water year start month was {start_month!r}; expected 1 to 12")
    d = pd.DatetimeIndex(dates)
    shift = (d.month >= int(start_month)) & (int(start_month) > 1)
    return np.asarray(d.year + shift.astype(int), dtype=int)


def water_year_bounds(year, start_month=10):
    """First and last day of a water year."""
    start_month = int(start_month)
    first = pd.Timestamp(year=int(year) - (1 if start_month > 1 else 0), month=start_month, day=1)
    last = first + pd.DateOffset(years=1) - pd.Timedelta(days=1)
    return first, last


def _mm(volume_m3, area_km2):
    if area_km2 is None or not np.isfinite(area_km2) or area_km2 <= 0:
        return np.nan
    return volume_m3 / (area_km2 * 1e3)


def _event_sums(events, labels, label_of_event, column="recharge_m3"):
    """Sum of measured event volumes and counts of events and skipped events per label."""
    if events is None or not len(events):
        zeros = pd.Series(0.0, index=labels)
        return zeros, zeros.astype(int), zeros.astype(int)
    used = events["used"].to_numpy(bool)
    volume = np.where(used, events[column].to_numpy(float), 0.0)
    frame = pd.DataFrame({"label": label_of_event, "volume": volume, "skipped": ~used})
    grouped = frame.groupby("label")
    sums = grouped["volume"].sum().reindex(labels, fill_value=0.0)
    counts = grouped.size().reindex(labels, fill_value=0).astype(int)
    skipped = grouped["skipped"].sum().reindex(labels, fill_value=0).astype(int)
    return sums, counts, skipped


def annual_recharge(
    flow,
    events,
    area_km2,
    start_month=10,
    max_missing_share=MAX_MISSING_SHARE,
    *,
    baseflow=None,
    recession_index_days=None,
    events_low=None,
    events_high=None,
):
    """Recharge and water-balance terms by water year, with each year's completeness.

    Parameters
    ----------
    flow : pandas.Series
        Daily flow (m³/s) on a complete daily index (NaN for missing days).
    events : pandas.DataFrame
        Event table from :func:`displacement.event_displacements`.
    area_km2 : float
        Drainage area (NaN leaves depths empty).
    start_month : int
        First month of the water year.
    baseflow : array_like, optional
        Daily baseflow (m³/s) on the same days; gives baseflow, storage change and residual.
    recession_index_days : float, optional
        K, for storage change and (with ``baseflow``) the seasonal recession method.
    events_low, events_high : pandas.DataFrame, optional
        Event tables computed with the low and high ends of the K interval.

    Returns
    -------
    pandas.DataFrame
        :data:`ANNUAL_COLUMNS`. A year is complete when it lies wholly inside the record, at
        most ``max_missing_share`` of its days lack a value, and no event in it was skipped.
        Terms that could not be computed are NaN.
    """
    if flow.empty:
        return empty_table(ANNUAL_COLUMNS)
    years_of_days = water_year(flow.index, start_month)
    years = np.arange(years_of_days.min(), years_of_days.max() + 1)
    q = flow.to_numpy(dtype=float)
    present = (
        pd.Series(np.isfinite(q))
        .groupby(years_of_days)
        .agg(["size", "sum"])
        .reindex(years, fill_value=0)
    )
    seconds = 86400.0
    flow_m3 = (
        pd.Series(np.where(np.isfinite(q), q, 0.0) * seconds)
        .groupby(years_of_days)
        .sum()
        .reindex(years, fill_value=0.0)
    )

    ev_label = water_year(events["peak_date"], start_month) if len(events) else np.empty(0, int)
    recharge, n_events, skipped = _event_sums(events, years, ev_label)
    low = high = None
    if events_low is not None and len(events_low):
        low = _event_sums(events_low, years, water_year(events_low["peak_date"], start_month))[0]
    if events_high is not None and len(events_high):
        high = _event_sums(events_high, years, water_year(events_high["peak_date"], start_month))[0]

    lengths = np.array(
        [
            (water_year_bounds(y, start_month)[1] - water_year_bounds(y, start_month)[0]).days + 1
            for y in years
        ]
    )
    in_record = present["size"].to_numpy()
    with_value = present["sum"].to_numpy()
    missing = lengths - with_value
    complete = (
        (in_record == lengths)
        & (missing <= max_missing_share * lengths)
        & (skipped.to_numpy() == 0)
    )

    table = pd.DataFrame(
        {
            "water_year": years.astype(int),
            "recharge_m3": recharge.to_numpy(),
            "complete": complete.astype(bool),
            "days": lengths.astype(int),
            "days_missing": missing.astype(int),
            "events": n_events.to_numpy(),
            "events_skipped": skipped.to_numpy(),
        }
    )
    table["recharge_mm"] = _mm(table["recharge_m3"], area_km2)
    table["recharge_low_mm"] = _mm(low.to_numpy(), area_km2) if low is not None else np.nan
    table["recharge_high_mm"] = _mm(high.to_numpy(), area_km2) if high is not None else np.nan
    table["flow_mm"] = _mm(flow_m3.to_numpy(), area_km2)

    k = (
        recession_index_days
        if recession_index_days is not None and np.isfinite(recession_index_days)
        else None
    )
    if baseflow is not None:
        b = np.asarray(baseflow, dtype=float)
        both = np.isfinite(b) & np.isfinite(q)
        base_m3 = (
            pd.Series(np.where(both, b, 0.0) * seconds)
            .groupby(years_of_days)
            .sum()
            .reindex(years, fill_value=0.0)
        )
        flow_both = (
            pd.Series(np.where(both, q, 0.0) * seconds)
            .groupby(years_of_days)
            .sum()
            .reindex(years, fill_value=0.0)
        )
        table["baseflow_m3"] = base_m3.to_numpy()
        with np.errstate(invalid="ignore", divide="ignore"):
            table["baseflow_index"] = np.where(flow_both > 0, base_m3 / flow_both, np.nan)
        if k is not None:
            table["storage_change_m3"] = _storage_change(flow.index, b, k, years, start_month)
    for name in ("baseflow_m3", "baseflow_index", "storage_change_m3"):
        if name not in table:
            table[name] = np.nan
    table["baseflow_mm"] = _mm(table["baseflow_m3"], area_km2)
    table["storage_change_mm"] = _mm(table["storage_change_m3"], area_km2)
    table["residual_mm"] = table["recharge_mm"] - table["baseflow_mm"] - table["storage_change_mm"]
    if k is not None and baseflow is not None:
        seasonal = _seasonal_recession(flow.index, baseflow, k, years, start_month)
    else:
        seasonal = np.full(years.size, np.nan)
    table["seasonal_recharge_mm"] = _mm(seasonal, area_km2)
    return table[ANNUAL_COLUMNS]


def _storage_change(index, baseflow, k, years, start_month):
    """V at each water year's last day minus V at its first day (NaN if either is unknown)."""
    out = np.full(years.size, np.nan)
    position = pd.Series(np.arange(index.size), index=index)
    for i, year in enumerate(years):
        first, last = water_year_bounds(year, start_month)
        if first in position.index and last in position.index:
            b0, b1 = baseflow[position[first]], baseflow[position[last]]
            out[i] = potential_groundwater_discharge_m3(b1, k) - potential_groundwater_discharge_m3(
                b0, k
            )
    return out


def _seasonal_recession(index, baseflow, k, years, start_month):
    """Recharge by the seasonal recession method (Meyboom 1961), m³ per water year.

    Each water year's seasonal recession ends on its day of lowest baseflow. The next seasonal
    recession starts at the highest baseflow between that day and the following year's lowest
    day. Recharge of year y = V at that start minus V at the end of year y − 1's recession, with
    V = Q K / ln 10 (total potential groundwater discharge).
    """
    out = np.full(years.size, np.nan)
    b = np.asarray(baseflow, dtype=float)
    wy = water_year(index, start_month)
    lowest = {}
    for year in years:
        here = np.flatnonzero((wy == year) & np.isfinite(b))
        if here.size:
            lowest[year] = here[np.argmin(b[here])]
    for i, year in enumerate(years):
        if year in lowest and year - 1 in lowest:
            t0, t1 = lowest[year - 1], lowest[year]
            between = b[t0 : t1 + 1]
            if t1 > t0 and np.isfinite(between).any():
                top = np.nanmax(between)
                out[i] = potential_groundwater_discharge_m3(
                    top, k
                ) - potential_groundwater_discharge_m3(b[t0], k)
    return out


def period_recharge(
    flow, events, area_km2, kind="month", start_month=10, max_missing_share=MAX_MISSING_SHARE
):
    """Recharge by month or by season (of the peak date), with completeness.

    Parameters
    ----------
    kind : {"month", "season"}
        Months are labelled ``YYYY-MM``; seasons are Dec-Feb, Mar-May, Jun-Aug and Sep-Nov.

    Returns
    -------
    pandas.DataFrame
        ``water_year, period, first_date, last_date, recharge_mm, recharge_m3, complete,
        days_missing, events, events_skipped``.
    """
    columns = PERIOD_COLUMNS
    if kind not in ("month", "season"):
        raise ValueError(f"period kind was {kind!r}; expected 'month' or 'season'")
    if flow.empty:
        return empty_table(columns)
    freq = "M" if kind == "month" else "Q-NOV"
    day_period = flow.index.to_period(freq)
    periods = pd.period_range(day_period.min(), day_period.max(), freq=freq)
    q = flow.to_numpy(dtype=float)
    # Group on the periods' integer ordinals: boxing Period objects is slow.
    ordinals = periods.asi8
    present = (
        pd.Series(np.isfinite(q))
        .groupby(day_period.asi8)
        .agg(["size", "sum"])
        .reindex(ordinals, fill_value=0)
    )
    ev_period = (
        pd.DatetimeIndex(events["peak_date"]).to_period(freq).asi8
        if len(events)
        else np.empty(0, dtype=np.int64)
    )
    recharge, n_events, skipped = _event_sums(events, ordinals, ev_period)
    first = periods.start_time.normalize()
    last = periods.end_time.normalize()
    lengths = (last - first).days + 1
    missing = lengths - present["sum"].to_numpy()
    complete = (
        (present["size"].to_numpy() == lengths)
        & (missing <= max_missing_share * lengths)
        & (skipped.to_numpy() == 0)
    )
    if kind == "month":
        labels = [p.strftime("%Y-%m") for p in periods]
    else:
        labels = [SEASONS[(p.start_time.month % 12) // 3] for p in periods]
    table = pd.DataFrame(
        {
            "water_year": water_year(first, start_month),
            "period": labels,
            "first_date": first,
            "last_date": last,
            "recharge_m3": recharge.to_numpy(),
            "complete": complete.astype(bool),
            "days_missing": missing.astype(int),
            "events": n_events.to_numpy(),
            "events_skipped": skipped.to_numpy(),
        }
    )
    table["recharge_mm"] = _mm(table["recharge_m3"], area_km2)
    return table[columns]


def mean_annual(annual: pd.DataFrame, column="recharge_mm"):
    """Mean of ``column`` over complete water years (NaN when there are none)."""
    complete = annual[annual["complete"].astype(bool)]
    if complete.empty:
        return np.nan
    return float(complete[column].mean())
