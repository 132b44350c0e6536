"""How often the 90 % recharge band holds the truth, on invented gauges from the analytic response.

Each gauge: storm-day recharge through the strip-aquifer series solution (Rorabaugh 1960;
Glover 1964), each storm at a random time of its day, quickflow ending within the runoff-end
lag, lognormal gauging noise, storms close enough together that many run into each other. The
truth is the generator's own recharge per water year (never the pipeline's), averaged over the
complete water years. Prints, per family, the mean error of the estimate and how often the band
holds the truth: for the mean over years, and year by year.

Run: ``PYTHONPATH=<worktree-path> python benchmarks/band_coverage.py``
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from recharge_atlas.algorithms.analytic import strip_aquifer_daily_response
from recharge_atlas.algorithms.discharge import GaugeRecord
from recharge_atlas.algorithms.pipeline import Settings, gauge_hydrology
from recharge_atlas.algorithms.recession import runoff_end_lag_days
from recharge_atlas.sample_layers.generate import _quickflow_kernel

AREA = 300.0
#: Times of day a storm may come at (fractions of the day, the centres of eight bins).
TIMES = (np.arange(8) + 0.5) / 8


def invented_gauge(k, seed, noise, years=20, area=AREA, quick=0.03, year_spread=0.3):
    """Daily flow (m³/s) and the true recharge per water year (mm) of one invented gauge."""
    rng = np.random.default_rng(seed)
    skip = 365
    days = 365 * years + skip
    dates = pd.date_range("1990-10-01", periods=days, freq="D")
    winter = 0.5 * (1 + np.cos(2 * np.pi * (dates.day_of_year.to_numpy() - 20) / 365.25))
    water_year = np.asarray(dates.year + (dates.month >= 10))
    wetness = rng.lognormal(0.0, year_spread, water_year.max() - water_year.min() + 1)
    chance = (0.02 + 0.07 * winter) * wetness[water_year - water_year.min()]
    rain = np.where(rng.random(days) < chance, rng.gamma(1.3, 18.0, days), 0.0)
    recharge = (0.05 + 0.4 * winter) * np.clip(rain - 5.0, 0.0, None)
    when = rng.integers(0, TIMES.size, days)
    lag = float(runoff_end_lag_days(area))
    gw = np.zeros(days)
    qf = np.zeros(days)
    span = min(days, int(20 * k))
    for i, t in enumerate(TIMES):
        here = when == i
        gw += np.convolve(np.where(here, recharge, 0.0), strip_aquifer_daily_response(k, span, t))[
            :days
        ]
        quickflow = _quickflow_kernel(0.8 * lag, pulse_time=t)
        qf += np.convolve(np.where(here, quick * rain**1.2, 0.0), quickflow)[:days]
    base = 0.2 * 10.0 ** (-np.arange(days) / k)
    flow = (gw + qf + base) * area * 1e3 / 86400.0 * rng.lognormal(0.0, noise, days)
    truth = pd.Series(recharge[skip:]).groupby(water_year[skip:]).sum()
    return pd.Series(flow[skip:], index=dates[skip:]), truth


def check(k, seed, noise):
    """Error of the mean, whether the band holds the truth, and the same year by year."""
    flow, truth = invented_gauge(k, seed, noise)
    result = gauge_hydrology(GaugeRecord("G", flow), AREA, Settings())
    annual = result.annual
    annual = annual[annual["complete"]].set_index("water_year")
    true_years = truth.loc[annual.index]
    true_mean = true_years.mean()
    low, high = result.recharge_mm_per_year_low, result.recharge_mm_per_year_high
    inside_years = (annual["recharge_low_mm"] <= true_years) & (
        true_years <= annual["recharge_high_mm"]
    )
    return {
        "k": k,
        "seed": seed,
        "noise": noise,
        "k_est": result.recession.days,
        "k_low": result.recession.low,
        "k_high": result.recession.high,
        "error": result.recharge_mm_per_year / true_mean - 1.0,
        "half_width": (high - low) / 2.0 / result.recharge_mm_per_year,
        "inside": bool(low <= true_mean <= high),
        "years_inside": float(inside_years.mean()),
        "year_error_sd": float((annual["recharge_mm"] / true_years - 1.0).std()),
        "year_half_width": float(
            (
                (annual["recharge_high_mm"] - annual["recharge_low_mm"]) / 2 / annual["recharge_mm"]
            ).median()
        ),
    }


def main(seeds=range(4)):
    rows = [
        check(k, seed, noise)
        for k in (10.0, 15.0, 25.0, 30.0, 45.0, 90.0)
        for noise in (0.02, 0.05)
        for seed in seeds
    ]
    table = pd.DataFrame(rows)
    pd.set_option("display.width", 160)
    print(table.round(3).to_string(index=False))
    table["family"] = np.where(table["k"] <= 25, "fast K 10-25", "K 30-90")
    summary = table.groupby(["family", "noise"]).agg(
        gauges=("inside", "size"),
        mean_error=("error", "mean"),
        half_width=("half_width", "mean"),
        mean_inside=("inside", "mean"),
        years_inside=("years_inside", "mean"),
    )
    print(summary.round(3).to_string())
    return table


if __name__ == "__main__":
    main()
