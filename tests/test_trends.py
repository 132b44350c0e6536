"""Mann–Kendall (Mann 1945; Kendall 1975) and Sen's slope (Sen 1968) of annual recharge,
against hand calculations from the published formulas and against scipy.stats (kendalltau,
theilslopes) as independent reference implementations. Not yet wired into the outputs."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from recharge_atlas.algorithms.trends import (
    FALLING,
    NO_TREND,
    RISING,
    _ranks,
    mann_kendall,
    mann_kendall_s,
    recharge_trend,
    s_variance,
    sen_slope,
    serial_correction,
)


def test_hand_calculation_of_a_steady_rise():
    # x = 1..5: all 10 pairs rise, S = 10; Var(S) = 5·4·15/18 = 16.667 (no ties);
    # Z = (10 − 1)/√16.667 = 2.2045; p = 2(1 − Φ(2.2045)) = 0.0275 (hand calculation).
    s, var, z, p = mann_kendall(np.arange(5), [1, 2, 3, 4, 5], serial=False)
    assert s == 10 and var == pytest.approx(16.6667, rel=1e-4)
    assert z == pytest.approx(2.2045, rel=1e-4) and p == pytest.approx(0.0275, abs=1e-4)


def test_tie_correction_by_hand():
    # x = 1, 2, 2, 3: S = 5 (one tied pair counts 0); Var = [4·3·13 − 2·1·9]/18 = 138/18.
    assert mann_kendall_s([1, 2, 2, 3]) == 5
    assert s_variance([1, 2, 2, 3]) == pytest.approx(138 / 18)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_s_and_its_variance_agree_with_scipys_kendall_tau(seed):
    rng = np.random.default_rng(seed)
    x = np.round(rng.normal(150, 30, 25), 0)  # rounded: ties, as recharge in whole mm has
    t = np.arange(x.size)
    s = mann_kendall_s(x)
    tau, p = stats.kendalltau(t, x, method="asymptotic")
    # No ties in time: tau-b = S / √(n0 (n0 − n1)), n0 = n(n−1)/2, n1 = Σ t(t−1)/2 of x.
    n0 = x.size * (x.size - 1) / 2
    _, counts = np.unique(x, return_counts=True)
    n1 = float(np.sum(counts * (counts - 1) / 2))
    assert s == pytest.approx(tau * math.sqrt(n0 * (n0 - n1)), abs=1e-6)
    # scipy's asymptotic test has no continuity correction: its z is S/√Var(S).
    assert abs(s) / math.sqrt(s_variance(x)) == pytest.approx(stats.norm.isf(p / 2), rel=1e-6)


def test_sen_slope_is_the_median_pairwise_slope_and_scipys():
    rng = np.random.default_rng(4)
    years = np.array([1991, 1992, 1994, 1995, 1997, 1998, 1999, 2001, 2003, 2004, 2005, 2008])
    x = 120 + 2.5 * (years - 1990) + rng.normal(0, 5, years.size)
    assert sen_slope(years, x) == pytest.approx(stats.theilslopes(x, years)[0], rel=1e-12)


def test_no_serial_correction_for_independent_values_and_more_for_persistent_ones():
    rng = np.random.default_rng(5)
    years = np.arange(40)
    assert serial_correction(years, rng.normal(size=40)) == pytest.approx(1.0, abs=0.5)
    # An AR(1) series with ρ = 0.8 (a slow aquifer carrying recharge over): the variance of S
    # must grow (Hamed & Rao 1998), so fewer spurious trends are called.
    persistent = np.zeros(40)
    shocks = rng.normal(size=40)
    for i in range(1, 40):
        persistent[i] = 0.8 * persistent[i - 1] + shocks[i]
    assert serial_correction(years, persistent) > 1.5


def test_trend_words_on_invented_recharge():
    # A rise of 20 mm per decade on 30 years with 10 mm of noise is found; the same noise
    # without a trend is not (fixed seed; a test that could only pass would not check this).
    rng = np.random.default_rng(6)
    years = np.arange(1991, 2021)
    noise = rng.normal(0, 10, years.size)
    rising = recharge_trend(years, 150 + 2.0 * (years - years[0]) + noise)
    assert rising["recharge_trend"] == RISING and rising["recharge_trend_p_value"] < 0.05
    assert rising["recharge_trend_mm_per_decade"] == pytest.approx(20.0, abs=5.0)
    falling = recharge_trend(years, 150 - 2.0 * (years - years[0]) + noise)
    assert falling["recharge_trend"] == FALLING
    flat = recharge_trend(years, 150 + noise)
    assert flat["recharge_trend"] == NO_TREND and flat["recharge_trend_p_value"] > 0.05


def test_too_few_years_give_no_trend_and_missing_years_are_left_out():
    short = recharge_trend(np.arange(9), np.arange(9.0))
    assert short["recharge_trend"] == "" and math.isnan(short["recharge_trend_mm_per_decade"])
    values = np.arange(12.0)
    values[[2, 5]] = np.nan
    assert recharge_trend(np.arange(12), values)["years"] == 10


def test_exact_null_distribution_matches_kendalls_table_and_the_variance_formula():
    # Kendall (1975), Rank Correlation Methods, Appendix Table 1 (from memory): for n = 4 the
    # 24 orders give S = −6, −4, …, 6 with frequencies 1, 3, 5, 6, 5, 3, 1, so
    # P(S ≥ 6) = 1/24 and P(S ≥ 4) = 4/24. Recomputed here by enumerating every order, and
    # Var(S) = n(n−1)(2n+5)/18 (no ties) checked against the exact variance for n = 4 to 7.
    import itertools
    from collections import Counter

    counts = Counter(mann_kendall_s(p) for p in itertools.permutations(range(4)))
    assert [counts[s] for s in range(-6, 7, 2)] == [1, 3, 5, 6, 5, 3, 1]
    for n in range(4, 8):
        s_values = np.array([mann_kendall_s(p) for p in itertools.permutations(range(n))])
        assert s_values.mean() == 0
        assert s_variance(np.arange(n)) == pytest.approx(np.mean(s_values.astype(float) ** 2))


@pytest.mark.slow
def test_each_gauge_carries_the_trend_of_its_complete_years():
    from recharge_atlas.sample_layers.families import make_family, run_gauge

    gauge = make_family("wet_clustered", 5, n_gauges=1)[0]
    result = run_gauge(gauge)
    annual = result.tables["annual"]
    complete = np.asarray(annual["complete"], dtype=bool)
    assert complete.sum() >= 10
    expected = recharge_trend(
        np.asarray(annual["water_year"])[complete], np.asarray(annual["recharge_mm"])[complete]
    )
    assert result.recharge_trend_mm_per_decade == pytest.approx(
        expected["recharge_trend_mm_per_decade"]
    )
    assert result.recharge_trend_p_value == pytest.approx(expected["recharge_trend_p_value"])
    assert result.recharge_trend == expected["recharge_trend"] != ""
    # Built without a trend, the invented climate should seldom show one at 5 %.
    assert result.recharge_trend_p_value > 0.001


def test_serial_correction_is_the_formula_written_out_and_ranks_are_scipys():
    # Hamed & Rao (1998), as in the module's docstring, written out a lag at a time with
    # scipy.stats.rankdata's ranks (the reference); the module adds every lag's products at
    # once and ranks by itself, which must give the very same numbers (ties included).
    rng = np.random.default_rng(7)
    for trial in range(200):
        n = int(rng.integers(4, 45))
        years = np.sort(rng.choice(np.arange(1950, 2030), n, replace=False)).astype(float)
        x = np.round(rng.normal(100, 30, n) / (10 if trial % 2 else 1))  # ties every other
        for i in range(1, n):
            x[i] += 0.7 * x[i - 1] if trial % 3 == 0 else 0.0
        ranks = stats.rankdata(x - sen_slope(years, x) * years)
        ranks = ranks - ranks.mean()
        expected = 1.0
        if np.sum(ranks**2) > 0:
            total = 0.0
            for k in range(1, n - 2):
                rho = float(np.sum(ranks[:-k] * ranks[k:])) / float(np.sum(ranks**2))
                if abs(rho) > 1.96 / math.sqrt(n):
                    total += (n - k) * (n - k - 1) * (n - k - 2) * rho
            expected = max(1.0 + 2.0 * total / (n * (n - 1) * (n - 2)), 1e-9)
        assert serial_correction(years, x) == expected
        assert np.array_equal(_ranks(x), stats.rankdata(x))
    # The p-value is the normal's two-sided tail (scipy.stats.norm.sf as the reference).
    s, var, z, p = mann_kendall(np.arange(30), rng.normal(size=30) + 0.05 * np.arange(30))
    assert p == 2 * stats.norm.sf(abs(z))
