"""The rises of the recession between measured events: the annual column, the gauge's mean, its
caution, and a run on the hard-record families (issue 13, item 4).

The term's formula is checked against Rorabaugh (1964) and the analytic strip-aquifer response
in test_displacement.py; here it is carried into the outputs."""

import numpy as np
import pytest

from recharge_atlas.algorithms.annual import annual_columns
from recharge_atlas.algorithms.pipeline import CATCHMENT_FIELDS, GaugeResult
from recharge_atlas.algorithms.quality import BETWEEN_EVENTS_SHARE, between_events_notes
from recharge_atlas.sample_layers.families import make_family, run_gauge


def test_annual_column_sums_each_water_year_in_mm():
    days = np.arange(np.datetime64("2000-10-01"), np.datetime64("2003-10-01"))
    q = np.full(days.size, 1.0)
    events = {"peak_date": np.empty(0, "datetime64[ns]"), "recharge_m3": [], "used": []}
    between = {
        "date": np.array(["2000-12-01", "2001-09-30", "2001-10-01", "2003-01-05"], "datetime64[D]"),
        "recharge_m3": np.array([1e5, -2e4, 3e4, 5e4]),
    }
    table = annual_columns(days, q, events, 100.0, 10, between_events=between)
    # water years 2001, 2002, 2003 (October start, named by the year they end)
    assert list(table["water_year"]) == [2001, 2002, 2003]
    np.testing.assert_allclose(table["recharge_between_events_mm"], [0.8, 0.3, 0.5])
    without = annual_columns(days, q, events, 100.0, 10)
    assert np.isnan(without["recharge_between_events_mm"]).all()


@pytest.mark.parametrize(
    "term, words",
    [(15.0, "rises between events by about 15 mm/yr (15%"), (-12.0, "falls faster than K")],
)
def test_a_large_term_is_flagged_in_words(term, words):
    result = GaugeResult("G1", 100.0)
    result.recharge_mm_per_year, result.recharge_between_events_mm_per_year = 100.0, term
    notes = between_events_notes(result)
    assert len(notes) == 1 and words in notes[0]


def test_a_small_term_is_not_flagged():
    result = GaugeResult("G1", 100.0)
    result.recharge_mm_per_year = 100.0
    result.recharge_between_events_mm_per_year = 0.99 * 100 * BETWEEN_EVENTS_SHARE
    assert between_events_notes(result) == []
    result.recharge_between_events_mm_per_year = np.nan
    assert between_events_notes(result) == []


def test_the_field_is_in_the_catchments_layer():
    assert "recharge_between_events_mm_per_year" in CATCHMENT_FIELDS


@pytest.mark.slow
@pytest.mark.parametrize("name", ["well_behaved", "wet_clustered", "close_pairs", "small_storms"])
def test_on_invented_records_the_term_is_small_beside_the_recharge(name):
    # Where the method's assumptions hold, the recession neither gains nor loses between events
    # beyond noise; small storms end up inside the events' readings (their bias there is K's,
    # and flagged), so the term stays small on those gauges too. Measured: within ±2.5 %.
    for gauge in make_family(name, 7, n_gauges=2):
        result = run_gauge(gauge)
        share = result.recharge_between_events_mm_per_year / result.recharge_mm_per_year
        assert abs(share) < 0.05, (gauge.gauge_id, share)
