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
