"""Storm runs measured as composite events, against the analytic strip-aquifer solution.

Sources outside the project: the series solution for a strip aquifer after an instantaneous
recharge pulse (Rorabaugh 1960; Glover 1964), whose late-time term falls as 10^(−t/K), and the
recession-curve displacement read at the critical time 0.2144 K (Rorabaugh 1964). A pulse Δt
days before the reading time counts in the displacement only by 10^(−Δt/K): the composite must
allow for it. The quickflow of each storm here is proportional to its recharge (the sharing
rule's assumption), so the composite should recover the run's total within a few percent;
``test_the_timing_matters`` shows the same runs read without the allowance are far off, so these
tests can fail.
"""

import numpy as np
import pandas as pd
import pytest

from recharge_atlas.algorithms.analytic import strip_aquifer_daily_response
from recharge_atlas.algorithms.displacement import (
    compose_events,
    event_displacements,
    reading_share,
)
from recharge_atlas.algorithms.recession import runoff_end_lag_days
from recharge_atlas.algorithms.rises import Rises, find_rises, log_flow
from recharge_atlas.sample_layers.generate import _quickflow_kernel

AREA_KM2 = 400.0
LAG = float(runoff_end_lag_days(AREA_KM2))


def _flow(k, pulses_mm, days=500, quick_per_mm=1.0):
    """Groundwater (series solution) plus quickflow ending within N days, m³/s."""
    depth = np.zeros(days)
    for day, mm in pulses_mm.items():
        depth[day] += mm
    gw = np.convolve(depth, strip_aquifer_daily_response(k, days))[:days]
    quick = np.convolve(depth * quick_per_mm, _quickflow_kernel(0.8 * LAG))[:days]
    background = 0.5 * 10.0 ** (-np.arange(days) / k)  # an old recession, already on K
    q = (gw + quick) * AREA_KM2 * 1e3 / 86400.0 + background
    return pd.Series(q, index=pd.date_range("2011-10-01", periods=days, freq="D"))


def _events(flow, k):
    x = log_flow(flow)
    rises = compose_events(find_rises(x, LAG, 0.01), x, LAG, settle_days=0.2144 * k)
    return event_displacements(flow, x, rises, k, LAG)


def _run(k, count, spacing, first=200):
    sizes = np.linspace(40.0, 10.0, count)[np.random.default_rng(count).permutation(count)]
    return {first + i * spacing: float(size) for i, size in enumerate(sizes)}


def test_reading_share_of_two_equal_pulses():
    # Two equal rises 5 days apart, K = 20 days: the earlier counts 10^(−5/20) = 56 %.
    rises = Rises(
        rise_start=np.array([0]),
        peak=np.array([10]),
        peaks_merged=np.array([2]),
        recession_end=np.array([60]),
        start_in_gap=np.array([False]),
        peak_at_gap=np.array([False]),
        threshold=0.01,
        pulse_peak=np.array([10, 15]),
        pulse_rise=np.array([1.0, 1.0]),
        pulse_event=np.array([0, 0]),
    )
    assert reading_share(rises, 20.0)[0] == pytest.approx((1.0 + 10**-0.25) / 2.0)
    assert 10**-0.25 == pytest.approx(0.56, abs=0.005)
    # Shares follow the rises: all of it in the last pulse counts whole.
    rises.pulse_rise = np.array([0.0, 3.0])
    assert reading_share(rises, 20.0)[0] == pytest.approx(1.0)


@pytest.mark.parametrize("k", [20.0, 45.0])
@pytest.mark.parametrize("count", [2, 3, 5, 8])
def test_storm_run_is_recovered_as_one_composite(k, count):
    # Storms 3 days apart: each shows its own rise, but none leaves a clean recession before
    # the next storm's critical time, so the run is measured as one composite.
    pulses = _run(k, count, spacing=3)
    events = _events(_flow(k, pulses), k)
    run = events[(events["peak_date"] >= pd.Timestamp("2012-04-01"))]
    assert len(run) == 1 and run["used"].all()
    assert 1 <= int(run["peaks_merged"].iloc[0]) <= count  # some peaks hide in others' rises
    true_m3 = sum(pulses.values()) * AREA_KM2 * 1e3
    assert run["recharge_m3"].iloc[0] == pytest.approx(true_m3, rel=0.05)


@pytest.mark.parametrize("count", [3, 5, 8])
def test_the_timing_matters(count):
    # The same runs read at the critical time after the last peak without the allowance for
    # timing: 10 % or more low (the allowance is what makes the test above pass).
    k = 20.0
    pulses = _run(k, count, spacing=3)
    events = _events(_flow(k, pulses), k)
    run = events[(events["peak_date"] >= pd.Timestamp("2012-04-01"))].iloc[0]
    true_m3 = sum(pulses.values()) * AREA_KM2 * 1e3
    assert run["recharge_m3"] == pytest.approx(true_m3, rel=0.05)
    assert run["recharge_m3"] * run["reading_share"] < 0.9 * true_m3


def test_event_unreadable_because_of_a_short_gap_joins_the_next():
    k = 45.0
    pulses = {150: 30.0, 158: 20.0}
    flow = _flow(k, pulses)
    # The first event's whole recession before the second storm is missing (a short gap).
    flow.iloc[150 + int(np.ceil(LAG)) : 158] = np.nan
    events = _events(flow, k)
    later = events[events["peak_date"] >= flow.index[140]]
    assert len(later) == 1 and later["used"].all()
    assert later["recharge_m3"].iloc[0] == pytest.approx(50.0 * AREA_KM2 * 1e3, rel=0.05)


def test_storms_closer_than_the_critical_time_are_measured_together():
    # Two storms 6 days apart: more than N, less than Tc = 9.6 days at K = 45. Read alone, the
    # first event's reading would still hold the early, steeper part of its groundwater response
    # (Rorabaugh 1960 series solution) and the second's anchor too; measured together, the
    # pair's total holds.
    k = 45.0
    pulses = {150: 30.0, 156: 20.0}
    events = _events(_flow(k, pulses), k)
    pair = events[events["peak_date"] >= pd.Timestamp("2012-02-01")]
    assert len(pair) == 1 and pair["used"].all()
    assert pair["recharge_m3"].sum() == pytest.approx(50.0 * AREA_KM2 * 1e3, rel=0.05)


def test_events_read_alone_are_marked_when_the_next_peak_comes_before_the_critical_time():
    k = 45.0
    flow = _flow(k, {150: 30.0, 156: 20.0})
    x = log_flow(flow)
    events = event_displacements(flow, x, find_rises(x, LAG, 0.01), k, LAG)
    pair = events[events["peak_date"] >= pd.Timestamp("2012-02-01")]
    assert len(pair) == 2 and pair["used"].all()
    assert list(pair["close_to_next"]) == [True, False]
    assert "critical time" in pair["note"].iloc[0]
