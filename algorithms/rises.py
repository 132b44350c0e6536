"""Finding significant rises (events) in a daily discharge record.

A rise counts only when it is larger than the gauge's noise. Turning points are chosen by a
threshold swing: a peak must stand at least ``threshold`` (in log10 units) above the lowest day
before it, and the flow must fall at least ``threshold`` below the peak before a new rise can
start. The lowest day before each rise is the anchor of the pre-event recession (Rorabaugh
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
    out = np.full(q.shape, np.nan)
    good = np.isfinite(q) & (q > 0)
    out[good] = np.log10(q[good])
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
    mad = np.median(np.abs(second - np.median(second)))
    return float(MAD_TO_SIGMA * mad / np.sqrt(6.0))


def rise_threshold(logq, min_rise=0.01, noise_multiple=5.0) -> float:
    """The smallest rise (log10 units) treated as an event: the larger of a floor and k·σ."""
    return float(max(min_rise, noise_multiple * noise_level(logq)))


def _blocks(valid):
    """Start and end (exclusive) of each run of True values."""
    padded = np.concatenate([[False], valid, [False]])
    change = np.flatnonzero(np.diff(padded.astype(np.int8)))
    return change[::2], change[1::2]


def _turning_points(x, threshold):
    """Alternating troughs and peaks of ``x`` (no NaN) whose swings all exceed ``threshold``.

    Returns two integer arrays ``(troughs, peaks)`` with ``troughs[k] < peaks[k]``: each peak
    rises at least ``threshold`` above the lowest point since the previous peak, and falls at
    least ``threshold`` (or to the end of the block) before the next trough.
    """
    n = x.size
    if n < 2:
        return np.empty(0, int), np.empty(0, int)
    # Only local extrema can be turning points; walking them is much shorter than every day.
    d = np.diff(x)
    sign = np.sign(d)
    nz = np.flatnonzero(sign)
    if nz.size == 0:
        return np.empty(0, int), np.empty(0, int)
    s = sign[nz]
    change = np.flatnonzero(s[1:] != s[:-1])
    ext = np.concatenate([[0], nz[change] + 1, [n - 1]])
    troughs, peaks = [], []
    low_i = ext[0]
    high_i = -1
    rising = False
    for i in ext[1:]:
        v = x[i]
        if not rising:
            if v < x[low_i]:
                low_i = i
            elif v - x[low_i] >= threshold:
                rising = True
                high_i = i
        else:
            if v > x[high_i]:
                high_i = i
            elif x[high_i] - v >= threshold:
                troughs.append(low_i)
                peaks.append(high_i)
                rising = False
                low_i = i
    if rising:
        troughs.append(low_i)
        peaks.append(high_i)
    return np.asarray(troughs, int), np.asarray(peaks, int)


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
            t, p = np.r_[b0, t], np.r_[hidden, p]
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
    n_groups = int(group[-1]) + 1
    first = np.flatnonzero(~joins)
    last = np.r_[first[1:] - 1, rise.size - 1]
    merged_rise = rise[first]
    # The event's peak is its highest day.
    merged_peak = np.empty(n_groups, int)
    for g, (a, b) in enumerate(zip(first, last)):
        candidates = peak[a : b + 1]
        merged_peak[g] = candidates[np.argmax(x[candidates])]
    counts = (last - first + 1).astype(int)
    g_block_start = block_start[first]
    g_block_end = block_end[first]
    next_rise = np.r_[merged_rise[1:], -1]
    same_block = np.r_[g_block_start[1:] == g_block_start[:-1], False]
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
