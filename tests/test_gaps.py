"""Gaps, flagged (ice) days and zero flow, handled from the method's own definitions.

Sources outside the project: the strip-aquifer series solution (Rorabaugh 1960; Glover 1964)
gives the synthetic truth; the groundwater recession falls one log cycle per K days (Rorabaugh
1964), so a recession carried across a gap of g days falls g/K log cycles, and no faster than
that for one aquifer (every term of the series falls at least as fast as the first). The
Eckhardt (2005), Lyne & Hollick (1979) and smoothed-minima (Institute of Hydrology 1980)
separations are defined on the days with a value only.
"""

import numpy as np
import pandas as pd
import pytest

from recharge_atlas.algorithms.analytic import strip_aquifer_daily_response
from recharge_atlas.algorithms.discharge import GaugeRecord
from recharge_atlas.algorithms.pipeline import Settings, gauge_hydrology
from recharge_atlas.algorithms.rises import find_rises, log_flow

AREA = 200.0
K = 45.0
DAYS = 365 * 6
START = "1989-10-01"
#: The gap: 62 days from 1993-12-01, inside water year 1994.
GAP_FIRST = pd.Timestamp("1993-12-01")
GAP_DAYS = 62


def _flow(recharge_mm, parts=((K, 1.0),)):
    """Flow (m³/s) of strip aquifers in parallel for daily recharge depths (mm)."""
    q = np.zeros(recharge_mm.size)
    for k, share in parts:
        kernel = strip_aquifer_daily_response(k, min(recharge_mm.size, int(20 * k)))
        q += np.convolve(recharge_mm * share, kernel)[: recharge_mm.size]
    return q * AREA * 1e3 / 86400.0


def _storms(seed, dates):
    """Invented storm recharge (mm/day), none from 60 days before the gap to 40 after it."""
    rng = np.random.default_rng(seed)
    days = dates.size
    storm = rng.random(days) < 0.06
    recharge = np.where(storm, rng.gamma(1.2, 10.0, days), 0.0)
    g0 = dates.get_loc(GAP_FIRST)
    recharge[g0 - 60 : g0 + GAP_DAYS + 40] = 0.0
    return recharge, g0


def _gap_record(seed, pulse, kind, parts=((K, 1.0),), noise=0.02):
    """A record with a 62-day gap (NaN or flagged); with ``pulse`` a recharge pulse falls in the
    gap, sized so that the first day after the gap carries half the flow of the day before it:
    below the pre-gap flow, yet ten times the pre-gap flow carried along K across the gap."""
    dates = pd.date_range(START, periods=DAYS, freq="D")
    recharge, g0 = _storms(seed, dates)
    after = g0 + GAP_DAYS
    if pulse:
        base = _flow(recharge, parts)
        unit = np.zeros(DAYS)
        unit[g0 + 25] = 1.0
        response = _flow(unit, parts)
        recharge[g0 + 25] = (0.5 * base[g0 - 1] - base[after]) / response[after]
    truth = _flow(recharge, parts)
    rng = np.random.default_rng(1000 + seed)
    flow = truth * np.exp(rng.normal(0.0, noise, DAYS))
    flagged = np.zeros(DAYS, bool)
    flagged[g0:after] = True
    if kind == "missing":
        flow[g0:after] = np.nan
    else:  # ice: values given, but flagged (and here far off, as ice-affected values are)
        flow[g0:after] *= 3.0
    record = GaugeRecord(
        "X",
        pd.Series(flow, index=dates),
        flagged=pd.Series(flagged if kind == "flagged" else np.zeros(DAYS, bool), index=dates),
    )
    return record, truth, recharge, g0


@pytest.mark.parametrize("kind", ["missing", "flagged"])
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_a_rise_hidden_in_a_gap_is_found_against_the_carried_recession(seed, kind):
    record, truth, _, g0 = _gap_record(seed, pulse=True, kind=kind)
    after = g0 + GAP_DAYS
    # The scene: the flow after the gap is below the flow before it (so comparing the two
    # finds nothing), but far above that flow carried along K across the gap.
    assert truth[after] < truth[g0 - 1]
    assert np.log10(truth[after] / truth[g0 - 1]) > -(after - g0 + 1) / K + 0.9
    result = gauge_hydrology(record, AREA, Settings())
    assert result.recession.days == pytest.approx(K, rel=0.1)
    events = result.events
    first_after = record.flow.index[after]
    hidden = events[events["rise_start_date"] == first_after]
    assert len(hidden) == 1
    assert bool(hidden["anchor_in_gap"].iloc[0]) and not bool(hidden["used"].iloc[0])
    year = int(hidden["peak_date"].iloc[0].year + (hidden["peak_date"].iloc[0].month >= 10))
    annual = result.annual.set_index("water_year")
    assert not annual.loc[year, "complete"]
    # The rule that compares with the flow before the gap (no K) misses it.
    usable = record.flow.to_numpy(copy=True)
    usable[g0:after] = np.nan
    x = log_flow(usable)
    without_k = find_rises(x, result.lag_days, result.rise_threshold)
    assert after not in set(without_k.rise_start.tolist())
    with_k = find_rises(x, result.lag_days, result.rise_threshold, recession_index_days=K)
    assert after in set(with_k.rise_start.tolist())


@pytest.mark.parametrize("kind", ["missing", "flagged"])
@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5])
@pytest.mark.parametrize(
    "parts", [((K, 1.0),), ((30.0, 0.5), (60.0, 0.5))], ids=["one aquifer", "two aquifers"]
)
def test_no_rise_is_invented_in_a_gap_without_one(seed, kind, parts):
    """Without a pulse in the gap, the flow after it lies on (or, with two aquifers whose
    recession slows as flow falls, somewhat above) the recession carried along K: no event."""
    record, _, _, g0 = _gap_record(seed, pulse=False, kind=kind, parts=parts)
    result = gauge_hydrology(record, AREA, Settings())
    first_after = record.flow.index[g0 + GAP_DAYS]
    assert not (result.events["rise_start_date"] == first_after).any()


def test_the_carried_recession_rule_with_k_given_on_a_plain_record():
    """Hand-made log flows on a recession of K = 50 days: a 40-day gap carries it down 0.8.
    A rise happened in the gap when the flow after it stands above the carried recession by
    the threshold plus half the carried fall (0.05 + 0.4 = 0.45). 0.5 below the day before the
    gap is 0.3 above the carried recession: no rise; 0.3 below is 0.5 above it: a rise; 0.8
    below lies on it: no rise."""
    k = 50.0
    day = np.arange(200, dtype=float)
    x = 2.0 - day / k
    x[80:119] = np.nan  # the day before is 79, the day after 119: carried 40 days, 0.8 down
    threshold = 0.05
    for drop, found in ((0.5, False), (0.3, True), (0.8, False)):
        y = x.copy()
        y[119:] = x[79] - drop - (day[119:] - 119) / k
        rises = find_rises(y, 5.0, threshold, recession_index_days=k)
        assert (119 in rises.rise_start.tolist()) is found, drop
        # Without K only a climb above the day before the gap counts.
        assert 119 not in find_rises(y, 5.0, threshold).rise_start.tolist()


def _flagged_record(values_on_flagged):
    dates = pd.date_range(START, periods=365 * 5, freq="D")
    rng = np.random.default_rng(8)
    recharge = np.where(rng.random(dates.size) < 0.07, rng.gamma(1.2, 10.0, dates.size), 0.0)
    flow = _flow(recharge) * np.exp(rng.normal(0.0, 0.02, dates.size))
    flagged = np.zeros(dates.size, bool)
    for first, length in ((400, 50), (700, 3), (1200, 80)):
        flagged[first : first + length] = True
    flow[flagged] = values_on_flagged[: flagged.sum()]
    return GaugeRecord("X", pd.Series(flow, index=dates), flagged=pd.Series(flagged, index=dates))


@pytest.mark.parametrize("method", ["eckhardt", "lyne_hollick", "smoothed_minima"])
def test_flagged_days_never_influence_baseflow(method):
    """Changing the flow on flagged days leaves the baseflow of every other day unchanged; the
    flagged days have no baseflow, and the baseflow index is Σ baseflow / Σ flow over the days
    with both (the definition)."""
    n = 133
    low = _flagged_record(np.full(n, 0.01))
    high = _flagged_record(np.linspace(50.0, 500.0, n))
    a = gauge_hydrology(low, AREA, Settings(baseflow_method=method))
    b = gauge_hydrology(high, AREA, Settings(baseflow_method=method))
    flagged = low.flagged.to_numpy()
    ba, bb = a.baseflow.to_numpy(), b.baseflow.to_numpy()
    assert np.isnan(ba[flagged]).all() and np.isnan(bb[flagged]).all()
    np.testing.assert_array_equal(ba[~flagged], bb[~flagged])
    assert np.isfinite(ba[~flagged]).sum() > 0.8 * (~flagged).sum()
    q = a.flow.to_numpy()
    both = np.isfinite(q) & np.isfinite(ba)
    assert a.baseflow_index == pytest.approx(ba[both].sum() / q[both].sum(), rel=1e-12)
    assert a.baseflow_index == pytest.approx(b.baseflow_index, rel=1e-12)
    # Per water year too: the index over days with both; baseflow depths the same.
    np.testing.assert_allclose(a.annual["baseflow_index"], b.annual["baseflow_index"], rtol=1e-12)
    np.testing.assert_allclose(a.annual["baseflow_mm"], b.annual["baseflow_mm"], rtol=1e-12)
    # The flow sums keep the values given (the flow is not changed, only not used).
    assert not np.allclose(a.annual["flow_mm"], b.annual["flow_mm"])


def test_flagged_and_zero_days_count_as_missing_for_completeness():
    """Days a method cannot use count against a year's completeness (at most 2 % of its days,
    our own rule), but the flow sums keep every real value: zero is a real flow."""
    from recharge_atlas.algorithms.annual import MAX_MISSING_SHARE, annual_columns

    days = np.datetime64("2001-10-01") + np.arange(365 * 3 + 1).astype("timedelta64[D]")
    q = np.full(days.size, 2.0)
    q[10:20] = 0.0  # 10 zero days in water year 2002
    flagged = np.zeros(days.size, bool)
    flagged[400:410] = True  # 10 flagged days in 2003
    q[800:803] = 0.0  # 3 zero days in 2004: within the allowance
    assert 3 <= MAX_MISSING_SHARE * 366 < 10
    empty = {"peak_date": np.array([], "datetime64[ns]"), "recharge_m3": [], "used": []}
    table = annual_columns(days, q, empty, 100.0, 10, flagged=flagged)
    assert list(table["complete"]) == [False, False, True]
    assert list(table["days_missing"]) == [10, 10, 3]
    assert list(table["days_zero_or_flagged"]) == [10, 10, 3]
    expected = [q[i:j].sum() * 86400.0 / 100e3 for i, j in ((0, 365), (365, 730), (730, 1096))]
    np.testing.assert_allclose(table["flow_mm"], expected, rtol=1e-12)


@pytest.mark.parametrize("dry_days", [5, 30])
@pytest.mark.parametrize("seed", [11, 12, 13])
def test_a_rise_out_of_zero_flow_is_never_dropped_from_a_complete_year(seed, dry_days):
    """Flow below the rating's lowest point is reported as zero. After a dry spell a small
    storm lifts the flow back just above that point: below the flow before the spell plus the
    threshold (so comparing with the day before the spell finds nothing), far above that flow
    carried along K. Zero flow has no log, so the rise cannot be measured by displacement: the
    event must be found and not measured, and its year not complete."""
    dates = pd.date_range(START, periods=365 * 5, freq="D")
    rng = np.random.default_rng(seed)
    recharge = np.where(rng.random(dates.size) < 0.06, rng.gamma(1.2, 10.0, dates.size), 0.0)
    quiet = dates.get_loc(pd.Timestamp("1992-05-01"))
    recharge[quiet : quiet + 150] = 0.0
    base = _flow(recharge)
    cut = base[quiet + 60]  # the rating's lowest point: the flow of the 60th quiet day
    storm = quiet + 61 + dry_days
    unit = np.zeros(dates.size)
    unit[storm] = 1.0
    recharge[storm] = (1.05 * cut - base[storm]) / _flow(unit)[storm]
    flow = _flow(recharge) * np.exp(rng.normal(0.0, 0.02, dates.size))
    flow[flow < cut] = 0.0
    assert (flow[quiet + 61 : storm] == 0.0).all() and flow[storm] > 0.0
    result = gauge_hydrology(GaugeRecord("X", pd.Series(flow, index=dates)), AREA, Settings())
    events = result.events
    # The rise is found: alone (after a long dry spell) it is not measured; after a short one
    # (up to a week) it may join the event before it as one composite event.
    covering = events[
        (events["rise_start_date"] <= dates[storm]) & (events["last_peak_date"] >= dates[storm])
    ]
    assert len(covering) == 1
    alone = covering["rise_start_date"].iloc[0] == dates[storm]
    if alone:
        assert bool(covering["anchor_in_gap"].iloc[0]) and not bool(covering["used"].iloc[0])
    else:
        assert dry_days <= 7 and int(covering["peaks_merged"].iloc[0]) >= 2
    annual = result.annual.set_index("water_year")
    in_year = (dates >= "1991-10-01") & (dates <= "1992-09-30")
    zero_days = np.count_nonzero(flow[in_year] == 0.0)
    assert annual.loc[1992, "days_zero_or_flagged"] == zero_days
    assert annual.loc[1992, "days_missing"] == zero_days
    assert not annual.loc[1992, "complete"]
    # The flow sum keeps the real values (zero included).
    assert annual.loc[1992, "flow_mm"] == pytest.approx(
        flow[in_year].sum() * 86400.0 / (AREA * 1e3), rel=1e-12
    )
