"""The method on synthetic hard records: every number within its band, or flagged (issue 13).

Each family of :mod:`recharge_atlas.sample_layers.families` breaks one assumption of the
recession-curve displacement method (Rorabaugh 1964). Truth comes from the generator's own
recharge pulses over every complete water year. Families the method still fails are marked
``xfail`` (not strict) with the size of today's failure, so a fix shows up as XPASS.

Checks of the generator against sources outside the project:
* the strip-aquifer series solution conserves mass (all recharge returns to the stream) and its
  late-time recession falls one log cycle in K = 0.933 a²S/T days (Rorabaugh 1960; Glover 1964);
* the runoff-end lag N = A^0.2 days, A in mi² (Linsley, Kohler & Paulhus, *Hydrology for
  Engineers*); 1 mi² = 2.589988110336 km² (NIST SP 811).
"""

import functools

import numpy as np
import pytest

from recharge_atlas.sample_layers.families import (
    FAMILIES,
    OFF,
    groundwater_flow,
    make_family,
    quickflow_kernel,
    recharge_and_quickflow,
    run_gauge,
    score_family,
    score_gauge,
)

SEEDS = (101, 102, 103)

#: Families the method fails today, and by how much (benchmarks/hard_records.py, seeds 1-3,
#: and these tests' seeds). None at present: small storms still bias K and recharge far up
#: (K +50 to +150 %), but every such gauge is flagged.
FAILING = {}


@functools.cache
def _scored(name, seed):
    """The family's gauges for one seed, each scored against its truth (cached)."""
    return tuple(score_gauge(g, run_gauge(g)) for g in make_family(name, seed))


def _rows(name):
    return [row for seed in SEEDS for row in _scored(name, seed)]


def _family_param(name):
    if name in FAILING:
        return pytest.param(name, marks=pytest.mark.xfail(strict=False, reason=FAILING[name]))
    return name


def _describe(rows):
    return "; ".join(
        f"{r['gauge_id']}: recharge {100 * r['recharge_error']:+.0f}%, "
        f"K {100 * r['k_error']:+.0f}%, quality {r['quality']!r}"
        for r in rows
    )


@pytest.mark.slow
@pytest.mark.parametrize("name", [_family_param(name) for name in FAMILIES])
def test_no_gauge_is_off_while_quality_says_ok(name):
    """The product rule: a number is right within 15 % or flagged."""
    off = [r for r in _rows(name) if r["off_and_ok"]]
    assert not off, f"off by more than {OFF:.0%} while ok: {_describe(off)}"


@pytest.mark.slow
def test_well_behaved_gauges_are_ok_and_within_ten_percent():
    # The control: the method's assumptions hold, so it must both say ok (a run that flags
    # everything would pass the rule above) and be within ±10 % (issue 3's bar).
    rows = _rows("well_behaved")
    ok = [r for r in rows if r["ok"]]
    assert len(ok) >= 0.75 * len(rows), _describe([r for r in rows if not r["ok"]])
    wrong = [r for r in ok if not (abs(r["recharge_error"]) <= 0.10 and abs(r["k_error"]) <= 0.10)]
    assert not wrong, _describe(wrong)


@pytest.mark.slow
def test_units_mistake_is_flagged_on_every_gauge():
    rows = _rows("units_mistake")
    assert not [r for r in rows if r["ok"]], _describe([r for r in rows if r["ok"]])


@pytest.mark.slow
def test_band_holds_the_estimate_on_sound_records():
    # The design: low/high recharge must always contain the estimate.
    rows = [r for name in ("well_behaved", "close_pairs", "slow_runoff") for r in _rows(name)]
    assert score_family(rows)["band_holds_estimate"] == 1.0


@pytest.mark.slow
def test_band_covers_the_truth_about_nine_times_in_ten():
    # The band claims 90 % where the gauge says ok (a flagged gauge's band claims nothing).
    # With about 60 such gauges, allow down to 80 %. Before the anchors were averaged and the
    # method's allowance joined the band, it held the truth on 34 % of them.
    rows = [r for name in FAMILIES for r in _rows(name) if r["ok"]]
    assert len(rows) >= 40
    assert score_family(rows)["coverage"] >= 0.80


@pytest.mark.slow
def test_band_is_not_wide_enough_to_hold_anything():
    # A band can always be made wide enough to hold the truth; on the control it must stay
    # narrow: on average within ±6 % of the estimate (it is about ±3 % at 2 % noise).
    rows = _rows("well_behaved")
    half = [(r["high_mm"] - r["low_mm"]) / 2 / r["recharge_mm"] for r in rows]
    assert 0.01 < np.mean(half) <= 0.06, half


# ------------------------------------------------------------------ the generator itself


def test_groundwater_returns_all_recharge_to_the_stream():
    # Rorabaugh (1960) / Glover (1964): the response to a pulse integrates to the pulse, so over
    # a record followed by a long dry spell (20 K) groundwater volume equals recharge volume.
    gauge = make_family("well_behaved", 7, years=6, n_gauges=1)[0]
    k = gauge.recession_index_days
    pulses = np.concatenate([gauge.recharge.to_numpy(), np.zeros(int(20 * k))])
    assert groundwater_flow(pulses, k).sum() == pytest.approx(pulses.sum(), rel=1e-3)


@pytest.mark.parametrize("name", ["fast_aquifer", "well_behaved"])
def test_late_recession_of_a_pulse_gives_the_aquifers_k(name):
    # Rorabaugh (1960): late-time flow falls one log cycle in K = 0.933 a²S/T days (0.933 is
    # 4 ln 10 / π² rounded, taken here as printed).
    gauge = make_family(name, 3, years=2, n_gauges=1)[0]
    k = gauge.recession_index_days
    a, s, t = gauge.half_width_m, gauge.storage_coefficient, gauge.transmissivity_m2_per_day
    assert k == pytest.approx(0.933 * a**2 * s / t, rel=1e-3)
    lo, hi = FAMILIES[name].k_range
    assert lo <= k <= hi
    pulse = np.zeros(int(8 * k))
    pulse[0] = 10.0
    q = groundwater_flow(pulse, k)
    late = np.arange(int(3 * k), int(5 * k))
    slope = np.polyfit(late, np.log10(q[late]), 1)[0]
    assert -1.0 / slope == pytest.approx(k, rel=1e-3)


def test_slow_runoff_lasts_two_to_four_runoff_end_lags():
    # N = A^0.2 days with A in mi² (Linsley, Kohler & Paulhus); 1 mi² = 2.589988110336 km².
    kernel = quickflow_kernel(10.0, slow_tail=True)
    assert kernel.sum() == pytest.approx(1.0)
    assert kernel[11:].sum() == 0.0 and kernel[10] > 0.0
    for name, (low, high) in [("slow_runoff", (2.0, 4.0)), ("well_behaved", (0.6, 1.0))]:
        for gauge in make_family(name, 4, years=2):
            lag = (gauge.area_km2 / 2.589988110336) ** 0.2
            assert low * lag <= gauge.quickflow_days <= high * lag


def test_recharge_is_not_proportional_to_quickflow():
    # So that no method can pass by scaling the runoff: the storm-by-storm ratio varies widely.
    import pandas as pd

    dates = pd.date_range("2001-10-01", periods=3 * 365, freq="D")
    rain = np.where(np.arange(dates.size) % 5 == 0, 30.0, 0.0)
    rain[::15] = 12.0
    recharge, quick = recharge_and_quickflow(rain, dates)
    storms = recharge > 0
    ratio = recharge[storms] / quick[storms]
    assert ratio.std() / ratio.mean() > 0.3


def test_truth_counts_every_pulse_and_keeps_complete_years():
    for name in ("ice_gaps", "zero_flow"):
        gauge = make_family(name, 5, years=10, n_gauges=1)[0]
        truth = gauge.truth_annual
        assert truth["recharge_mm"].sum() == pytest.approx(gauge.recharge.sum())
        assert len(truth) == 10 and (truth["days"] >= 365).all()
        bad = truth["unusable"] > 0.02 * truth["days"]
        assert (truth["complete"] == ~bad).all()
        assert 0 < truth["complete"].sum() < 10  # the family spoils some years, not all
        assert gauge.recharge_mm_per_year == pytest.approx(
            truth.loc[truth["complete"], "recharge_mm"].mean()
        )


def test_small_storms_rise_ten_to_thirty_percent():
    gauge = make_family("small_storms", 6, years=6, n_gauges=1)[0]
    q = gauge.flow.to_numpy()
    days = np.flatnonzero(gauge.recharge.to_numpy() > 0)
    days = days[(days > 1) & (days < q.size - 2)]
    rises = np.array([q[d : d + 2].max() / q[d - 1] - 1.0 for d in days])
    assert 0.10 <= np.median(rises) <= 0.30


def test_units_mistake_is_the_well_behaved_flow_in_litres_per_second():
    gauge = make_family("units_mistake", 8, years=2, n_gauges=1)[0]
    assert gauge.units_factor == 1000.0
    mean_depth = gauge.flow.mean() / 1000.0 * 86400 * 365.25 / (gauge.area_km2 * 1e3)
    assert 50.0 < mean_depth < 1000.0  # mm/yr once read as L/s


def test_same_seed_same_gauges_and_unknown_family_refused():
    a = make_family("close_pairs", 9, years=2, n_gauges=2)
    b = make_family("close_pairs", 9, years=2, n_gauges=2)
    assert [g.gauge_id for g in a] == [g.gauge_id for g in b]
    assert a[0].flow.equals(b[0].flow)
    with pytest.raises(ValueError, match="unknown family"):
        make_family("no_such_family", 1)


@pytest.mark.slow
@pytest.mark.parametrize(
    "name, words",
    [("small_storms", "small rises inside the recessions"), ("zero_flow", "sudden drops")],
)
def test_flagged_for_the_right_reason(name, words):
    # Small storms below the rise threshold stay inside recession segments and lengthen K
    # (+50 to +150 %); a losing stream's recessions drop suddenly and shorten it. Each gauge
    # must say so, not only some other caution that happens to fire.
    rows = _rows(name)
    missing = [r for r in rows if words not in r["quality"]]
    assert not missing, _describe(missing)
