"""Recharge of each event by recession-curve displacement (Rorabaugh 1964).

For each event:

* Q1, the pre-event groundwater recession, is anchored at the lowest day before the rise and
  extrapolated along K to the critical time Tc = 0.2144 K after the peak;
* Q2, the post-event recession, is read on a clean day at least N days after the peak and no
  later than the next rise, the day nearest to peak + Tc, and moved along K to peak + Tc;
* recharge R = 2 (Q2 − Q1) K / ln 10, with Q as volume per day.

Events chain: the lowest day before one event's rise lies on the recession that follows the
event before, so that recession is both the post-event curve of one event and the pre-event
curve of the next. Long extrapolations are refused, because an error in K grows exponentially
with the span: the post-event value may be moved at most ``max_extrapolation_days`` (K/2) along
K, and the pre-event recession at most that far beyond the critical time (it always spans the
rise and Tc).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .recession import critical_time_days, displacement_recharge_m3
from .rises import Rises
from .tables import empty_table

#: Columns of the event table, in order.
EVENT_COLUMNS = [
    "peak_date",
    "rise_start_date",
    "peaks_merged",
    "critical_time_days",
    "critical_date",
    "q_before_m3s",
    "q_after_m3s",
    "pre_anchor_date",
    "pre_anchor_m3s",
    "pre_extrapolation_days",
    "post_anchor_date",
    "post_anchor_m3s",
    "post_extrapolation_days",
    "recharge_m3",
    "used",
    "anchor_in_gap",
    "note",
]


def default_max_extrapolation(recession_index_days):
    """Longest extrapolation along K we accept: K/2 days (our own rule).

    Over K/2 days an error of 10 % in K changes the extrapolated flow by about 12 %.
    """
    return 0.5 * float(recession_index_days)


def event_displacements(
    flow,
    logq,
    rises: Rises,
    recession_index_days: float,
    lag_days: float,
    max_extrapolation_days: float | None = None,
) -> pd.DataFrame:
    """Recharge of every event by recession-curve displacement.

    Parameters
    ----------
    flow : pandas.Series
        Daily flow (m³/s) on a complete daily DatetimeIndex.
    logq : array_like
        log10 of ``flow`` with NaN on unusable days.
    rises : Rises
        The record's events.
    recession_index_days : float
        K.
    lag_days : float
        Runoff-end lag N: the post-event anchor is at least this many days after the peak.
    max_extrapolation_days : float, optional
        Longest span (days) to move the post-event value along K, and to carry the pre-event
        recession beyond the critical time; default K/2.

    Returns
    -------
    pandas.DataFrame
        One row per event with :data:`EVENT_COLUMNS`. Events that cannot be measured have
        ``used`` False, a null recharge and a ``note`` saying why.
    """
    k = float(recession_index_days)
    if max_extrapolation_days is None:
        max_extrapolation_days = default_max_extrapolation(k)
    x = np.asarray(logq, dtype=float)
    q = np.asarray(flow, dtype=float)
    dates = pd.DatetimeIndex(flow.index)
    n_events = len(rises)
    if n_events == 0 or not np.isfinite(k) or k <= 0:
        return empty_table(EVENT_COLUMNS)

    tc = float(critical_time_days(k))
    peak = rises.peak
    start = rises.rise_start
    target = peak + tc  # the critical time, as a fractional day position

    # Pre-event: anchored at the lowest day before the rise, moved along K to peak + Tc.
    pre_span = target - start
    q1 = q[start] * 10.0 ** (-pre_span / k)

    # Post-event: the clean day nearest peak + Tc within [peak + N, next rise].
    lo = peak + int(np.ceil(lag_days))
    hi = rises.recession_end
    post_day = np.clip(np.rint(target).astype(int), lo, np.maximum(hi, lo))
    post_day = _nearest_clean(x, post_day, lo, hi)
    has_post = post_day >= 0
    safe_post = np.where(has_post, post_day, 0)
    post_span = np.where(has_post, safe_post - target, np.nan)
    q2 = np.where(has_post, q[safe_post] * 10.0 ** (post_span / k), np.nan)

    note = np.full(n_events, "", dtype=object)
    used = np.ones(n_events, bool)

    def refuse(mask, text):
        fresh = mask & used
        note[fresh] = text
        used[fresh] = False

    refuse(
        rises.start_in_gap,
        "rise begins less than N days after a gap or the record start: pre-event anchor unsure",
    )
    refuse(rises.peak_at_gap, "record stops during the rise: peak unknown")
    refuse(~has_post, "no clean day on the recession after the peak")
    refuse(pre_span - tc > max_extrapolation_days, "pre-event extrapolation longer than the limit")
    refuse(
        np.abs(np.nan_to_num(post_span)) > max_extrapolation_days,
        "post-event extrapolation longer than the limit",
    )
    note[used & (rises.peaks_merged > 1)] = "peaks merged"
    anchor_in_gap = rises.start_in_gap | rises.peak_at_gap | ~has_post

    recharge = np.where(used, displacement_recharge_m3(q1, q2, k), np.nan)
    critical = dates[peak] + pd.to_timedelta(tc, unit="D")
    frame = pd.DataFrame(
        {
            "peak_date": dates[peak],
            "rise_start_date": dates[start],
            "peaks_merged": rises.peaks_merged.astype(int),
            "critical_time_days": tc,
            "critical_date": critical.floor("D"),
            "q_before_m3s": np.where(used, q1, np.nan),
            "q_after_m3s": np.where(used, q2, np.nan),
            "pre_anchor_date": dates[start],
            "pre_anchor_m3s": q[start],
            "pre_extrapolation_days": pre_span,
            "post_anchor_date": pd.DatetimeIndex(np.where(has_post, dates[safe_post], pd.NaT)),
            "post_anchor_m3s": np.where(has_post, q[safe_post], np.nan),
            "post_extrapolation_days": post_span,
            "recharge_m3": recharge,
            "used": used,
            "anchor_in_gap": anchor_in_gap,
            "note": note,
        }
    )
    return frame[EVENT_COLUMNS]


def _nearest_clean(x, wanted, lo, hi):
    """For each event, the clean day in [lo, hi] nearest to ``wanted`` (−1 when none)."""
    n = x.size
    clean = np.isfinite(x)
    idx = np.arange(n)
    prev_clean = np.maximum.accumulate(np.where(clean, idx, -1))
    next_clean = np.minimum.accumulate(np.where(clean, idx, n)[::-1])[::-1]
    w = np.clip(wanted, 0, n - 1)
    before = prev_clean[w]
    after = next_clean[w]
    ok_before = (before >= lo) & (before <= hi)
    ok_after = (after <= hi) & (after < n) & (after >= lo)
    pick = np.where(
        ok_before & ok_after,
        np.where(wanted - before <= after - wanted, before, after),
        np.where(ok_before, before, np.where(ok_after, after, -1)),
    )
    return pick
