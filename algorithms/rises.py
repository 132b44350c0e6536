"""Finding significant rises (events) in a daily discharge record.

A rise counts only when it is larger than the gauge's noise. A peak counts when its
prominence (in log10 units) reaches the threshold: it stands that far above the lowest day
before it, and the flow falls that far below it before a new, higher climb. The lowest day before each rise is the anchor of the pre-event recession (Rorabaugh
1964): the daily mean on the first day of a rise already contains storm water.
"""

from __future__ import annotations

import functools
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


def median_of_five(a, b, c, d, e):
    """The median of five arrays, element by element (NaN where one of them is NaN), as
    ``np.median`` of the five stacked gives it, by comparisons alone.

    Of the first four, the larger of the two pairs' smaller values and the smaller of their
    larger values are the middle two; the median of five is the median of those two and the
    fifth. ``np.minimum`` and ``np.maximum`` carry NaN through, as ``np.median`` does.
    """
    low = np.maximum(np.minimum(a, b), np.minimum(c, d))
    high = np.minimum(np.maximum(a, b), np.maximum(c, d))
    return np.maximum(np.minimum(low, high), np.minimum(np.maximum(low, high), e))


def rise_threshold(logq, min_rise=0.01, noise_multiple=5.0, noise=None) -> float:
    """The smallest rise (log10 units) treated as an event: the larger of a floor and k·σ
    (``noise``, σ when already known; else :func:`noise_level` of ``logq``)."""
    sigma = noise_level(logq) if noise is None else float(noise)
    return float(max(min_rise, noise_multiple * sigma))


def gap_free_blocks(valid):
    """Start and end (exclusive) of each run of True values (the gap-free blocks of a record,
    given where it has a value)."""
    padded = np.concatenate([[False], valid, [False]])
    change = np.flatnonzero(np.diff(padded.astype(np.int8)))
    return change[::2], change[1::2]


def _laid_end_to_end(starts, lengths):
    """Record positions of the spans ``[start, start + length)`` laid end to end, each
    position's span, and where each span begins in that layout (lengths must be positive)."""
    span = np.repeat(np.arange(lengths.size), lengths)
    offsets = np.concatenate(([0], np.cumsum(lengths)[:-1]))
    positions = starts[span] + (np.arange(span.size) - offsets[span])
    return positions, span, offsets


def _spans(x, starts, lengths):
    """The values of the spans laid end to end, their record positions and where each span
    begins among them. Spans that follow one another without a break are a view of ``x``."""
    ends = starts + lengths
    if starts.size == 1 or np.array_equal(starts[1:], ends[:-1]):
        low, high = int(starts[0]), int(ends[-1])
        return x[low:high], np.arange(low, high), starts - low
    positions, _, offsets = _laid_end_to_end(starts, lengths)
    return x[positions], positions, offsets


def _first_at(x, starts, lengths, pick, latest=False, spans=None):
    """Position of the lowest (``pick`` = np.minimum) or highest (np.maximum) value in each span,
    the first of equals (the latest with ``latest``); ``spans`` is :func:`_spans` of them when
    already worked out."""
    values, positions, offsets = spans if spans is not None else _spans(x, starts, lengths)
    extreme = pick.reduceat(values, offsets)
    hit = values == np.repeat(extreme, lengths)
    if latest:
        return np.maximum.reduceat(np.where(hit, positions, -1), offsets)
    return np.minimum.reduceat(np.where(hit, positions, x.size), offsets)


def _turning_points(x, starts, ends, threshold):
    """Troughs and peaks of every gap-free block ``x[start:end]`` whose swings exceed ``threshold``.

    Returns ``(troughs, peaks, block)``: integer arrays with ``troughs[k] < peaks[k]`` and the
    block of each pair. A peak is significant when its prominence reaches ``threshold``: it
    stands that far above the higher of the lowest points separating it from higher ground on
    either side within its block (so a rise counts once it has climbed ``threshold`` from the
    lowest day before it and fallen ``threshold`` before the next climb). Each peak's trough is
    the lowest day since the previous significant peak of its block, or since the block's start
    (the latest such day on ties). A block that ends while still rising by ``threshold`` ends on
    a peak. A block of one day has none.

    Peaks come from ``scipy.signal.find_peaks`` (compiled) run once over all blocks laid end to
    end with a wall of +inf after each: a wall is higher ground that stops every search for
    local maxima and prominence exactly where a record of the block alone would end, so each
    block gets the peaks it gets alone. The walls themselves are dropped before prominences are
    sought. No loop over days or blocks.
    """
    from scipy.signal import find_peaks, peak_prominences

    empty = np.empty(0, int)
    lengths = ends - starts
    long_enough = np.flatnonzero(lengths >= 2)
    if long_enough.size == 0:
        return empty, empty, empty
    starts, ends, lengths = starts[long_enough], ends[long_enough], lengths[long_enough]
    if starts.size == 1:  # one block: the record itself, no walls needed
        found, _ = find_peaks(x[starts[0] : ends[0]], prominence=threshold)
        peaks = np.asarray(found, dtype=int) + starts[0]
        block = np.zeros(peaks.size, int)
    else:
        positions, span, offsets = _laid_end_to_end(starts, lengths)
        walled_at = offsets + 1 + np.arange(starts.size)  # each block's first slot after a wall
        walled = np.full(positions.size + starts.size + 1, np.inf)
        walled[positions - starts[span] + walled_at[span]] = x[positions]
        # The local maxima, walls left out before their prominence is sought: a wall's search
        # for higher ground would run to both ends of the layout (no wall is higher than
        # another), one pass over every day for each wall. The same peaks as
        # find_peaks(walled, prominence=threshold), which keeps prominences ≥ threshold.
        found, _ = find_peaks(walled)
        found = found[np.isfinite(walled[found])]
        found = found[peak_prominences(walled, found)[0] >= threshold]
        block = np.searchsorted(walled_at, found, side="right") - 1
        peaks = found - walled_at[block] + starts[block]

    # A block ending on a rise: its last day is the highest since its last peak, and stands
    # ``threshold`` above the lowest day since then.
    tail_from = starts
    if peaks.size:
        count = np.bincount(block, minlength=starts.size)
        last_peak = peaks[np.maximum(np.cumsum(count) - 1, 0)]  # blocks' peaks are in order
        tail_from = np.where(count > 0, last_peak + 1, starts)
    last = ends - 1
    open_tail = np.flatnonzero(tail_from < last)
    if open_tail.size:
        t_from, t_last = tail_from[open_tail], last[open_tail]
        t_length = t_last - t_from + 1
        spans = _spans(x, t_from, t_length)
        low = _first_at(x, t_from, t_length, np.minimum, spans=spans)
        highest = np.maximum.reduceat(spans[0], spans[2])
        rising = (x[t_last] >= highest) & (x[t_last] - x[low] >= threshold) & (low < t_last)
        peaks = np.concatenate((peaks, t_last[rising]))
        block = np.concatenate((block, open_tail[rising]))
        order = np.argsort(peaks, kind="stable")
        peaks, block = peaks[order], block[order]
    if peaks.size == 0:
        return empty, empty, empty
    # Trough of each peak: the lowest day after the previous peak of its block (or from the
    # block's start) up to the peak, the latest of equals.
    same_block = np.concatenate(([False], block[1:] == block[:-1]))
    span_from = np.where(same_block, np.concatenate(([0], peaks[:-1] + 1)), starts[block])
    troughs = _first_at(x, span_from, peaks - span_from + 1, np.minimum, latest=True)
    keep = troughs < peaks
    return troughs[keep], peaks[keep], long_enough[block[keep]]


#: Share of the fall carried along K across a gap that a rise must also clear: the recession in
#: the gap may have run up to this share slower than K (low flows often recede slower than the
#: K of the record; our own rule).
CARRIED_ALLOWANCE = 0.5


def _rises_hidden_in_gaps(x, starts, ends, troughs, block, threshold, recession_index_days=None):
    """Rises that happened in a gap. Returns ``(block, peak)`` of each.

    The head of a block is its days up to its first trough (all of it when it has none); a
    block that starts on a trough has its own rise seen and flagged. The peak is the head's
    highest day (the first of equals).

    Without K, a rise happened in the gap when the head climbs ``threshold`` above the day
    before the gap. With K, the pre-gap flow is carried along the recession across the gap
    (Rorabaugh 1964: log10 Q falls one cycle in K days), to the head's highest day ``g`` days
    after the day before the gap::

        expected = log10 Q(before) − g / K
        rise     ⇔  log10 Q(top) − expected ≥ threshold + CARRIED_ALLOWANCE · g / K

    The allowance lets the recession in the gap run slower than K (an error in K, or a slower
    recession at low flow) before a rise is read into it; so with K a rise counts when the
    head stands ``(1 − CARRIED_ALLOWANCE) g / K − threshold`` or less below the day before
    the gap: every rise the rule without K finds, and those hidden below the pre-gap flow.
    """
    later = np.arange(1, starts.size)
    if later.size == 0:
        return np.empty(0, int), np.empty(0, int)
    head_end = ends[later] - 1
    has_trough = np.zeros(later.size, bool)
    if troughs.size:
        has_trough = np.bincount(block, minlength=starts.size)[later] > 0
        first = np.minimum(np.searchsorted(block, later), troughs.size - 1)  # blocks in order
        head_end = np.where(has_trough, troughs[first], head_end)
    usable = ~has_trough | (head_end > starts[later])
    candidates, head_end = later[usable], head_end[usable]
    if candidates.size == 0:
        return np.empty(0, int), np.empty(0, int)
    top = _first_at(x, starts[candidates], head_end - starts[candidates] + 1, np.maximum)
    before_gap = ends[candidates - 1] - 1
    climb = x[top] - x[before_gap]
    k = recession_index_days
    if k is not None and np.isfinite(k) and k > 0:
        carried = (top - before_gap) / float(k)  # log cycles the recession falls to the top
        hidden = climb + carried >= threshold + CARRIED_ALLOWANCE * carried
    else:
        hidden = climb >= threshold
    return candidates[hidden], top[hidden]


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
    pulse_peak, pulse_rise, pulse_event : ndarray, optional
        The pulses of all events, in order: each day of an event's rise on which the flow grew,
        and its last peak; the growth that day (m³/s) and the event it belongs to. None means
        one pulse per event, at its peak.
    """

    rise_start: np.ndarray
    peak: np.ndarray
    peaks_merged: np.ndarray
    recession_end: np.ndarray
    start_in_gap: np.ndarray
    peak_at_gap: np.ndarray
    threshold: float
    pulse_peak: np.ndarray | None = None
    pulse_rise: np.ndarray | None = None
    pulse_event: np.ndarray | None = None

    def __len__(self):
        return int(self.peak.size)

    def pulses(self):
        """``(day, rise, event)`` of every pulse, sorted by event and day (see the attributes)."""
        if self.pulse_peak is None:
            n = self.peak.size
            return self.peak, np.ones(n), np.arange(n)
        return self.pulse_peak, self.pulse_rise, self.pulse_event

    @functools.cached_property
    def last_peak(self) -> np.ndarray:
        """The last pulse of each event (its peak when it has one pulse); worked out once, as a
        read-only array (a gauge's steps ask for it a dozen times; Rises are not changed)."""
        day, _, event = self.pulses()
        if day.size == 0:
            out = np.empty(0, int)
        else:
            out = day[np.flatnonzero(np.append(event[1:] != event[:-1], True))]
        out.flags.writeable = False
        return out


def find_rises(logq, lag_days, threshold, recession_index_days=None) -> Rises:
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
    recession_index_days : float, optional
        K. With it, a rise hidden in a gap is judged against the flow before the gap carried
        along K across the gap (with an allowance, see :func:`_rises_hidden_in_gaps`);
        without it, against the flow before the gap. Nothing else depends on K.
    """
    x = np.asarray(logq, dtype=float)
    starts, ends = gap_free_blocks(np.isfinite(x))
    troughs, peaks, block = _turning_points(x, starts, ends, threshold)
    hidden_block, hidden_peak = _rises_hidden_in_gaps(
        x, starts, ends, troughs, block, threshold, recession_index_days
    )
    # The flow rose during a gap: keep the event so its year is not taken as complete,
    # anchored on the block's first day, after the gap (and flagged).
    rise = np.concatenate((starts[hidden_block], troughs))
    if rise.size == 0:
        empty = np.empty(0, int)
        return Rises(
            empty,
            empty,
            empty,
            empty,
            empty.astype(bool),
            empty.astype(bool),
            threshold,
            empty,
            np.empty(0),
            empty,
        )
    order = np.argsort(rise, kind="stable")
    rise = rise[order]
    peak = np.concatenate((hidden_peak, peaks))[order]
    block = np.concatenate((hidden_block, block))[order]
    block_start = starts[block]
    block_end = ends[block] - 1

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
        **_rising_days(x, merged_rise, peak[last]),
    )


def _rising_days(x, rise_start, last_peak):
    """The pulses of each event: every day of its rise on which the flow grew, with the growth
    (m³/s) as its weight, and always its last peak (the storms' timing inside a run).

    A run of storms shows as days of growth between its first trough and its last peak; a
    storm whose own peak is hidden in the rise of another still shows as growth on its day.
    """
    first = np.minimum(rise_start + 1, last_peak)  # an event seen only after a gap: its peak
    positions, span, _ = _laid_end_to_end(first, last_peak - first + 1)
    # Growth since the last day with a value (across a gap for a rise hidden in it); the flow
    # is worked out on the days needed only.
    finite = np.isfinite(x)
    last_valid = np.maximum.accumulate(np.where(finite, np.arange(x.size), -1))
    before = last_valid[np.maximum(positions - 1, 0)]
    with np.errstate(invalid="ignore"):
        grown = 10.0 ** x[positions] - 10.0 ** x[np.maximum(before, 0)]
        growth = np.where(before >= 0, grown, 0.0)
    growth = np.nan_to_num(growth, nan=0.0)
    keep = (growth > 0) | (positions == last_peak[span])
    return {
        "pulse_peak": positions[keep],
        "pulse_rise": np.clip(growth[keep], 0.0, None),
        "pulse_event": span[keep],
    }
