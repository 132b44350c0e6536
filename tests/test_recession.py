"""Recession index, critical time, potential groundwater discharge and displacement volume.

Sources: Rorabaugh (1964) for Tc = 0.2144 K, V = QK/ln 10 and R = 2(Q2 − Q1)K/2.3026;
Linsley, Kohler & Paulhus (Hydrology for Engineers) for N = A^0.2 (A in mi²);
scipy.integrate.quad and scipy.stats.linregress as independent reference libraries.
"""

import numpy as np
import pandas as pd
import pytest
from scipy.integrate import quad
from scipy.stats import linregress

from recharge_atlas.algorithms.recession import (
    critical_time_days,
    displacement_recharge_m3,
    estimate_recession_index,
    potential_groundwater_discharge_m3,
    recession_segments,
    recession_warnings,
    runoff_end_lag_days,
)
from recharge_atlas.algorithms.rises import find_rises, log_flow


def test_critical_time_reads_half_the_pulse_from_the_series_solution():
    """Worked from the strip-aquifer series solution (Rorabaugh 1960; Glover 1964), not from
    the constant itself. After a pulse R, the late-time recession is q(t) = R (8/π²)(ln 10/K)
    10^(−t/K), whose potential volume at t is q K / ln 10 = R (8/π²) 10^(−t/K). The
    displacement method reads twice that at the critical time, so the exact critical time is
    where it is R/2: t/K = log10(16/π²) = 0.2098. Rorabaugh (1964) gives 0.2144 K: twice the
    volume there is 0.9895 R, the method's known 1 % shortfall."""
    exact = np.log10(16.0 / np.pi**2)
    assert exact == pytest.approx(0.2098, abs=5e-5)
    tc = critical_time_days(45.0)
    read = 2.0 * (8.0 / np.pi**2) * 10.0 ** (-tc / 45.0)
    assert read == pytest.approx(0.9895, abs=5e-4)
    assert tc / 45.0 == pytest.approx(exact, rel=0.025)
    # Rule of thumb (common practice, no published source): about 0.2 of the time to drop one
    # log cycle, so K = 45 days gives about 9–10 days.
    assert 9.0 <= critical_time_days(45.0) <= 10.0


def test_runoff_end_lag_from_area():
    # Linsley, Kohler & Paulhus: N = A^0.2 days with A in mi²; 1 mi² = 2.589988110336 km² (NIST).
    assert runoff_end_lag_days(2.589988110336) == pytest.approx(1.0)
    assert runoff_end_lag_days(2.589988110336 * 32.0) == pytest.approx(2.0)
    # The brief's km² form: N ≈ 0.827 A^0.2.
    for area in (5.0, 100.0, 1300.0):
        assert runoff_end_lag_days(area) == pytest.approx(0.827 * area**0.2, rel=1e-3)


def test_potential_groundwater_discharge_equals_the_integral_of_the_recession():
    k, q = 37.0, 2.5  # days, m³/s
    integral, _ = quad(lambda t: q * 86400.0 * 10.0 ** (-t / k), 0.0, np.inf)
    assert potential_groundwater_discharge_m3(q, k) == pytest.approx(integral, rel=1e-9)


def test_displacement_volume_is_twice_the_change_in_potential_discharge():
    # Rorabaugh (1964): R = 2 (Q2 − Q1) K / 2.3026, i.e. twice the change in V at Tc.
    k, q1, q2 = 60.0, 1.0, 1.8
    expected = 2.0 * (
        potential_groundwater_discharge_m3(q2, k) - potential_groundwater_discharge_m3(q1, k)
    )
    assert displacement_recharge_m3(q1, q2, k) == pytest.approx(expected, rel=1e-12)
    assert displacement_recharge_m3(q1, q2, k) == pytest.approx(
        2 * 0.8 * 86400 * 60 / 2.3026, rel=1e-4
    )


def _sawtooth(k=40.0, days=1500, spacing=60, seed=3, noise=0.0):
    """Exponential recessions with K, restarted by a jump every ``spacing`` days."""
    rng = np.random.default_rng(seed)
    q = np.empty(days)
    level = 1.0
    for i in range(days):
        if i % spacing == 0:
            level *= 4.0
        q[i] = level
        level *= 10.0 ** (-1.0 / k)
    if noise:
        q *= rng.lognormal(0.0, noise, days)
    return pd.Series(q, index=pd.date_range("2001-01-01", periods=days, freq="D"))


def test_segment_slopes_match_scipy_linregress():
    flow = _sawtooth(noise=0.02)
    x = log_flow(flow)
    rises = find_rises(x, 2.0, 0.05)
    segs = recession_segments(x, rises, 2.0, min_days=7)
    assert len(segs) >= 20
    for _, row in segs.head(5).iterrows():
        days = np.arange(int(row["first"]), int(row["last"]) + 1)
        ref = linregress(days, x[days])
        assert row["slope"] == pytest.approx(ref.slope, rel=1e-9)
        assert row["r2"] == pytest.approx(ref.rvalue**2, rel=1e-9)


@pytest.mark.parametrize("k", [15.0, 40.0, 150.0])
def test_recession_index_recovered_from_exact_recessions(k):
    flow = _sawtooth(k=k, days=4000, spacing=int(max(2 * k, 30)))
    x = log_flow(flow)
    rises = find_rises(x, 2.0, 0.05)
    est = estimate_recession_index(x, rises, 2.0)
    assert est.days == pytest.approx(k, rel=1e-6)
    assert est.segments_used == len(est.segments)


def test_recession_index_with_noise_has_an_interval_around_it():
    flow = _sawtooth(k=40.0, days=6000, noise=0.02)
    x = log_flow(flow)
    rises = find_rises(x, 2.0, 0.05)
    est = estimate_recession_index(x, rises, 2.0)
    assert est.days == pytest.approx(40.0, rel=0.05)
    assert est.low <= est.days <= est.high
    assert est.high - est.low < 0.2 * est.days


def test_segments_never_cross_a_gap():
    flow = _sawtooth(k=40.0)
    flow.iloc[100:103] = np.nan
    x = log_flow(flow)
    rises = find_rises(x, 2.0, 0.05)
    segs = recession_segments(x, rises, 2.0, min_days=3)
    for _, row in segs.iterrows():
        assert np.isfinite(x[int(row["first"]) : int(row["last"]) + 1]).all()


def test_warnings_for_few_segments_and_unusual_k():
    assert any("fewer than 10" in w for w in recession_warnings(40.0, 4))
    assert any("outside the usual" in w for w in recession_warnings(500.0, 40))
    assert recession_warnings(40.0, 40) == []
    assert recession_warnings(40.0) == []  # a K the user gave has no segment count


def test_bootstrap_in_whole_numbers_matches_floats():
    """Whole-day weights go through the resamples as int32; the interval is the same as with
    the weights as floats (sums of whole numbers are exact in both)."""
    from recharge_atlas.algorithms.recession import _k_from, _resample_counts, _whole_weights

    rng = np.random.default_rng(5)
    slopes = np.sort(-rng.uniform(0.002, 0.05, 300))
    days = rng.integers(7, 120, 300).astype(float)
    assert _whole_weights(days, 300).dtype == np.int32
    assert _whole_weights(days + 0.5, 300).dtype == float
    counts = _resample_counts(300, 200, 0)
    as_int = _k_from(slopes, counts * _whole_weights(days, 300)[None, :], 0.5)
    as_float = _k_from(slopes, counts * days[None, :], 0.5)
    np.testing.assert_array_equal(as_int, as_float)


def test_a_rise_too_small_for_an_event_still_breaks_a_segment():
    """Each recession of the series solution (Rorabaugh 1960) carries a second, small recharge
    pulse whose rise (25 %) lies under the event threshold (five times the 5 % noise): no segment
    may run across it, and K stays within 3 % of the truth."""
    from recharge_atlas.algorithms.analytic import strip_aquifer_daily_response
    from recharge_atlas.algorithms.recession import estimate_recession_index, recession_breaks
    from recharge_atlas.algorithms.rises import find_rises, log_flow, rise_threshold

    k, days = 45.0, 100 * 80
    rng = np.random.default_rng(7)
    kernel = strip_aquifer_daily_response(k, days)
    pulses = np.zeros(days)
    pulses[::80] = rng.uniform(30.0, 60.0, days // 80)
    gw = np.convolve(pulses, kernel)[:days]
    small_days = np.arange(35, days, 80)
    small = np.zeros(days)
    small[small_days] = 0.25 * gw[small_days] / kernel[0]
    flow = (gw + np.convolve(small, kernel)[:days]) * rng.lognormal(0.0, 0.05, days)
    x = log_flow(flow)
    threshold = rise_threshold(x)
    assert threshold > np.log10(1.25)  # the small storms are not events
    found = np.intersect1d(recession_breaks(x), np.concatenate((small_days, small_days + 1)))
    assert found.size >= 0.15 * small_days.size  # under this noise, only some can be told
    rises = find_rises(x, 2.0, threshold)
    recession = estimate_recession_index(x, rises, 2.0)
    segments = recession.segments
    for day in found:
        assert not ((segments["first"] < day) & (segments["last"] >= day)).any()
    assert recession.days == pytest.approx(k, rel=0.03)


def test_small_rises_left_inside_recessions_are_counted():
    # Day-to-day steps along a recession scatter evenly about −1/K under gauging noise alone
    # (as many beyond 3 robust standard deviations above as below: 0.13 % each for a normal
    # variable); storms too small to count as events add steps far above it.
    from recharge_atlas.algorithms.recession import rising_share

    rng = np.random.default_rng(5)
    k, days = 40.0, 3000
    clean = 2.0 - np.arange(days) / k + 0.01 * rng.standard_normal(days)
    segments = {"first": np.array([0]), "last": np.array([days - 1])}
    assert abs(rising_share(clean, segments, k)) < 0.005
    bumped = clean.copy()
    for day in rng.choice(days - 10, 150, replace=False):
        bumped[day:] += 0.06  # 15 % rises, below a rise threshold of 5σ
    assert rising_share(bumped, segments, k) > 0.03
    none = {"first": np.array([], int), "last": np.array([], int)}
    assert np.isnan(rising_share(clean, none, k))
