"""Trends in annual recharge: the Mann–Kendall test and Sen's slope.

* Mann–Kendall (Mann 1945; Kendall 1975): ``S = Σ_{i<j} sign(x_j − x_i)`` over the series in
  time order, with the variance under no trend corrected for tied values,
  ``Var(S) = [n(n−1)(2n+5) − Σ_t t(t−1)(2t+5)] / 18`` (t the size of each group of ties), and
  ``Z = (S − 1)/√Var`` for S > 0, ``(S + 1)/√Var`` for S < 0 (a continuity correction), 0
  otherwise; the two-sided p-value is ``2 (1 − Φ(|Z|))``.
* Serial correlation: annual recharge of a slow aquifer carries over from year to year, which
  makes the test find trends too often. The variance is corrected as Hamed & Rao (1998)
  propose (from memory of the paper): ``Var*(S) = Var(S) · n/n*``, with
  ``n/n* = 1 + 2/(n(n−1)(n−2)) Σ_k (n−k)(n−k−1)(n−k−2) ρ_k``, where ρ_k are the
  autocorrelations at lag k of the ranks of the series with Sen's slope taken out, and only
  those outside ±1.96/√n (significant at 5 %) are kept; with none, no correction.
* Sen's slope (Sen 1968): the median of ``(x_j − x_i)/(t_j − t_i)`` over all pairs, here per
  decade (scipy.stats.theilslopes gives the same median).

Years may be missing from the series (incomplete records): time is the water year itself.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

#: Fewest water years with a value before a trend is tested (our own rule, in line with common
#: practice: the test has little power below about ten values).
MIN_YEARS = 10
#: Two-sided significance level of the trend word.
ALPHA = 0.05
#: The trend words.
RISING, FALLING, NO_TREND = "rising", "falling", "no clear trend"


def mann_kendall_s(values):
    """S, the Mann–Kendall statistic of ``values`` in time order."""
    x = np.asarray(values, dtype=float)
    i, j = _pairs(x.size)
    return int(np.sign(x[j] - x[i]).sum())


@lru_cache(maxsize=64)
def _pairs(n):
    """The index pairs ``i < j`` of a series of ``n`` values (kept: every gauge of a run has
    about as many years, and these were a tenth of the trend's time)."""
    i, j = np.triu_indices(n, 1)
    i.flags.writeable = j.flags.writeable = False
    return i, j


def s_variance(values):
    """Var(S) under no trend, corrected for ties (Kendall 1975)."""
    x = np.asarray(values, dtype=float)
    n = x.size
    _, ties = np.unique(x, return_counts=True)
    ties = ties[ties > 1].astype(float)
    return (n * (n - 1) * (2 * n + 5) - float(np.sum(ties * (ties - 1) * (2 * ties + 5)))) / 18.0


def sen_slope(times, values):
    """Sen's slope: the median of the pairwise slopes (units of ``values`` per unit time)."""
    t = np.asarray(times, dtype=float)
    x = np.asarray(values, dtype=float)
    i, j = _pairs(x.size)
    dt = t[j] - t[i]
    keep = dt != 0
    return float(np.median((x[j] - x[i])[keep] / dt[keep])) if keep.any() else float("nan")


def serial_correction(times, values, slope=None):
    """Hamed & Rao's (1998) factor n/n* from the significant autocorrelations of the ranks of
    the detrended series (1 when there are none); ``slope`` is Sen's slope when known."""
    t = np.asarray(times, dtype=float)
    x = np.asarray(values, dtype=float)
    n = x.size
    if n < 4:
        return 1.0
    detrended = x - (sen_slope(t, x) if slope is None else slope) * t
    ranks = _ranks(detrended)
    ranks = ranks - ranks.mean()
    denominator = float(np.sum(ranks**2))
    if denominator == 0:
        return 1.0
    bound = 1.96 / math.sqrt(n)
    # Every lag's sum of products at once. Centred ranks are multiples of ½, so each sum is
    # exact whatever the order it is added in: the same numbers as one np.sum per lag.
    lagged = np.correlate(ranks, ranks, mode="full")[n:].tolist()  # lags 1, 2, …
    total = 0.0
    for k in range(1, n - 2):
        rho = lagged[k - 1] / denominator
        if abs(rho) > bound:
            total += (n - k) * (n - k - 1) * (n - k - 2) * rho
    return max(1.0 + 2.0 * total / (n * (n - 1) * (n - 2)), 1e-9)


def _ranks(values):
    """Ranks from 1, tied values sharing the mean of their ranks (as scipy.stats.rankdata
    gives them; exact, being whole numbers and halves)."""
    x = np.asarray(values, dtype=float)
    order = np.argsort(x, kind="stable")
    ordered = x[order]
    starts = np.flatnonzero(np.r_[True, ordered[1:] != ordered[:-1]])
    ends = np.r_[starts[1:], x.size]  # one past each group of equal values
    ranks = np.empty(x.size)
    ranks[order] = np.repeat((starts + 1 + ends) / 2.0, ends - starts)
    return ranks


def mann_kendall(times, values, serial=True, slope=None):
    """``(S, Var(S), Z, p)`` of the series; ``serial`` applies Hamed & Rao's correction
    (``slope``: Sen's slope, when known)."""
    from scipy.special import ndtr

    s = mann_kendall_s(values)
    variance = s_variance(values) * (serial_correction(times, values, slope) if serial else 1.0)
    if variance <= 0:
        return s, variance, 0.0, 1.0
    z = (s - np.sign(s)) / math.sqrt(variance) if s else 0.0
    # Φ(−|z|) is the normal's upper tail at |z| (what scipy.stats.norm.sf computes, without
    # its argument checks; the same number).
    return s, variance, float(z), float(2.0 * ndtr(-abs(z)))


def recharge_trend(water_years, recharge_mm, min_years=MIN_YEARS, alpha=ALPHA):
    """The trend of annual recharge over the given water years (NaN values left out).

    Returns a dict: ``recharge_trend_mm_per_decade`` (Sen's slope × 10),
    ``recharge_trend_p_value`` (two-sided, with the serial correction) and ``recharge_trend``
    (rising, falling or no clear trend at ``alpha``); all empty (NaN, "") with fewer than
    ``min_years`` values, and ``years`` the number used.
    """
    years = np.asarray(water_years, dtype=float)
    values = np.asarray(recharge_mm, dtype=float)
    keep = np.isfinite(years) & np.isfinite(values)
    years, values = years[keep], values[keep]
    order = np.argsort(years, kind="stable")
    years, values = years[order], values[order]
    out = {
        "recharge_trend_mm_per_decade": float("nan"),
        "recharge_trend_p_value": float("nan"),
        "recharge_trend": "",
        "years": int(years.size),
    }
    if years.size < min_years:
        return out
    slope = sen_slope(years, values)
    _s, _v, z, p = mann_kendall(years, values, slope=slope)
    word = NO_TREND
    if p < alpha:
        word = RISING if z > 0 else FALLING
    out.update(
        recharge_trend_mm_per_decade=10.0 * slope,
        recharge_trend_p_value=p,
        recharge_trend=word,
    )
    return out
