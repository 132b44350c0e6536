"""Annual water-balance terms, sub-annual sums and the seasonal recession method.

Sources: Rorabaugh (1964) for V = Q K / ln 10; Meyboom (1961) for the seasonal recession
method (recharge = V at the start of a seasonal recession − V left at the end of the previous).
"""

import numpy as np
import pandas as pd
import pytest

from recharge_atlas.algorithms.annual import ANNUAL_COLUMNS, annual_recharge, period_recharge
from recharge_atlas.algorithms.recession import potential_groundwater_discharge_m3

AREA = 50.0  # km²
K = 40.0


def _days(first="2000-10-01", last="2002-09-30"):
    return pd.date_range(first, last, freq="D")


def _events(dates, m3):
    return pd.DataFrame(
        {"peak_date": pd.to_datetime(dates), "recharge_m3": m3, "used": [True] * len(dates)}
    )


def test_annual_terms_and_their_identity():
    days = _days()
    flow = pd.Series(2.0, index=days)
    baseflow = np.linspace(1.0, 1.5, days.size)
    table = annual_recharge(
        flow,
        _events(["2001-01-15", "2002-02-01"], [5e6, 3e6]),
        AREA,
        10,
        baseflow=baseflow,
        recession_index_days=K,
    )
    assert list(table.columns) == ANNUAL_COLUMNS
    first = table.iloc[0]
    year = days[days < "2001-10-01"]
    b = baseflow[: year.size]
    # Storage change: V at the year's last day minus V at its first (Rorabaugh 1964).
    dv = potential_groundwater_discharge_m3(b[-1], K) - potential_groundwater_discharge_m3(b[0], K)
    assert first["storage_change_m3"] == pytest.approx(dv)
    assert first["baseflow_m3"] == pytest.approx(b.sum() * 86400.0)
    assert first["baseflow_index"] == pytest.approx(b.sum() / (2.0 * year.size))
    assert first["flow_mm"] == pytest.approx(2.0 * 86400 * year.size / (AREA * 1e3))
    identity = table["recharge_mm"] - table["baseflow_mm"] - table["storage_change_mm"]
    np.testing.assert_allclose(table["residual_mm"], identity)


def test_low_and_high_recharge_come_from_their_own_event_tables():
    days = _days()
    flow = pd.Series(1.0, index=days)
    table = annual_recharge(
        flow,
        _events(["2001-01-15"], [5e6]),
        AREA,
        10,
        events_low=_events(["2001-01-15"], [4e6]),
        events_high=_events(["2001-01-15"], [6e6]),
    )
    assert table["recharge_low_mm"].iloc[0] == pytest.approx(4e6 / (AREA * 1e3))
    assert table["recharge_high_mm"].iloc[0] == pytest.approx(6e6 / (AREA * 1e3))


def test_seasonal_recession_method_meyboom():
    # Baseflow falls through each summer to a minimum on 30 September and rises in winter.
    days = _days("2000-10-01", "2003-09-30")
    t = np.arange(days.size)
    baseflow = 1.0 + 0.8 * np.cos(2 * np.pi * (t - 120) / 365.25)
    table = annual_recharge(
        pd.Series(3.0, index=days),
        _events([], []),
        AREA,
        10,
        baseflow=baseflow,
        recession_index_days=K,
    )
    wy = days.year + (days.month >= 10)
    for i, year in enumerate(table["water_year"]):
        if i == 0:
            assert np.isnan(table["seasonal_recharge_mm"].iloc[0])  # no previous seasonal recession
            continue
        prev = np.flatnonzero(wy == year - 1)
        here = np.flatnonzero(wy == year)
        t0 = prev[np.argmin(baseflow[prev])]
        t1 = here[np.argmin(baseflow[here])]
        expected = potential_groundwater_discharge_m3(
            baseflow[t0 : t1 + 1].max(), K
        ) - potential_groundwater_discharge_m3(baseflow[t0], K)
        assert table["seasonal_recharge_mm"].iloc[i] == pytest.approx(expected / (AREA * 1e3))


def test_monthly_and_seasonal_sums_with_completeness():
    days = _days("2000-10-01", "2001-09-30")
    flow = pd.Series(1.0, index=days)
    flow.loc["2001-03-10":"2001-03-12"] = np.nan
    events = _events(["2000-12-05", "2001-01-20", "2001-02-28", "2001-03-15"], [1e6, 2e6, 4e6, 8e6])
    months = period_recharge(flow, events, AREA, "month", 10)
    assert list(months["period"][:6]) == [
        "2000-10",
        "2000-11",
        "2000-12",
        "2001-01",
        "2001-02",
        "2001-03",
    ]
    assert months.set_index("period").loc["2001-02", "recharge_m3"] == 4e6
    assert not months.set_index("period").loc["2001-03", "complete"]  # 3 of 31 days missing
    seasons = period_recharge(flow, events, AREA, "season", 10)
    by_label = seasons.set_index(["water_year", "period"])["recharge_m3"]
    assert by_label.loc[(2001, "Dec-Feb")] == 7e6  # December to February
    assert by_label.loc[(2001, "Mar-May")] == 8e6
    assert (seasons["first_date"].dt.month.isin([12, 3, 6, 9])).all()


def test_bad_period_kind():
    with pytest.raises(ValueError, match="'month' or 'season'"):
        period_recharge(pd.Series(1.0, index=_days()), _events([], []), AREA, "week")
