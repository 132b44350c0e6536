"""K's interval from whole water years, the reading error of a daily record, and the recharge band.

Sources outside the project:
* the strip-aquifer series solution after an instantaneous recharge pulse (Rorabaugh 1960;
  Glover 1964), in daily means (``analytic.strip_aquifer_daily_response``), and Rorabaugh's
  (1964) critical time 0.2144 K and displacement R = 2 (Q2 − Q1) K / ln 10;
* Student's t quantiles from a printed table (t(0.95, 2) = 2.920, t(0.95, 9) = 1.833; any
  statistics text; values from memory, checked against scipy.stats.t);
* invented gauges whose truth is the generator's own recharge (benchmarks/band_coverage.py).
"""

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from recharge_atlas.algorithms.analytic import strip_aquifer_daily_response
from recharge_atlas.algorithms.annual import mean_recharge_band, recharge_band
from recharge_atlas.algorithms.discharge import GaugeRecord
from recharge_atlas.algorithms.pipeline import Settings, gauge_hydrology
from recharge_atlas.algorithms.recession import (
    _few_years_factor,
    combine_segments,
    estimate_recession_index,
    reading_error,
    reading_offset,
    timing_spread,
)
from recharge_atlas.algorithms.rises import find_rises, log_flow

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))
from band_coverage import AREA, invented_gauge  # noqa: E402

LN10 = np.log(10.0)


def _sawtooth(ks_by_year, noise, seed=3, spacing=30):
    """Exponential recessions restarted every ``spacing`` days; year ``i`` recedes at
    ``ks_by_year[i]`` days per log cycle (365-day years from the start)."""
    rng = np.random.default_rng(seed)
    days = 365 * len(ks_by_year)
    q = np.empty(days)
    level = 1.0
    for i in range(days):
        if i % spacing == 0:
            level *= 4.0
        q[i] = level
        level *= 10.0 ** (-1.0 / ks_by_year[i // 365])
    q *= rng.lognormal(0.0, noise, days)
    return log_flow(q)


def _old_and_new(x):
    rises = find_rises(x, 2.0, 0.05)
    new = estimate_recession_index(x, rises, 2.0)
    segments = new.segment_columns
    # Today's interval before this change: every segment resampled on its own.
    old = combine_segments(segments, groups=np.arange(len(segments)))
    return old, new


def test_small_sample_factor_follows_students_t():
    # t(0.95, 2) = 2.920 and t(0.95, 9) = 1.833 (printed tables), z(0.95) = 1.645.
    assert _few_years_factor(3) == pytest.approx(2.920 / 1.645 * np.sqrt(3 / 2), rel=1e-3)
    assert _few_years_factor(10) == pytest.approx(1.833 / 1.645 * np.sqrt(10 / 9), rel=1e-3)


def test_interval_is_wider_than_resampling_segments_and_holds_k():
    x = _sawtooth([40.0] * 16, noise=0.05)
    (_, old_low, old_high), new = _old_and_new(x)
    assert new.low <= 40.0 <= new.high
    assert new.high - new.low > old_high - old_low
    assert new.high - new.low < 0.2 * new.days  # but not uselessly wide


def test_interval_spans_two_kinds_of_years():
    # 12 years recede at K = 40 days and 8 at K = 55, in random order (say: wet years whose
    # recessions carry evapotranspiration differently). Resampling years moves the mix, and so
    # the median; resampling 500 segments one by one never does.
    rng = np.random.default_rng(1)
    ks = rng.permutation([40.0] * 12 + [55.0] * 8)
    x = _sawtooth(list(ks), noise=0.01)
    (_, old_low, old_high), new = _old_and_new(x)
    assert new.low <= 41.0 and new.high >= 54.0
    assert old_high < 45.0  # the old interval saw only one kind of year


def test_few_years_are_widened_and_flagged():
    x = _sawtooth([40.0, 44.0], noise=0.03)
    rises = find_rises(x, 2.0, 0.05)
    two = estimate_recession_index(x, rises, 2.0)
    assert any("only 2 water years" in w for w in two.warnings)
    assert two.low <= two.days <= two.high
    # Two years' K differ by 10 %: with two years the interval must hold both.
    assert two.low <= 40.5 and two.high >= 43.5


# ------------------------------------------------------------------ reading error


@pytest.mark.parametrize("k", [10.0, 20.0, 45.0, 90.0])
@pytest.mark.parametrize("after_tc", [0, 1, 4])
def test_reading_offset_is_the_series_solution_read_from_daily_means(k, after_tc):
    """One pulse R = 1 at noon of day 0 (Rorabaugh 1960 series solution, daily means), read on
    day d at or after the critical time and moved along K to Tc = 0.2144 K: twice the potential
    discharge there (Rorabaugh 1964) is 1 + the offset."""
    kernel = strip_aquifer_daily_response(k, 400)
    tc = 0.2144 * k
    d = int(np.ceil(tc)) + after_tc
    read = 2.0 * kernel[d] * 10.0 ** ((d - tc) / k) * k / LN10
    assert 1.0 + reading_offset(k, d) == pytest.approx(read, rel=1e-6)


def test_reading_offset_late_is_rorabaughs_critical_time_shortfall():
    # Read late, only the first term is left: (16/π²) 10^(−0.2144) = 0.9895, i.e. 0.4947 R
    # rather than R/2 (Rorabaugh 1964's critical time against the series solution), times the
    # daily-mean factor sinh(α/2)/(α/2), α = ln 10 / K.
    k = 60.0
    alpha = LN10 / k
    expected = 16.0 / np.pi**2 * 10.0**-0.2144 * np.sinh(alpha / 2) / (alpha / 2)
    assert 1.0 + reading_offset(k, 3.0 * k) == pytest.approx(expected, rel=1e-9)
    assert expected / 2.0 == pytest.approx(0.4947, abs=2e-4)


@pytest.mark.parametrize("k", [10.0, 30.0])
def test_timing_spread_matches_pulses_at_any_time_of_day(k):
    """Pulses at random times of their day (series solution in daily means), each read on the
    same day after the peak day: the spread of the readings is the timing spread."""
    rng = np.random.default_rng(2)
    tc = 0.2144 * k
    d = int(np.ceil(tc)) + 2
    reads = [
        2.0 * strip_aquifer_daily_response(k, d + 1, u)[d] * 10.0 ** ((d - tc) / k) * k / LN10
        for u in rng.random(400)
    ]
    assert np.std(reads) / np.mean(reads) == pytest.approx(timing_spread(k), rel=0.12)
    assert timing_spread(k) == pytest.approx(LN10 / (k * np.sqrt(12.0)), rel=0.01)


def test_gauging_noise_part_of_the_reading_error():
    """Q1 and Q2 each read off by 10^ε (ε normal, σ = 0.02 log10): the recharge
    R = 2 (Q2 − Q1) K / ln 10 (Rorabaugh 1964) scatters as the reading error says."""
    k, q1, q2, sigma = 30.0, 2.0, 3.0, 0.02
    rng = np.random.default_rng(4)
    e1, e2 = rng.normal(0.0, sigma, (2, 100_000))
    volumes = 2.0 * (q2 * 10**e2 - q1 * 10**e1) * 86400.0 * k / LN10
    _, spread = reading_error(k, 8.0, q1, q2, sigma)
    recharge = 2.0 * (q2 - q1) * 86400.0 * k / LN10
    gauging = np.sqrt(spread**2 - (timing_spread(k) * recharge) ** 2)
    assert np.std(volumes) == pytest.approx(gauging, rel=0.02)


# ------------------------------------------------------------------ the band


def test_band_always_holds_the_estimate():
    rng = np.random.default_rng(0)
    r = rng.normal(100.0, 50.0, 5000)
    a = r + rng.normal(0.0, 20.0, 5000)  # K ends anywhere: both above, both below, astride
    b = r + rng.normal(0.0, 20.0, 5000)
    for systematic, spread in ((0.0, 0.0), (rng.random(5000), 5 * rng.random(5000))):
        low, high = recharge_band(r, a, b, systematic, spread)
        assert np.all(low <= r) and np.all(r <= high)
    # The gauge that showed 431–443 around 444: both K ends below the estimate.
    low, high = recharge_band(444.0, 431.0, 443.0, 2.0, 1.0)
    assert low <= 431.0 and high > 444.0
    low, high = recharge_band(100.0, np.nan, np.nan)
    assert np.isnan(low) and np.isnan(high)  # no K interval (K given): no band


@pytest.mark.parametrize("k, noise, seed", [(12.0, 0.05, 0), (45.0, 0.02, 1)])
def test_pipeline_band_holds_its_estimate_year_by_year_and_on_average(k, noise, seed):
    flow, _ = invented_gauge(k, seed, noise, years=8)
    result = gauge_hydrology(GaugeRecord("G", flow), AREA, Settings())
    assert result.recharge_mm_per_year_low <= result.recharge_mm_per_year
    assert result.recharge_mm_per_year <= result.recharge_mm_per_year_high
    annual = result.annual
    finite = np.isfinite(annual["recharge_low_mm"])
    assert finite[annual["complete"]].all()
    assert (annual["recharge_low_mm"][finite] <= annual["recharge_mm"][finite]).all()
    assert (annual["recharge_mm"][finite] <= annual["recharge_high_mm"][finite]).all()
    # The mean's band is narrower than the mean of the years' bands (reading errors of
    # different years are independent), and wider than nothing.
    complete = annual[annual["complete"]]
    mean_of_years = (complete["recharge_high_mm"] - complete["recharge_low_mm"]).mean()
    width = result.recharge_mm_per_year_high - result.recharge_mm_per_year_low
    assert 0.0 < width < mean_of_years


def test_mean_band_adds_reading_errors_of_years_in_quadrature():
    annual = pd.DataFrame(
        {
            "water_year": [2001, 2002, 2003, 2004],
            "recharge_m3": [100.0, 120.0, 80.0, 100.0],
            "complete": [True, True, True, True],
        }
    )
    peaks = pd.to_datetime(["2001-01-10", "2002-01-10", "2003-01-10", "2004-01-10"])
    used = np.ones(4, bool)
    at_k = {"peak_date": peaks, "used": used, "recharge_m3": annual["recharge_m3"].to_numpy()}
    reading = {
        "peak_date": peaks,
        "used": used,
        "systematic_m3": np.full(4, 1.0),
        "spread_m3": np.full(4, 4.0),
    }
    low, high = mean_recharge_band(annual, at_k, at_k, reading)
    half = np.hypot(1.645 * np.sqrt(4 * 16.0) / 4, 1.0)  # s̄ = √(Σ s²)/n = 2, ē = 1
    assert (low, high) == pytest.approx((100.0 - half, 100.0 + half), rel=1e-4)


@pytest.mark.parametrize("k, seed", [(25.0, 0), (30.0, 1)])
def test_band_holds_the_truth_where_the_estimate_is_unbiased(k, seed):
    """Invented gauges (series solution, storms at any time of day, 2 % noise) where the
    estimate is within about 1 % of the truth: the 90 % band of the mean must hold the truth
    (the generator's own recharge over the complete water years)."""
    flow, truth = invented_gauge(k, seed, 0.02)
    result = gauge_hydrology(GaugeRecord("G", flow), AREA, Settings())
    complete = result.annual.loc[result.annual["complete"], "water_year"]
    true_mean = truth.loc[complete].mean()
    assert result.recharge_mm_per_year_low <= true_mean <= result.recharge_mm_per_year_high
