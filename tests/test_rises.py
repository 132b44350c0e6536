"""Finding events: noise-aware rises, merging of close peaks, gaps."""

import numpy as np
import pytest

from recharge_atlas.algorithms.rises import find_rises, log_flow, noise_level, rise_threshold


def test_log_flow_blanks_zero_negative_and_missing():
    out = log_flow([10.0, 0.0, -1.0, np.nan, 1.0])
    assert out[0] == 1.0 and out[-1] == 0.0
    assert np.isnan(out[1:4]).all()


def test_noise_level_recovers_white_noise_on_a_recession():
    # σ of log10 noise is recovered from second differences (√6 σ) within ~10 %.
    rng = np.random.default_rng(1)
    sigma = 0.01
    x = -np.arange(5000) / 40.0 + rng.normal(0, sigma, 5000)
    assert noise_level(x) == pytest.approx(sigma, rel=0.1)


def test_threshold_has_a_floor_for_clean_records():
    x = -np.arange(500) / 40.0
    assert rise_threshold(x, min_rise=0.01) == 0.01


def _series(values):
    return log_flow(np.asarray(values, dtype=float))


def test_one_event_anchor_is_the_lowest_day_before_the_rise():
    q = [10, 9, 8, 7, 30, 20, 15, 12, 11, 10, 9, 8, 7.5, 7]
    r = find_rises(_series(q), lag_days=2, threshold=0.05)
    assert list(r.rise_start) == [3] and list(r.peak) == [4]
    assert r.recession_end[0] == len(q) - 1
    assert not r.start_in_gap[0] and not r.peak_at_gap[0]


def test_rises_smaller_than_the_threshold_are_ignored():
    q = [10, 9, 8, 8.3, 7.5, 7, 6.5]  # +4 % wiggle, below a 0.05 log10 (12 %) threshold
    r = find_rises(_series(q), lag_days=2, threshold=0.05)
    assert len(r) == 0


def test_peaks_closer_than_the_lag_are_merged():
    q = [10, 9, 30, 20, 40, 25, 18, 15, 13, 12, 11, 10, 9.5, 9, 8.5, 8, 7.6, 7.2]
    r = find_rises(_series(q), lag_days=3, threshold=0.05)
    assert len(r) == 1
    assert r.peaks_merged[0] == 2
    assert r.rise_start[0] == 1 and r.peak[0] == 4  # the highest peak of the group


def test_peaks_further_apart_stay_separate_and_chain():
    q = [10, 9, 30, 20, 15, 12, 11, 40, 25, 18, 15, 13, 12, 11]
    r = find_rises(_series(q), lag_days=2, threshold=0.05)
    assert len(r) == 2
    # The first event's recession ends at the second event's rise start: one curve links them.
    assert r.recession_end[0] == r.rise_start[1] == 6


def test_rise_straight_after_a_gap_is_flagged():
    q = [10, 9, np.nan, np.nan, 8, 30, 20, 15, 12, 11, 10]
    r = find_rises(_series(q), lag_days=2, threshold=0.05)
    assert len(r) == 1
    assert r.start_in_gap[0]


def test_record_ending_during_a_rise_is_flagged():
    q = [10, 9, 8, 7, 6.8, 6.6, 20, 30]
    r = find_rises(_series(q), lag_days=2, threshold=0.05)
    assert len(r) == 1 and r.peak_at_gap[0]


def _turning_points_alone(x, threshold):
    """Troughs and peaks of one gap-free block, day by day from the definitions (a reference:
    the module finds them for every block at once)."""
    from scipy.signal import find_peaks

    n = x.size
    if n < 2:
        return [], []
    peaks = list(find_peaks(x, prominence=threshold)[0])
    tail_from = peaks[-1] + 1 if peaks else 0
    if tail_from < n - 1:
        tail = x[tail_from:]
        low = tail_from + int(np.argmin(tail))
        if x[-1] >= tail.max() and x[-1] - x[low] >= threshold and low < n - 1:
            peaks.append(n - 1)
    pairs, previous = [], -1
    for p in peaks:
        span = x[previous + 1 : p + 1]
        trough = previous + 1 + int(np.flatnonzero(span == span.min())[-1])  # latest of equals
        if trough < p:
            pairs.append((trough, p))
        previous = p
    return [t for t, _ in pairs], [p for _, p in pairs]


def _rises_block_by_block(x, lag, threshold):
    """The events of a record found one gap-free block at a time, with the rules the module
    states (gap rises, merging within a block, flags), as plain loops."""
    valid = np.isfinite(x)
    edges = np.flatnonzero(np.diff(np.concatenate([[0], valid.astype(int), [0]])))
    events = []  # (rise, peak, block start, block end)
    previous_end = -1
    for b0, b1 in zip(edges[::2], edges[1::2]):
        troughs, peaks = _turning_points_alone(x[b0:b1], threshold)
        troughs, peaks = [t + b0 for t in troughs], [p + b0 for p in peaks]
        if previous_end >= 0:
            head_end = troughs[0] if troughs else b1 - 1
            if not (troughs and head_end <= b0):
                top = b0 + int(np.argmax(x[b0 : head_end + 1]))
                if x[top] - x[previous_end] >= threshold:
                    troughs, peaks = [b0] + troughs, [top] + peaks
        events += [(t, p, b0, b1 - 1) for t, p in zip(troughs, peaks)]
        previous_end = b1 - 1
    merged = []
    for rise, peak, b0, b1 in events:
        last = merged[-1] if merged else None
        if last is not None and last["block"] == (b0, b1) and rise - last["last_peak"] < lag:
            if x[peak] > x[last["peak"]]:
                last["peak"] = peak
            last["count"] += 1
            last["last_peak"] = peak
        else:
            merged.append(
                {"rise": rise, "peak": peak, "count": 1, "last_peak": peak, "block": (b0, b1)}
            )
    out = {name: [] for name in ("rise_start", "peak", "peaks_merged", "recession_end")}
    out.update(start_in_gap=[], peak_at_gap=[])
    for i, event in enumerate(merged):
        b0, b1 = event["block"]
        following = merged[i + 1] if i + 1 < len(merged) else None
        same = following is not None and following["block"] == event["block"]
        out["rise_start"].append(event["rise"])
        out["peak"].append(event["peak"])
        out["peaks_merged"].append(event["count"])
        out["recession_end"].append(following["rise"] if same else b1)
        out["start_in_gap"].append(event["rise"] - b0 < lag)
        out["peak_at_gap"].append(event["peak"] == b1 or event["last_peak"] == b1)
    return out


@pytest.mark.parametrize("seed", range(6))
def test_every_block_at_once_gives_the_events_of_block_by_block(seed):
    """find_rises handles all gap-free blocks of a record in one pass (walls between them);
    the events must be exactly those found block by block, with plateaus, ties and short
    blocks included."""
    rng = np.random.default_rng(seed)
    for trial in range(150):
        n = int(rng.integers(1, 900))
        steps = rng.normal(0, 1, n).cumsum() * 0.05
        x = np.round(steps, 1) if trial % 3 == 1 else steps  # rounding makes plateaus and ties
        if trial % 3 == 2:
            x = np.round(rng.normal(0, 0.3, n), 1)
        for start in rng.integers(0, n, int(rng.integers(0, 30))):
            x[start : start + int(rng.integers(1, 5))] = np.nan
        threshold = float(rng.choice([0.01, 0.05, 0.1, 0.3]))
        lag = float(rng.uniform(0.5, 8.0))
        found = find_rises(x, lag, threshold)
        expected = _rises_block_by_block(x, lag, threshold)
        for name, values in expected.items():
            np.testing.assert_array_equal(
                getattr(found, name),
                np.asarray(values, dtype=getattr(found, name).dtype),
                err_msg=f"{name} (trial {trial})",
            )
