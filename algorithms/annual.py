"""Sums by water year and the mean annual recharge over complete years."""

from __future__ import annotations

import numpy as np
import pandas as pd

#: A water year is complete when at most this share of its days lacks a value (our own rule).
MAX_MISSING_SHARE = 0.02


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


def annual_recharge(flow, events, area_km2, start_month=10, max_missing_share=MAX_MISSING_SHARE):
    """Recharge by water year of the peak date, with each year's completeness.

    Parameters
    ----------
    flow : pandas.Series
        Daily flow on a complete daily index (NaN for missing days).
    events : pandas.DataFrame
        Event table from :func:`displacement.event_displacements`.
    area_km2 : float
        Drainage area.
    start_month : int
        First month of the water year.

    Returns
    -------
    pandas.DataFrame
        ``water_year, recharge_mm, recharge_m3, complete, days, days_missing, events,
        events_skipped``. A year is complete when it lies wholly inside the record, at most
        ``max_missing_share`` of its days lack a value, and no event in it was skipped.
    """
    columns = [
        "water_year",
        "recharge_mm",
        "recharge_m3",
        "complete",
        "days",
        "days_missing",
        "events",
        "events_skipped",
    ]
    if flow.empty:
        return pd.DataFrame({c: [] for c in columns})
    years_of_days = water_year(flow.index, start_month)
    years = np.arange(years_of_days.min(), years_of_days.max() + 1)
    days_present = pd.Series(flow.notna().to_numpy()).groupby(years_of_days).agg(["size", "sum"])
    ev_years = water_year(events["peak_date"], start_month) if len(events) else np.empty(0, int)
    used = events["used"].to_numpy(bool) if len(events) else np.empty(0, bool)
    volume = events["recharge_m3"].to_numpy(float) if len(events) else np.empty(0)
    rows = []
    for year in years:
        first, last = water_year_bounds(year, start_month)
        length = (last - first).days + 1
        in_record = int(days_present["size"].get(year, 0))
        with_value = int(days_present["sum"].get(year, 0))
        missing = length - with_value
        here = ev_years == year
        m3 = float(np.nansum(volume[here & used]))
        skipped = int((here & ~used).sum())
        complete = in_record == length and missing <= max_missing_share * length and skipped == 0
        rows.append(
            {
                "water_year": int(year),
                "recharge_mm": m3 / (area_km2 * 1e3) if area_km2 and area_km2 > 0 else np.nan,
                "recharge_m3": m3,
                "complete": bool(complete),
                "days": length,
                "days_missing": int(missing),
                "events": int(here.sum()),
                "events_skipped": skipped,
            }
        )
    return pd.DataFrame(rows, columns=columns)


def mean_annual(annual: pd.DataFrame, column="recharge_mm"):
    """Mean of ``column`` over complete water years (NaN when there are none)."""
    complete = annual[annual["complete"].astype(bool)]
    if complete.empty:
        return np.nan
    return float(complete[column].mean())
