"""Water years, completeness and the mean over complete years."""

import numpy as np
import pandas as pd
import pytest

from recharge_atlas.algorithms.annual import (
    annual_recharge,
    mean_annual,
    water_year,
    water_year_bounds,
)


@pytest.mark.parametrize(
    ("date", "start", "expected"),
    [
        ("2023-09-30", 10, 2023),
        ("2023-10-01", 10, 2024),  # water year 2024 runs Oct 2023 – Sep 2024 (usual convention)
        ("2024-06-30", 7, 2024),
        ("2024-07-01", 7, 2025),
        ("2024-12-31", 1, 2024),  # start in January: the calendar year
        ("2024-01-01", 1, 2024),
    ],
)
def test_water_year_is_named_by_the_year_it_ends(date, start, expected):
    assert water_year(pd.to_datetime([date]), start)[0] == expected


def test_water_year_bounds():
    first, last = water_year_bounds(2024, 10)
    assert first == pd.Timestamp("2023-10-01") and last == pd.Timestamp("2024-09-30")


def test_bad_start_month_is_refused():
    with pytest.raises(ValueError, match="expected 1 to 12"):
        water_year(pd.to_datetime(["2020-01-01"]), 13)


def _events(dates, m3, used=None):
    return pd.DataFrame(
        {
            "peak_date": pd.to_datetime(dates),
            "recharge_m3": m3,
            "used": used if used is not None else [True] * len(dates),
        }
    )


def test_sums_by_water_year_of_the_peak_and_completeness():
    days = pd.date_range("2000-10-01", "2003-09-30", freq="D")
    flow = pd.Series(1.0, index=days)
    flow.iloc[400:420] = np.nan  # 20 missing days in water year 2002
    events = _events(
        ["2000-11-01", "2001-09-30", "2001-10-01", "2003-01-01", "2003-02-01"],
        [1e6, 2e6, 4e6, 8e6, np.nan],
        [True, True, True, True, False],
    )
    table = annual_recharge(flow, events, area_km2=10.0, start_month=10)
    assert list(table["water_year"]) == [2001, 2002, 2003]
    assert list(table["recharge_m3"]) == [3e6, 4e6, 8e6]
    assert table["recharge_mm"].iloc[0] == pytest.approx(3e6 / 10e6 * 1000.0)  # volume / area
    # 2002 has gaps: its record is not complete. 2003's record is complete, so it counts in the
    # mean, but one of its events was not measured, which the second mean leaves out.
    assert list(table["complete"]) == [True, False, True]
    assert list(table["all_events_measured"]) == [True, False, False]
    assert list(table["events_skipped"]) == [0, 0, 1]
    assert mean_annual(table) == pytest.approx((300.0 + 800.0) / 2)
    assert mean_annual(table, years="all_events_measured") == pytest.approx(300.0)


def test_partial_first_and_last_years_are_incomplete():
    days = pd.date_range("2001-03-01", "2002-05-31", freq="D")
    table = annual_recharge(pd.Series(1.0, index=days), _events([], []), 10.0, 10)
    assert not table["complete"].any()
    assert np.isnan(mean_annual(table))


def test_seasonal_recession_with_the_years_lengths_given():
    """The seasonal recession sums are the same whether each water year's length comes from
    the day slots or is given (as the annual table gives it, from its cached calendar)."""
    from recharge_atlas.algorithms.annual import _day_slots, _seasonal_recession

    rng = np.random.default_rng(3)
    day0 = int(np.datetime64("1991-03-17", "D").astype(np.int64))
    first, slot, per_year = _day_slots(day0, 9 * 365, "year", 10)
    b = np.exp(np.sin(np.arange(slot.size) / 58.0) + rng.normal(0, 0.05, slot.size))
    b[rng.integers(0, slot.size, 200)] = np.nan
    b[400:800] = np.nan  # a whole stretch missing
    found = _seasonal_recession(slot, b, 45.0, per_year.size)
    given = _seasonal_recession(slot, b, 45.0, per_year.size, per_year)
    np.testing.assert_array_equal(found, given)
    assert np.isfinite(found).sum() >= 5


@pytest.mark.parametrize("gaps", [False, True])
def test_baseflow_index_by_water_year_counts_days_with_both(gaps):
    """A year's baseflow index is Σ baseflow / Σ flow over the days that have both (the
    definition, worked by hand here), with or without days where only the flow is known."""
    from recharge_atlas.algorithms.annual import annual_columns

    days = np.datetime64("2001-10-01") + np.arange(730).astype("timedelta64[D]")
    rng = np.random.default_rng(7)
    q = rng.uniform(1.0, 5.0, days.size)
    b = 0.6 * q
    if gaps:
        b[rng.integers(0, days.size, 40)] = np.nan
        q[5] = np.nan
        b[5] = np.nan
    empty = {"peak_date": np.array([], "datetime64[ns]"), "recharge_m3": [], "used": []}
    table = annual_columns(days, q, empty, 100.0, 10, baseflow=b)
    for i, start in enumerate((0, 365)):
        ok = np.isfinite(q[start : start + 365]) & np.isfinite(b[start : start + 365])
        expected = b[start : start + 365][ok].sum() / q[start : start + 365][ok].sum()
        assert table["baseflow_index"][i] == pytest.approx(expected, rel=1e-12)


def test_event_years_are_shared_only_by_the_same_peak_dates():
    """The water year of each peak is worked out once per peak-date array: tables sharing
    the array share it, a different array (even an equal one) gets its own."""
    from recharge_atlas.algorithms.annual import _EventYears

    peaks = np.array(["2001-09-30", "2001-10-01", "2003-02-01"], dtype="datetime64[D]")
    years = _EventYears(10, 2001)
    first = years({"peak_date": peaks})
    assert first.tolist() == [0, 1, 2]  # water years 2001, 2002, 2003 (October start)
    assert years({"peak_date": peaks}) is first  # the same array: the same slots
    other = years({"peak_date": peaks.copy()})
    assert other is not first and other.tolist() == first.tolist()
    moved = years({"peak_date": peaks + np.timedelta64(365, "D")})
    assert moved.tolist() == [1, 2, 3]
    frame = pd.DataFrame({"peak_date": peaks})  # a new Series at each look: computed afresh
    assert years(frame).tolist() == [0, 1, 2] and years(None).size == 0
