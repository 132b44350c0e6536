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

Completeness counts the days the method can use. A day without a value, a day of zero flow
and a flagged day are all gaps to the method (log Q has no value there, so no rise, recession
or anchor can be read on them): ``days_missing`` counts all three, ``days_zero_or_flagged`` the
last two alone. The flow sums (``flow_mm``) still take every real value given, zero flow and
flagged days included (zero is a real flow; a flagged value is kept, just not used). Baseflow
is not computed on flagged days (the filters restart after them), so ``baseflow_mm`` and the
year's ``baseflow_index`` cover the days with both flow and baseflow.
"""

from __future__ import annotations

import functools

import numpy as np
import pandas as pd

from .recession import potential_groundwater_discharge_m3
from .tables import ColumnTable

#: A period is complete when at most this share of its days lacks a value the method can use
#: (missing, zero or flagged; our own rule).
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
    "days_zero_or_flagged",
    "events",
    "events_skipped",
    "all_events_measured",
    "recharge_between_events_mm",
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
    "days_zero_or_flagged",
    "events",
    "events_skipped",
    "close_events",
]

#: Labels of the seasons (months of each, December to February first).
SEASONS = ("Dec-Feb", "Mar-May", "Jun-Aug", "Sep-Nov")


def _days(dates):
    """Dates as numpy day numbers (datetime64[D]), from anything pandas reads as dates."""
    return np.asarray(pd.DatetimeIndex(dates).values, dtype="datetime64[D]")


def _check_month(start_month):
    if not 1 <= int(start_month) <= 12:
        raise ValueError(f"water year start month was {start_month!r}; expected 1 to 12")
    return int(start_month)


def _water_year_of_days(days, start_month):
    months = days.astype("datetime64[M]").astype(np.int64)  # months since 1970-01
    year = months // 12 + 1970
    month = months % 12 + 1
    return year + ((month >= start_month) & (start_month > 1))


def _first_day_of_water_year(years, start_month):
    """First day (datetime64[D]) of each water year."""
    months = (np.asarray(years, dtype=np.int64) - (1 if start_month > 1 else 0) - 1970) * 12 + (
        start_month - 1
    )
    return (np.datetime64("1970-01", "M") + months).astype("datetime64[D]")


@functools.lru_cache(maxsize=64)
def _day_slots(day0, n_days, kind, start_month):
    """For a record of ``n_days`` from day number ``day0``: the first period, each day's slot
    (position of its water year, month or season) and the days per slot in the record.

    Gauges of a network mostly share their dates, so this is worked out once per date range
    and kept (the arrays are read-only).
    """
    days = np.datetime64(day0, "D") + np.arange(n_days).astype("timedelta64[D]")
    if kind == "year":
        index = _water_year_of_days(days, start_month)
    else:
        months = days.astype("datetime64[M]").astype(np.int64)
        index = months if kind == "month" else (months + 1) // 3  # seasons start in December
    first = int(index[0])
    slot = (index - first).astype(np.intp)
    counts = np.bincount(slot)
    slot.setflags(write=False)
    counts.setflags(write=False)
    return first, slot, counts


def day_water_years(days, start_month=10):
    """Water year of each day of a record of consecutive days (datetime64[D]), as a read-only
    array (worked out once per date range and kept)."""
    if len(days) == 0:
        return np.empty(0, np.int64)
    start_month = _check_month(start_month)
    first, slot, _ = _day_slots(int(days[0].astype(np.int64)), len(days), "year", start_month)
    return slot  # positions of the water years from the first: labels enough to group by


@functools.lru_cache(maxsize=64)
def _water_year_calendar(first_year, n, start_month):
    """First days (and the day after the last) and lengths of ``n`` water years (kept)."""
    years = np.arange(first_year, first_year + n + 1)
    bounds = _first_day_of_water_year(years, start_month)
    lengths = np.diff(bounds).astype(int)
    bounds.setflags(write=False)
    lengths.setflags(write=False)
    return bounds, lengths


@functools.lru_cache(maxsize=64)
def _period_calendar(first_period, n, kind, start_month):
    """Labels, first and last days, lengths and water years of ``n`` months or seasons (kept)."""
    width = 1 if kind == "month" else 3
    periods = np.arange(first_period, first_period + n)
    first_month = periods * width - (0 if width == 1 else 1)
    bounds = (
        np.datetime64("1970-01", "M") + np.append(first_month, first_month[-1] + width)
    ).astype("datetime64[D]")
    first_dates = bounds[:-1]
    if width == 1:
        labels = np.datetime_as_string(first_dates.astype("datetime64[M]"))
    else:
        labels = np.array(SEASONS)[periods % 4]
    calendar = {
        "lengths": np.diff(bounds).astype(int),
        "water_year": _water_year_of_days(first_dates, start_month).astype(np.int64),
        "period": labels.astype(object),
        "first_date": first_dates.astype("datetime64[ns]"),
        "last_date": (bounds[1:] - np.timedelta64(1, "D")).astype("datetime64[ns]"),
    }
    for values in calendar.values():
        values.setflags(write=False)
    return calendar


def water_year(dates, start_month=10):
    """Water year of each date, named by the calendar year in which it ends.

    With ``start_month=10`` the water year 2024 runs from 1 October 2023 to 30 September 2024
    (the usual convention). With ``start_month=1`` it is the calendar year.

    Examples
    --------
    >>> list(water_year(pd.to_datetime(["2023-09-30", "2023-10-01"]), 10))
    [2023, 2024]
    """
    start_month = _check_month(start_month)
    return np.asarray(_water_year_of_days(_days(dates), start_month), dtype=int)


def water_year_bounds(year, start_month=10):
    """First and last day of a water year."""
    start_month = _check_month(start_month)
    first = _first_day_of_water_year([year], start_month)[0]
    last = _first_day_of_water_year([int(year) + 1], start_month)[0] - np.timedelta64(1, "D")
    return pd.Timestamp(first), pd.Timestamp(last)


def _mm(volume_m3, area_km2):
    if area_km2 is None or not np.isfinite(area_km2) or area_km2 <= 0:
        return np.full(np.shape(volume_m3), np.nan) if np.ndim(volume_m3) else np.nan
    return np.asarray(volume_m3, dtype=float) / (area_km2 * 1e3)


class _EventYears:
    """The slot (water year from ``first_year``) of each event's peak, for a table with
    ``peak_date``: worked out once per peak-date array. The events, the same events at both
    ends of K's interval and their reading errors share one such array."""

    def __init__(self, start_month, first_year):
        self.start_month, self.first_year = start_month, first_year
        self.known = []  # (peak dates as given, their slots): compared by identity

    def __call__(self, table):
        if table is None or not len(table):
            return np.empty(0, np.intp)
        peaks = table["peak_date"]
        for given, slots in self.known:
            if given is peaks:
                return slots
        days = np.asarray(peaks).astype("datetime64[D]")
        slots = (_water_year_of_days(days, self.start_month) - self.first_year).astype(np.intp)
        self.known.append((peaks, slots))
        return slots


def _event_sums(events, slot_of_event, n_slots):
    """Per slot: the sum of measured event volumes, the events, and the skipped events."""
    if events is None or not len(events):
        zeros = np.zeros(n_slots)
        return zeros, zeros.astype(int), zeros.astype(int)
    used = np.asarray(events["used"], dtype=bool)
    volume = np.where(used, np.asarray(events["recharge_m3"], dtype=float), 0.0)
    inside = (slot_of_event >= 0) & (slot_of_event < n_slots)
    slot = slot_of_event[inside]
    sums = np.bincount(slot, weights=volume[inside], minlength=n_slots)
    counts = np.bincount(slot, minlength=n_slots)
    skipped = np.bincount(slot, weights=(~used[inside]).astype(float), minlength=n_slots).astype(
        int
    )
    return sums, counts, skipped


def _reading_sums(reading, slot_of_event, n_slots):
    """Per slot: Σ|systematic| and Σ spread² of the measured events' reading errors (m³)."""
    if reading is None or not len(reading):
        return np.zeros(n_slots), np.zeros(n_slots)
    used = np.asarray(reading["used"], dtype=bool)
    inside = used & (slot_of_event >= 0) & (slot_of_event < n_slots)
    slot = slot_of_event[inside]
    systematic = np.abs(np.asarray(reading["systematic_m3"], dtype=float)[inside])
    spread = np.asarray(reading["spread_m3"], dtype=float)[inside]
    return (
        np.bincount(slot, weights=np.nan_to_num(systematic), minlength=n_slots),
        np.bincount(slot, weights=np.nan_to_num(spread) ** 2, minlength=n_slots),
    )


#: One-sided 95 % point of the normal distribution: the band runs from 5 to 95 %.
BAND_Z = 1.6448536269514722


def recharge_band(recharge, at_low_k, at_high_k, systematic=0.0, spread=0.0):
    """Low and high ends of a recharge band: K's interval and the reading error together.

    Parameters
    ----------
    recharge : array_like
        The estimate (one year's sum, or a mean).
    at_low_k, at_high_k : array_like
        The same recomputed with K at the two ends of its 90 % interval (either may be the
        larger: a longer K moves both Q1 and Q2).
    systematic : array_like
        Reading error that does not average out (Σ|ε R| over the events,
        :func:`recession.reading_error`), taken as a bound.
    spread : array_like
        One standard deviation of the reading error that is independent between events.

    Returns
    -------
    low, high : numpy.ndarray
        ``high = R + √(u² + h²)`` and ``low = R − √(d² + h²)``, with ``u`` and ``d`` how far
        the K ends take the estimate up and down (0 when neither does) and the reading error's
        half-width ``h = √((1.645 s)² + e²)`` (``s`` the spread, ``e`` the systematic part).
        The K error and the reading error are independent, so they add in quadrature (our own
        rule). ``low ≤ R ≤ high`` always; NaN where neither K end is known.
    """
    r = np.asarray(recharge, dtype=float)
    a = np.asarray(at_low_k, dtype=float)
    b = np.asarray(at_high_k, dtype=float)
    with np.errstate(invalid="ignore"):
        up = np.maximum(np.fmax(a - r, b - r), 0.0)
        down = np.maximum(np.fmax(r - a, r - b), 0.0)
    reading = np.hypot(BAND_Z * np.asarray(spread, float), np.asarray(systematic, float))
    return r - np.hypot(down, reading), r + np.hypot(up, reading)


def mean_recharge_band(
    annual,
    events_low,
    events_high,
    reading_error,
    start_month=10,
    area_km2=np.nan,
    years="complete",
):
    """The band of the mean annual recharge over the years marked in column ``years``.

    Notes
    -----
    K is one value for the whole record, so its error moves every year the same way: the K
    part of the mean's band comes from the means at the two K ends. The reading error is
    independent from year to year: its random part adds in quadrature over the years and is
    divided by their number (``s̄ = √(Σ s_y²) / n``); its systematic part is the mean of the
    years' (``ē = Σ e_y / n``). Then :func:`recharge_band` joins them (so the mean's band is
    narrower than the mean of the years' bands, as it should be). Returns ``(low, high)`` in
    mm over ``area_km2`` (m³ when ``area_km2`` is NaN), NaN when there are no such years or no
    K interval.
    """
    if not len(annual) or events_low is None or events_high is None:
        return np.nan, np.nan
    water_years = np.asarray(annual["water_year"], dtype=np.int64)
    n = water_years.size

    slots = _EventYears(start_month, water_years[0])
    recharge = np.asarray(annual["recharge_m3"], dtype=float)
    keep = np.asarray(annual[years], dtype=bool) & np.isfinite(recharge)
    if not keep.any():
        return np.nan, np.nan
    at_low = _event_sums(events_low, slots(events_low), n)[0]
    at_high = _event_sums(events_high, slots(events_high), n)[0]
    systematic, variance = _reading_sums(reading_error, slots(reading_error), n)
    count = keep.sum()
    low, high = recharge_band(
        recharge[keep].mean(),
        at_low[keep].mean(),
        at_high[keep].mean(),
        systematic[keep].sum() / count,
        np.sqrt(variance[keep].sum()) / count,
    )
    if np.isfinite(area_km2) and area_km2 > 0:
        return float(_mm(low, area_km2)), float(_mm(high, area_km2))
    return float(low), float(high)


def _per_slot(slot, values, n_slots):
    return np.bincount(slot, weights=values, minlength=n_slots)


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
    flagged=None,
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
    flagged : array_like of bool, optional
        Days flagged through a quality code: their flow counts in ``flow_mm`` but they are
        missing to the method.

    Returns
    -------
    pandas.DataFrame
        :data:`ANNUAL_COLUMNS`. A year is complete when it lies wholly inside the record, at
        most ``max_missing_share`` of its days lack a value the method can use (missing, zero
        or flagged days; ``days_missing``), and no event in it was skipped. Terms that could
        not be computed are NaN.
    """
    return annual_columns(
        _days(flow.index),
        flow.to_numpy(dtype=float),
        events,
        area_km2,
        start_month,
        max_missing_share,
        baseflow=baseflow,
        recession_index_days=recession_index_days,
        events_low=events_low,
        events_high=events_high,
        flagged=None if flagged is None else np.asarray(flagged, dtype=bool),
    ).frame()


def annual_columns(
    days,
    q,
    events,
    area_km2,
    start_month=10,
    max_missing_share=MAX_MISSING_SHARE,
    *,
    baseflow=None,
    recession_index_days=None,
    events_low=None,
    events_high=None,
    flagged=None,
    reading_error=None,
    between_events=None,
) -> ColumnTable:
    """:func:`annual_recharge` as columns, for flows ``q`` on the days ``days`` (datetime64[D]).

    ``events``, ``events_low`` and ``events_high`` need ``peak_date``, ``recharge_m3`` and
    ``used`` (a DataFrame, a :class:`tables.ColumnTable` or a dict of arrays); ``flagged``
    marks flagged days (see :func:`annual_recharge`). ``reading_error`` (``peak_date``,
    ``used``, ``systematic_m3``, ``spread_m3`` per event, from
    :func:`recession.reading_error`) joins the reading error of each year's events to the
    band ``recharge_low_mm``–``recharge_high_mm`` (see :func:`recharge_band`).
    ``between_events`` (``date`` and ``recharge_m3``, from
    :func:`displacement.recession_rises`) gives ``recharge_between_events_mm``, summed in the
    water year of each date (0 in a year without a pair, NaN when it is not given).
    """
    start_month = _check_month(start_month)
    if len(days) == 0:
        return ColumnTable.empty(ANNUAL_COLUMNS)
    first_year, slot, in_record = _day_slots(
        int(days[0].astype(np.int64)), len(days), "year", start_month
    )
    years = np.arange(first_year, first_year + in_record.size)
    n = years.size
    q = np.asarray(q, dtype=float)
    has_value = np.isfinite(q)
    seconds = 86400.0
    if has_value.all():  # no gap: the days with a value are the days in the record
        with_value = in_record.astype(float)
    else:
        with_value = np.bincount(slot, weights=has_value.astype(float), minlength=n)
    flow_m3 = _per_slot(slot, np.where(has_value, q, 0.0) * seconds, n)
    unusable = _unusable_days(q, has_value, flagged, slot, n)

    event_slots = _EventYears(start_month, first_year)
    recharge, n_events, skipped = _event_sums(events, event_slots(events), n)
    low = high = None
    if events_low is not None and len(events_low) and events_high is not None and len(events_high):
        at_low = _event_sums(events_low, event_slots(events_low), n)[0]
        at_high = _event_sums(events_high, event_slots(events_high), n)[0]
        systematic, variance = _reading_sums(reading_error, event_slots(reading_error), n)
        low, high = recharge_band(recharge, at_low, at_high, systematic, np.sqrt(variance))

    bounds, lengths = _water_year_calendar(first_year, n, start_month)
    missing = lengths - with_value.astype(int) + unusable
    # A year counts in the mean when its discharge record is complete; its events are then
    # measured one by one or as composites, and any left unmeasured are counted beside it.
    complete = (in_record == lengths) & (missing <= max_missing_share * lengths)

    nan = np.full(n, np.nan)
    base_m3, bfi, storage = nan, nan, nan
    k = (
        recession_index_days
        if recession_index_days is not None and np.isfinite(recession_index_days)
        else None
    )
    if baseflow is not None:
        b = np.asarray(baseflow, dtype=float)
        both = np.isfinite(b) & has_value
        base_m3 = _per_slot(slot, np.where(both, b, 0.0) * seconds, n)
        if np.count_nonzero(both) == np.count_nonzero(has_value):  # baseflow on every day
            flow_both = flow_m3  # with a flow value: the same sums
        else:
            flow_both = _per_slot(slot, np.where(both, q, 0.0) * seconds, n)
        with np.errstate(invalid="ignore", divide="ignore"):
            bfi = np.where(flow_both > 0, base_m3 / flow_both, np.nan)
        if k is not None:
            storage = _storage_change(days, b, k, bounds)
    seasonal = (
        _seasonal_recession(slot, baseflow, k, n, in_record)
        if k is not None and baseflow is not None
        else nan
    )
    between = nan
    if between_events is not None:
        dates = np.asarray(between_events["date"]).astype("datetime64[D]")
        where = (_water_year_of_days(dates, start_month) - first_year).astype(np.intp)
        inside = (where >= 0) & (where < n)
        between = np.bincount(
            where[inside], weights=np.asarray(between_events["recharge_m3"])[inside], minlength=n
        )
    recharge_mm = _mm(recharge, area_km2)
    baseflow_mm = _mm(base_m3, area_km2)
    storage_mm = _mm(storage, area_km2)
    table = ColumnTable(
        {
            "water_year": years.astype(np.int64),
            "recharge_mm": recharge_mm,
            "recharge_m3": recharge,
            "complete": complete.astype(bool),
            "recharge_low_mm": _mm(low, area_km2) if low is not None else nan,
            "recharge_high_mm": _mm(high, area_km2) if high is not None else nan,
            "baseflow_mm": baseflow_mm,
            "baseflow_m3": base_m3,
            "storage_change_mm": storage_mm,
            "storage_change_m3": storage,
            "residual_mm": recharge_mm - baseflow_mm - storage_mm,
            "seasonal_recharge_mm": _mm(seasonal, area_km2),
            "flow_mm": _mm(flow_m3, area_km2),
            "baseflow_index": bfi,
            "days": lengths.astype(np.int64),
            "days_missing": missing.astype(np.int64),
            "days_zero_or_flagged": unusable.astype(np.int64),
            "events": n_events.astype(np.int64),
            "events_skipped": skipped.astype(np.int64),
            "all_events_measured": complete & (skipped == 0),
            "recharge_between_events_mm": _mm(between, area_km2),
        },
        ANNUAL_COLUMNS,
    )
    return table


def _unusable_days(q, has_value, flagged, slot, n_slots):
    """Per slot, the days with a value that the method cannot use: zero (or negative) flow,
    or flagged."""
    with np.errstate(invalid="ignore"):
        unusable = has_value & (q <= 0.0)
    if flagged is not None:
        unusable |= has_value & np.asarray(flagged, dtype=bool)
    if not unusable.any():
        return np.zeros(n_slots, np.int64)
    return np.bincount(slot[unusable], minlength=n_slots).astype(np.int64)


def _storage_change(days, baseflow, k, bounds):
    """V at each water year's last day minus V at its first day (NaN if either is unknown)."""
    first = (bounds[:-1] - days[0]).astype(np.int64)
    last = (bounds[1:] - days[0]).astype(np.int64) - 1
    inside = (first >= 0) & (last < days.size)
    out = np.full(first.size, np.nan)
    b0 = baseflow[first[inside]]
    b1 = baseflow[last[inside]]
    out[inside] = potential_groundwater_discharge_m3(b1, k) - potential_groundwater_discharge_m3(
        b0, k
    )
    return out


def _seasonal_recession(slot, baseflow, k, n_years, days_per_year=None):
    """Recharge by the seasonal recession method (Meyboom 1961), m³ per water year.

    Each water year's seasonal recession ends on its day of lowest baseflow. The next seasonal
    recession starts at the highest baseflow between that day and the following year's lowest
    day. Recharge of year y = V at that start minus V at the end of year y − 1's recession, with
    V = Q K / ln 10 (total potential groundwater discharge).
    """
    out = np.full(n_years, np.nan)
    b = np.asarray(baseflow, dtype=float)
    if not np.isfinite(b).any():
        return out
    # Lowest day of each year (the first of equals); days of a year are contiguous.
    if days_per_year is None:  # the years present and their lengths, from the days' slots
        starts = np.concatenate(([0], np.flatnonzero(np.diff(slot)) + 1))
        lengths = np.diff(np.append(starts, b.size))
    else:  # given: every year from the first to the last has days in the record
        lengths = np.asarray(days_per_year)
        starts = np.concatenate(([0], np.cumsum(lengths)[:-1]))
    years_present = slot[starts]
    filled = np.where(np.isfinite(b), b, np.inf)
    lowest_value = np.minimum.reduceat(filled, starts)
    at_lowest = np.where(
        filled == np.repeat(lowest_value, lengths),
        np.arange(b.size),
        b.size,
    )
    lowest = np.full(n_years, -1)
    found = np.isfinite(lowest_value)
    lowest[years_present[found]] = np.minimum.reduceat(at_lowest, starts)[found]
    # Highest baseflow between each pair of successive lowest days (the spans tile the record
    # between the first and the last lowest day, so one reduceat covers them).
    t0, t1 = lowest[:-1], lowest[1:]
    pairs = np.flatnonzero((t0 >= 0) & (t1 > t0))
    if pairs.size:
        marks = np.unique(np.concatenate((t0[pairs], t1[pairs])))
        peaks = np.maximum.reduceat(np.where(np.isfinite(b), b, -np.inf), marks)
        # Each span [t0, t1] ends on the next mark; its own end day counts too.
        top = np.maximum(peaks[np.searchsorted(marks, t0[pairs])], b[t1[pairs]])
        gained = potential_groundwater_discharge_m3(top, k) - potential_groundwater_discharge_m3(
            b[t0[pairs]], k
        )
        out[pairs + 1] = gained
    return out


def period_recharge(
    flow,
    events,
    area_km2,
    kind="month",
    start_month=10,
    max_missing_share=MAX_MISSING_SHARE,
    *,
    flagged=None,
):
    """Recharge by month or by season (of the peak date), with completeness.

    Parameters
    ----------
    kind : {"month", "season"}
        Months are labelled ``YYYY-MM``; seasons are Dec-Feb, Mar-May, Jun-Aug and Sep-Nov.
    flagged : array_like of bool, optional
        Flagged days: missing to the method (see :func:`annual_recharge`).

    Returns
    -------
    pandas.DataFrame
        ``water_year, period, first_date, last_date, recharge_mm, recharge_m3, complete,
        days_missing, days_zero_or_flagged, events, events_skipped``; ``days_missing``
        counts missing, zero and flagged days.
    """
    return period_columns(
        _days(flow.index),
        flow.to_numpy(dtype=float),
        events,
        area_km2,
        kind,
        start_month,
        max_missing_share,
        flagged=None if flagged is None else np.asarray(flagged, dtype=bool),
    ).frame()


def period_columns(
    days,
    q,
    events,
    area_km2,
    kind="month",
    start_month=10,
    max_missing_share=MAX_MISSING_SHARE,
    *,
    flagged=None,
) -> ColumnTable:
    """:func:`period_recharge` as columns, for flows ``q`` on the days ``days``."""
    if kind not in ("month", "season"):
        raise ValueError(f"period kind was {kind!r}; expected 'month' or 'season'")
    start_month = _check_month(start_month)
    if len(days) == 0:
        return ColumnTable.empty(PERIOD_COLUMNS)
    width = 1 if kind == "month" else 3

    def period_of(days):
        months = days.astype("datetime64[M]").astype(np.int64)
        return months if width == 1 else (months + 1) // 3  # seasons start in December

    first_period, slot, in_record = _day_slots(
        int(days[0].astype(np.int64)), len(days), kind, start_month
    )
    n = in_record.size
    q = np.asarray(q, dtype=float)
    has_value = np.isfinite(q)
    with_value = np.bincount(slot, weights=has_value.astype(float), minlength=n)
    unusable = _unusable_days(q, has_value, flagged, slot, n)
    ev_slots = (
        (period_of(np.asarray(events["peak_date"]).astype("datetime64[D]")) - first_period).astype(
            np.intp
        )
        if len(events)
        else np.empty(0, np.intp)
    )
    recharge, n_events, skipped = _event_sums(events, ev_slots, n)
    close = (
        np.bincount(ev_slots, weights=np.asarray(events["close_to_next"], float), minlength=n)
        if len(events) and "close_to_next" in events
        else np.zeros(n)
    )
    calendar = _period_calendar(first_period, n, kind, start_month)
    lengths = calendar["lengths"]
    missing = lengths - with_value.astype(int) + unusable
    complete = (in_record == lengths) & (missing <= max_missing_share * lengths)
    return ColumnTable(
        {
            "water_year": calendar["water_year"],
            "period": calendar["period"],
            "first_date": calendar["first_date"],
            "last_date": calendar["last_date"],
            "recharge_mm": _mm(recharge, area_km2),
            "recharge_m3": recharge,
            "complete": complete.astype(bool),
            "days_missing": missing.astype(np.int64),
            "days_zero_or_flagged": unusable.astype(np.int64),
            "events": n_events.astype(np.int64),
            "events_skipped": skipped.astype(np.int64),
            "close_events": close.astype(np.int64),
        },
        PERIOD_COLUMNS,
    )


def mean_annual(annual, column="recharge_mm", years="complete"):
    """Mean of ``column`` over the water years marked True in column ``years`` (by default the
    years whose discharge record is complete; ``all_events_measured`` for the years whose
    events were all measured). NaN when there are none."""
    complete = np.asarray(annual[years], dtype=bool)
    values = np.asarray(annual[column], dtype=float)[complete]
    values = values[np.isfinite(values)]
    return float(values.mean()) if values.size else np.nan
