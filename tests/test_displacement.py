"""Recession-curve displacement against the analytic strip-aquifer solution.

Check against a source outside the project: Rorabaugh (1960, 1964) and Glover (1964) — for an
ideal strip aquifer the displacement at the critical time recovers a recharge pulse within a
few percent. The hydrographs are the series solution (see test_analytic.py for its own check
against an independent numerical solution).
"""

import numpy as np
import pandas as pd
import pytest

from recharge_atlas.algorithms.analytic import strip_aquifer_daily_response
from recharge_atlas.algorithms.displacement import event_displacements
from recharge_atlas.algorithms.recession import runoff_end_lag_days
from recharge_atlas.algorithms.rises import find_rises, log_flow, rise_threshold

AREA_KM2 = 150.0


def _hydrograph(k, pulses_mm, days=900):
    """Groundwater discharge (m³/s) of a strip aquifer after pulses {day: mm} at noon."""
    kernel = strip_aquifer_daily_response(k, days)
    depth = np.zeros(days)
    for day, mm in pulses_mm.items():
        depth[day] += mm
    mm_per_day = np.convolve(depth, kernel)[:days]
    background = 2.0 * 10.0 ** (-np.arange(days) / k)  # an old recession, already on K
    q = mm_per_day * AREA_KM2 * 1e3 / 86400.0 + background
    return pd.Series(q, index=pd.date_range("2010-10-01", periods=days, freq="D"))


def _events(flow, k, threshold=0.01):
    x = log_flow(flow)
    lag = float(runoff_end_lag_days(AREA_KM2))
    rises = find_rises(x, lag, threshold)
    return event_displacements(flow, x, rises, k, lag)


@pytest.mark.parametrize("k", [20.0, 45.0, 90.0])
def test_single_pulse_is_recovered_within_a_few_percent(k):
    # An earlier pulse sets up a background recession; the second one is measured.
    flow = _hydrograph(k, {10: 80.0, 300: 40.0})
    events = _events(flow, k)
    second = events[events["peak_date"] == flow.index[300]]
    assert len(second) == 1 and second["used"].all()
    true_m3 = 40.0 * AREA_KM2 * 1e3
    assert second["recharge_m3"].iloc[0] == pytest.approx(true_m3, rel=0.03)


def test_several_pulses_sum_to_the_total_within_a_few_percent():
    k = 45.0
    pulses = {20: 50.0, 70: 20.0, 95: 35.0, 160: 10.0, 230: 60.0, 265: 15.0}
    flow = _hydrograph(k, pulses, days=700)
    events = _events(flow, k)
    assert events["used"].all()
    assert len(events) == len(pulses)
    total = sum(pulses.values()) * AREA_KM2 * 1e3
    assert events["recharge_m3"].sum() == pytest.approx(total, rel=0.03)


def test_event_rows_carry_their_anchors_and_spans():
    k = 45.0
    flow = _hydrograph(k, {10: 80.0, 300: 40.0})
    row = _events(flow, k).iloc[-1]
    assert row["pre_anchor_date"] == flow.index[299]  # lowest day before the rise
    assert row["pre_anchor_m3s"] == pytest.approx(flow.iloc[299])
    assert row["critical_time_days"] == pytest.approx(0.2144 * k)
    assert abs(row["post_extrapolation_days"]) <= 0.5
    assert row["q_after_m3s"] > row["q_before_m3s"] > 0


def test_pre_event_anchor_in_a_gap_skips_and_says_why():
    k = 45.0
    flow = _hydrograph(k, {10: 80.0, 300: 40.0})
    flow.iloc[297:300] = np.nan
    events = _events(flow, k)
    last = events.iloc[-1]
    assert not last["used"] and np.isnan(last["recharge_m3"])
    assert "gap" in last["note"]


def test_rise_hidden_in_a_gap_is_kept_as_an_unmeasured_event():
    k = 45.0
    flow = _hydrograph(k, {10: 80.0, 300: 40.0})
    flow.iloc[298:301] = np.nan  # the whole rise and the peak day are missing
    events = _events(flow, k)
    last = events.iloc[-1]
    assert last["peak_date"] == flow.index[301]  # first day after the gap, still high
    assert not last["used"] and "gap" in last["note"]


def test_post_event_recession_missing_for_long_is_refused():
    k = 45.0
    flow = _hydrograph(k, {10: 80.0, 300: 40.0})
    flow.iloc[302:360] = np.nan
    events = _events(flow, k)
    last = events.iloc[-1]
    assert not last["used"]
    assert "extrapolation" in last["note"] or "clean day" in last["note"]


def test_several_k_in_one_pass_give_what_each_gives_alone():
    """The events rerun at both ends of the K interval in one pass: the same numbers as one K at
    a time (element by element the same arithmetic), and None for a K that is not a number."""
    from recharge_atlas.algorithms.displacement import event_volumes, event_volumes_at

    flow = _hydrograph(45.0, {60: 30.0, 200: 12.0, 203: 8.0, 420: 25.0, 700: 5.0})
    flow.iloc[[300, 301, 302]] = np.nan
    x = log_flow(flow)
    lag = float(runoff_end_lag_days(AREA_KM2))
    rises = find_rises(x, lag, 0.01)
    ks = [30.0, np.nan, 45.0, 120.0, -1.0]
    together = event_volumes_at(flow.to_numpy(), x, rises, ks, lag)
    for k, pair in zip(ks, together):
        if not (np.isfinite(k) and k > 0):
            assert pair is None
            continue
        volume, used = event_volumes(flow.to_numpy(), x, rises, k, lag)
        np.testing.assert_array_equal(pair[0], volume)
        np.testing.assert_array_equal(pair[1], used)
        table = _events(flow, k)
        np.testing.assert_array_equal(pair[0], table["recharge_m3"].to_numpy())


@pytest.mark.parametrize("k", [12.0, 45.0, 300.0])
def test_the_table_and_the_interval_ends_in_one_pass_equal_each_alone(k):
    """The pipeline gets the event table for K and the volumes at both ends of the K interval
    from one pass (the three Ks as one column); each must be exactly what it is alone, notes
    included."""
    from recharge_atlas.algorithms.displacement import (
        event_columns,
        event_columns_at,
        event_volumes_at,
    )

    flow = _hydrograph(45.0, {60: 30.0, 200: 12.0, 203: 8.0, 420: 25.0, 700: 5.0})
    flow.iloc[[300, 301, 302]] = np.nan
    q, x = flow.to_numpy(), log_flow(flow)
    lag = float(runoff_end_lag_days(AREA_KM2))
    rises = find_rises(x, lag, 0.01)
    day0 = flow.index[0].to_datetime64().astype("datetime64[D]")
    others = [0.7 * k, np.nan, 1.4 * k]
    table, volumes = event_columns_at(q, day0, x, rises, [k, *others], lag)
    alone = event_columns(q, day0, x, rises, k, lag)
    assert table.order == alone.order
    for name in alone.order:
        np.testing.assert_array_equal(table[name], alone[name], err_msg=name)
    for got, expected in zip(volumes, event_volumes_at(q, x, rises, others, lag)):
        if expected is None:
            assert got is None
            continue
        np.testing.assert_array_equal(got[0], expected[0])
        np.testing.assert_array_equal(got[1], expected[1])
    with pytest.raises(ValueError, match="first recession index"):
        event_columns_at(q, day0, x, rises, [np.nan, k], lag)


def _noisy_pulses(k, sigma, seed=7, n=30, spacing=110):
    """Pulses of 20-60 mm ``spacing`` days apart with log-normal gauging noise ``sigma``."""
    rng = np.random.default_rng(seed)
    pulses = {40 + spacing * i: float(rng.uniform(20, 60)) for i in range(n)}
    flow = _hydrograph(k, pulses, days=40 + spacing * n + 200)
    return flow * np.exp(sigma * rng.standard_normal(flow.size)), pulses


@pytest.mark.parametrize("k", [30.0, 60.0])
def test_averaged_anchors_take_the_noise_bias_out(monkeypatch, k):
    # Gauging noise of 5 %: the lowest day before a rise is picked for being low, so a one-day
    # anchor biases Q1 low and the recharge high; averaging five days along K (ANCHOR_DAYS)
    # must at least halve the error of the total and stay within 3 % of it (the truth is the
    # sum of the pulses; Rorabaugh 1964 for the method, Rorabaugh 1960 for the response).
    import recharge_atlas.algorithms.displacement as displacement

    flow, pulses = _noisy_pulses(k, 0.05)
    truth = sum(pulses.values()) * AREA_KM2 * 1e3

    threshold = rise_threshold(log_flow(flow))

    def total_error():
        events = _events(flow, k, threshold)
        return events["recharge_m3"].sum() / truth - 1.0

    averaged = total_error()
    monkeypatch.setattr(displacement, "ANCHOR_DAYS", 1)
    one_day = total_error()
    assert abs(averaged) <= 0.03, (averaged, one_day)
    assert abs(averaged) <= 0.5 * abs(one_day), (averaged, one_day)


def test_averaged_anchor_equals_the_day_on_an_exact_recession():
    # On a noise-free recession along K every day carries the same anchor value.
    k = 45.0
    flow = _hydrograph(k, {10: 80.0, 300: 40.0})
    row = _events(flow, k).iloc[-1]
    start = flow.index.get_loc(row["pre_anchor_date"])
    tc_day = 300 + 0.2144 * k
    # The old background and the first pulse's late recession are both on K by day 299.
    expected = flow.iloc[start] * 10 ** (-(tc_day - start) / k)
    assert row["q_before_m3s"] == pytest.approx(expected, rel=2e-3)


# ---------------------------------------------------------------- rises between measured events


def _between(flow, k, threshold):
    from recharge_atlas.algorithms.displacement import recession_rises

    events = _events(flow, k, threshold)
    x = log_flow(flow)
    found = recession_rises(events, x, np.datetime64(flow.index[0].date()), k)
    return events, found


def test_rise_between_events_follows_rorabaugh_formula():
    """R = 2 ΔQ K / ln 10 (Rorabaugh 1964), ΔQ the gain over the recession carried along K,
    valued at Tc after the day the gain was half made."""
    from recharge_atlas.algorithms.displacement import recession_rises

    k, q0 = 40.0, 5.0
    days = np.arange(200)
    q = q0 * 10.0 ** (-days / k)
    q[100:] *= 1.1  # a pure late-time displacement of 10 % on day 100
    events = {
        "used": np.array([True, True]),
        "post_anchor_date": np.array(["2001-01-11", "2001-07-01"], "datetime64[D]"),
        "post_anchor_m3s": np.array([q[10], np.nan]),
        "pre_anchor_date": np.array(["2000-12-01", "2001-06-10"], "datetime64[D]"),
        "pre_anchor_m3s": np.array([np.nan, q[160]]),
    }
    found = recession_rises(events, np.log10(q), np.datetime64("2001-01-01"), k)
    gain_at_b = q[160] - q[10] * 10 ** (-150 / k)
    assert gain_at_b == pytest.approx(0.1 * q0 * 10 ** (-160 / k) / 1.1 * 1.1, rel=1e-9)
    valued = gain_at_b * 10 ** ((160 - 100 - 0.2144 * k) / k)
    expected = 2 * valued * 86400 * k / np.log(10)
    assert found["date"].tolist() == [np.datetime64("2001-06-10")]
    assert found["recharge_m3"][0] == pytest.approx(expected, rel=1e-3)


@pytest.mark.parametrize("k", [20.0, 45.0, 90.0])
def test_small_pulse_between_events_is_recovered_and_not_high(k):
    # Analytic strip aquifer (Rorabaugh 1960; Glover 1964): two events the run measures and a
    # pulse between them below the rise threshold. The term finds most of it and not more.
    day = 20 + int(2.5 * k)
    before = _hydrograph(k, {20: 60.0}, days=900)
    mm_per_day = before.iloc[day] * 86400 / (AREA_KM2 * 1e3)
    small = 0.15 * mm_per_day * k / (0.81 * np.log(10))  # lifts the late recession by ~15 %
    flow = _hydrograph(k, {20: 60.0, day: small, 20 + 5 * int(k): 50.0}, days=900)
    events, found = _between(flow, k, threshold=0.2)
    assert len(events) == 2 and events["used"].all()
    true_m3 = small * AREA_KM2 * 1e3
    assert found["recharge_m3"].size == 1
    assert 0.85 * true_m3 <= found["recharge_m3"][0] <= 1.03 * true_m3


def test_pure_recession_between_events_gains_nothing():
    k = 45.0
    flow = _hydrograph(k, {20: 60.0, 300: 50.0})
    events, found = _between(flow, k, threshold=0.01)
    assert found["recharge_m3"].size == 1
    assert abs(found["recharge_m3"][0]) < 0.01 * 50.0 * AREA_KM2 * 1e3


def test_rise_between_events_across_a_gap_is_left_to_the_events():
    k = 45.0
    flow = _hydrograph(k, {20: 60.0, 150: 5.0, 300: 50.0})
    flow.iloc[140:160] = np.nan
    _, found = _between(flow, k, threshold=0.2)
    assert found["recharge_m3"].size == 0


def test_running_median_of_five_is_numpys_median_of_the_windows():
    # numpy's median of each 5-day sliding window is the reference; ties, NaN and infinities
    # included (a window with a NaN gives NaN, as np.median does).
    from recharge_atlas.algorithms.displacement import _running_median_of_5

    rng = np.random.default_rng(11)
    for trial in range(300):
        values = rng.normal(size=int(rng.integers(5, 120)))
        if trial % 3 == 0:
            values = np.round(values, 1)
        if trial % 4 == 0:
            values[rng.integers(0, values.size, 3)] = np.nan
        if trial % 5 == 0:
            values[rng.integers(0, values.size, 2)] = np.inf * rng.choice([-1, 1])
        expected = np.median(np.lib.stride_tricks.sliding_window_view(values, 5), axis=1)
        assert np.array_equal(_running_median_of_5(values), expected, equal_nan=True)
