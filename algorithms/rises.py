"""Finding significant rises (events) in a daily discharge record.

A rise counts only when it is larger than the gauge's noise. A peak counts when its
prominence (in log10 units) reaches the threshold: it stands that far above the lowest day
before it, and the flow falls that far below it before a new, higher climb. The lowest day before each rise is the anchor of the pre-event recession (Rorabaugh
1964): the daily mean on the first day of a rise already contains storm water.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: MAD of a normal variable times this factor estimates its standard deviation.
MAD_TO_SIGMA = 1.4826


def log_flow(flow) -> np.ndarray:
    """log10 of daily flow, NaN where the flow is missing, zero or negative."""
    q = np.asarray(flow, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.log10(q)
    # log10 gives -inf at zero and NaN below it or on NaN; +inf stays for an infinite flow.
    out[~np.isfinite(out)] = np.nan
    return out


def noise_level(logq) -> float:
    """Robust standard deviation of day-to-day gauging noise, in log10 units.

    Notes
    -----
    For independent noise of standard deviation σ on a smooth curve, the second difference
    ``x[i+1] − 2x[i] + x[i−1]`` has standard deviation ``√6 σ``. Its median absolute deviation,
    times 1.4826, estimates that standard deviation robustly (storm days are a minority).
    """
    x = np.asarray(logq, dtype=float)
    second = x[2:] - 2.0 * x[1:-1] + x[:-2]
    second = second[np.isfinite(second)]
    if second.size < 10:
        return 0.0
    centre = _median(second)
    mad = _median(np.abs(second - centre))
    return float(MAD_TO_SIGMA * mad / np.sqrt(6.0))


def _median(values):
    """The median, by one partial sort (no copy checks, no NaN handling: values are finite)."""
    n = values.size
    half = n // 2
    if n % 2:
        return float(np.partition(values, half)[half])
    part = np.partition(values, (half - 1, half))
    return 0.5 * float(part[half - 1] + part[half])


def rise_threshold(logq, min_rise=0.01, noise_multiple=5.0) -> float:
    """The smallest rise (log10 units) treated as an event: the larger of a floor and k·σ."""
    return float(max(min_rise, noise_multiple * noise_level(logq)))


def _blocks(valid):
    """Start and end (exclusive) of each run of True values."""
    padded = np.concatenate([[False], valid, [False]])
    change = np.flatnonzero(np.diff(padded.astype(np.int8)))
    return change[::2], change[1::2]


def _turning_points(x, threshold):
    """Troughs and peaks of ``x`` (no NaN) whose swings all exceed ``threshold``.

    Returns two integer arrays ``(troughs, peaks)`` with ``troughs[k] < peaks[k]``. A peak is
    significant when its prominence reaches ``threshold``: it stands that far above the higher
    of the lowest points separating it from higher ground on either side (so a rise counts
    once it has climbed ``threshold`` from the lowest day before it and fallen ``threshold``
    before the next climb). Each peak's trough is the lowest day since the previous significant
    peak (the latest such day on ties). A block that ends while still rising by ``threshold``
    ends on a peak. Peaks come from ``scipy.signal.find_peaks`` (compiled), with no loop over
    days.
    """
    from scipy.signal import find_peaks

    n = x.size
    if n < 2:
        return np.empty(0, int), np.empty(0, int)
    peaks, _ = find_peaks(x, prominence=threshold)
    peaks = np.asarray(peaks, dtype=int)
    # A record (or block) ending on a rise: its last day is the highest seen so far.
    tail_from = peaks[-1] + 1 if peaks.size else 0
    if tail_from < n - 1:
        tail = x[tail_from:]
        low = tail_from + int(np.argmin(tail))
        if x[n - 1] >= tail.max() and x[n - 1] - x[low] >= threshold and low < n - 1:
            peaks = np.append(peaks, n - 1)
    if peaks.size == 0:
        return np.empty(0, int), np.empty(0, int)
    # Trough of each peak: the lowest day between the previous peak (exclusive) and this one,
    # the latest of equals. The spans tile x[: last peak + 1], so reduceat covers them at once.
    starts = np.concatenate(([0], peaks[:-1] + 1))
    lengths = peaks - starts + 1
    span = x[: peaks[-1] + 1]
    lowest = np.repeat(np.minimum.reduceat(span, starts), lengths)
    at_lowest = np.where(span == lowest, np.arange(span.size), -1)
    troughs = np.maximum.reduceat(at_lowest, starts)
    keep = troughs < peaks
    return troughs[keep], peaks[keep]


def _rise_hidden_in_gap(x, previous_end, b0, b1, troughs, threshold):
    """Peak position when the block after a gap starts above the day before the gap."""
    if previous_end < 0:
        return None
    head_end = troughs[0] if troughs.size else b1 - 1
    if head_end <= b0 and troughs.size:
        return None  # the block starts on a trough: its own rise is seen and flagged
    head = x[b0 : head_end + 1]
    top = b0 + int(np.argmax(head))
    if x[top] - x[previous_end] >= threshold:
        return top
    return None


@dataclass
class Rises:
    """Events found in one record (indices are day positions in the record).

    Attributes
    ----------
    rise_start : ndarray of int
        The lowest day before each rise (anchor of the pre-event recession).
    peak : ndarray of int
        The highest day of each event.
    peaks_merged : ndarray of int
        How many separate peaks were merged into each event (1 when none).
    recession_end : ndarray of int
        The last day of the recession that follows each event: the next event's rise start, or
        the last day before a gap or the end of the record.
    start_in_gap : ndarray of bool
        The rise begins in a gap or less than N days after one (or after the record's start),
        so the lowest day before it may still carry runoff from an unseen event.
    peak_at_gap : ndarray of bool
        The record stops (gap or end) while the flow is still rising, so the peak is unknown.
    threshold : float
        The rise threshold used, in log10 units.
    """

    rise_start: np.ndarray
    peak: np.ndarray
    peaks_merged: np.ndarray
    recession_end: np.ndarray
    start_in_gap: np.ndarray
    peak_at_gap: np.ndarray
    threshold: float

    def __len__(self):
        return int(self.peak.size)


def find_rises(logq, lag_days, threshold) -> Rises:
    """Find events: significant rises, with peaks closer than the runoff-end lag merged.

    Parameters
    ----------
    logq : array_like
        log10 daily flow, NaN on missing, zero and flagged days (see :func:`log_flow`).
    lag_days : float
        Runoff-end lag N (days). A rise that starts less than N days after the previous peak
        belongs to the same event: no clean recession day lies between them.
    threshold : float
        Smallest rise treated as an event, in log10 units (see :func:`rise_threshold`).
    """
    x = np.asarray(logq, dtype=float)
    valid = np.isfinite(x)
    starts, ends = _blocks(valid)
    rise, peak, block_start, block_end = [], [], [], []
    previous_end = -1
    for b0, b1 in zip(starts, ends):
        t, p = _turning_points(x[b0:b1], threshold)
        t, p = t + b0, p + b0
        hidden = _rise_hidden_in_gap(x, previous_end, b0, b1, t, threshold)
        if hidden is not None:
            # The flow rose during the gap: keep the event so its year is not taken as
            # complete, anchored on the last day before the gap (and flagged).
            t, p = np.concatenate(([b0], t)), np.concatenate(([hidden], p))
        rise.append(t)
        peak.append(p)
        block_start.append(np.full(t.size, b0))
        block_end.append(np.full(t.size, b1 - 1))
        previous_end = b1 - 1
    rise = np.concatenate(rise) if rise else np.empty(0, int)
    if rise.size == 0:
        empty = np.empty(0, int)
        return Rises(empty, empty, empty, empty, empty.astype(bool), empty.astype(bool), threshold)
    peak = np.concatenate(peak)
    block_start = np.concatenate(block_start)
    block_end = np.concatenate(block_end)

    # Merge: a rise starting less than N days after the previous peak (same block) joins it.
    joins = np.zeros(rise.size, bool)
    joins[1:] = (rise[1:] - peak[:-1] < lag_days) & (block_start[1:] == block_start[:-1])
    group = np.cumsum(~joins) - 1
    first = np.flatnonzero(~joins)
    last = np.append(first[1:] - 1, rise.size - 1)
    merged_rise = rise[first]
    # The event's peak is its highest day (the first of equals).
    counts = (last - first + 1).astype(int)
    heights = x[peak]
    tallest = np.repeat(np.maximum.reduceat(heights, first), counts)
    hits = np.flatnonzero(heights == tallest)
    _, first_hit = np.unique(group[hits], return_index=True)
    merged_peak = peak[hits[first_hit]]
    g_block_start = block_start[first]
    g_block_end = block_end[first]
    next_rise = np.append(merged_rise[1:], -1)
    same_block = np.append(g_block_start[1:] == g_block_start[:-1], False)
    recession_end = np.where(same_block, next_rise, g_block_end)
    # Within N days of a gap or of the record's start, the flow may still carry runoff from an
    # event nobody saw, so the lowest day before the rise is no sound anchor.
    start_in_gap = (merged_rise - g_block_start) < lag_days
    peak_at_gap = (merged_peak == g_block_end) | (peak[last] == g_block_end)
    return Rises(
        rise_start=merged_rise,
        peak=merged_peak,
        peaks_merged=counts,
        recession_end=recession_end,
        start_in_gap=start_in_gap,
        peak_at_gap=peak_at_gap,
        threshold=float(threshold),
    )
