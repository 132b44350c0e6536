"""Plausibility checks on every gauge (issue 13, item 7): a river's mean flow depth, and
recharge and baseflow against the flow they are part of.

Sources beside the checks:

* the range of a river's mean annual flow depth, a few mm/yr to a few m/yr, is common practice
  (``quality.FLOW_DEPTH_MM_PER_YEAR``), not a published limit;
* the unit factors are NIST SP 811 (2008), Appendix B, through ``algorithms/units.py``:
  1 ft³ = 0.028316846592 m³ exactly, 1 L = 10⁻³ m³, 1 ML/d = 1000 m³ / 86,400 s;
* a year of 365.25 days (Julian year, 31,557,600 s), and mass balance: recharge that returns
  to the stream and baseflow are parts of the flow, so over the same years neither exceeds it.
"""

from __future__ import annotations

import html
import math
import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from test_end_to_end import run_args

from recharge_atlas.algorithms import quality, summary
from recharge_atlas.algorithms.discharge import GaugeRecord, tidy_discharge
from recharge_atlas.algorithms.pipeline import Reporter, Settings, gauge_hydrology, run_atlas
from recharge_atlas.algorithms.quality import (
    FLOW_DEPTH_MM_PER_YEAR,
    PLAUSIBILITY_CHECKS,
    flow_depth_note,
    water_balance_notes,
)
from recharge_atlas.algorithms.tables import ColumnTable
from recharge_atlas.cli import main

#: NIST SP 811 (2008), Appendix B: 1 ft³ = 0.3048³ m³ exactly.
CUBIC_FOOT_M3 = 0.3048**3
#: A Julian year, s.
YEAR_S = 365.25 * 86400.0
#: Words every flow-depth note and the summary line carry: the option and the QGIS parameter.
HINT = "check the discharge units (--units / UNITS)"
#: Words of the four checks' notes, to see that a run has none of them.
CHECK_WORDS = ("what rivers carry", "is more than the mean flow", "is above 1: the baseflow")


class Collecting(Reporter):
    def __init__(self):
        self.infos, self.warnings = [], []

    def info(self, text):
        self.infos.append(text)

    def warning(self, text):
        self.warnings.append(text)


def _run(region, factor=1.0, **settings):
    """The demo region with its discharge multiplied by ``factor``; no warning may be raised
    (overflow, underflow to inf, log of zero, division by zero)."""
    discharge = region.discharge.copy()
    discharge["discharge"] = discharge["discharge"] * factor
    reporter = Collecting()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = run_atlas(
            region.gauges, region.catchments, discharge, Settings(**settings), reporter
        )
    return result, reporter


@pytest.fixture(scope="module")
def clean_run(demo_region):
    return _run(demo_region)


# --------------------------------------------------------------------------- the demo region


def test_unchanged_demo_has_no_plausibility_flag(clean_run):
    result, reporter = clean_run
    # Its mean flow depths (250-380 mm/yr) lie well inside the range, recharge is about 0.7 of
    # the flow and the baseflow index below 1.
    for gid, gauge in result.gauges.items():
        assert gauge.implausible == [], gid
        for words in CHECK_WORDS:
            assert words not in gauge.quality_text, (gid, gauge.quality_text)
    assert result.summary["implausible"] == {} and result.summary["plausibility"] == ""
    assert not any("gauges have" in w for w in reporter.warnings)


def test_litres_read_as_cubic_metres_flag_every_gauge(demo_region, clean_run):
    """Values in L/s read as m³/s: 1000 times the flow (1 L = 10⁻³ m³)."""
    result, reporter = _run(demo_region, 1000.0)
    clean = clean_run[0]
    for gid, gauge in result.gauges.items():
        assert gauge.implausible == ["flow_depth_high"], gid
        assert "far above what rivers carry (about 1 to 5,000 mm/yr)" in gauge.quality_text
        assert "about 1,000 times too large" in gauge.quality_text, gauge.quality_text
        assert "as when values in L/s are read as m3/s" in gauge.quality_text
        assert HINT in gauge.quality_text
        # The depth quoted is the clean run's mean flow depth times 1000 (3 digits).
        flow = clean.gauges[gid].flow.to_numpy()
        depth = np.nanmean(flow) * 1000 * YEAR_S / (gauge.area_km2 * 1e3)
        assert f"mean flow depth {float(f'{depth:.3g}'):,.0f} mm/yr" in gauge.quality_text
    line = "6 of 6 gauges have a mean flow depth above what rivers carry: " + HINT
    assert result.summary["plausibility"] == line
    assert result.summary["implausible"] == {"flow_depth_high": 6}
    assert line in reporter.warnings
    # The run is a result: every gauge computed, none failed.
    assert result.summary["computed"] == 6 and result.summary["failed"] == 0
    # The report says it first, above the summary table.
    from recharge_atlas.algorithms.report import report_html

    page = report_html(result, max_gauges=1, include_year_maps=False)
    said = page.index("Check the input:")
    assert html.escape(line) in page[said : said + 400]
    assert said < page.index("<table>", page.index('id="summary"'))


def test_cubic_feet_read_as_cubic_metres_name_the_35_factor(demo_region):
    """Values written in ft³/s read as m³/s: 1 / 0.028316846592 = 35.3147 times the flow."""
    result, _ = _run(demo_region, 1.0 / CUBIC_FOOT_M3)
    assert 1.0 / CUBIC_FOOT_M3 == pytest.approx(35.3147, abs=5e-5)  # NIST SP 811
    for gid, gauge in result.gauges.items():
        assert gauge.implausible == ["flow_depth_high"], gid
        assert "about 35.3 times too large" in gauge.quality_text, gauge.quality_text
        assert "as when values in ft3/s are read as m3/s" in gauge.quality_text
        assert HINT in gauge.quality_text


def test_megalitres_per_day_read_as_cubic_metres_name_the_86_factor(demo_region):
    """ML/d read as m³/s: 86,400 s / 1000 m³ = 86.4 times the flow."""
    result, _ = _run(demo_region, 86.4)
    for gauge in result.gauges.values():
        assert "about 86.4 times too large" in gauge.quality_text, gauge.quality_text
        assert "as when values in ML/d are read as m3/s" in gauge.quality_text


def test_cubic_metres_read_as_litres_flag_the_other_way(demo_region):
    """The reverse mix-up: m³/s values declared as L/s come out 1000 times too small."""
    result, reporter = _run(demo_region, units="L/s")
    for gauge in result.gauges.values():
        assert gauge.implausible == ["flow_depth_low"]
        assert "below what rivers carry" in gauge.quality_text
        assert "about 1,000 times too small" in gauge.quality_text
        assert "as when values in m3/s are read as L/s" in gauge.quality_text
    assert reporter.warnings[-1].startswith("6 of 6 gauges have a mean flow depth below")


@pytest.mark.parametrize("factor", [1e-300, 1e-320, 1e6])
def test_absurd_scales_are_flagged_without_warnings(demo_region, factor):
    """1e-300 (and subnormal 1e-320) m³/s and a million times the flow: every gauge flagged,
    no overflow or warning (``_run`` turns warnings into errors), and no unit mix-up named,
    as none explains them."""
    result, reporter = _run(demo_region, factor)
    key = "flow_depth_low" if factor < 1 else "flow_depth_high"
    for gid, gauge in result.gauges.items():
        assert gauge.implausible == [key], (gid, gauge.quality_text)
        assert "far " + ("below" if factor < 1 else "above") in gauge.quality_text
        assert "which no mix-up of the offered units explains" in gauge.quality_text
        assert HINT + " and the catchment linked to the gauge" in gauge.quality_text
    assert reporter.warnings[-1].startswith("6 of 6 gauges have a mean flow depth")


# --------------------------------------------------------------------------- the depth


def test_flow_depth_is_the_mean_volume_over_the_area():
    """1 m³/s for a Julian year over 100 km²: 31,557,600 m³ / 10⁸ m² = 315.6 mm (by hand)."""
    assert flow_depth_note(np.ones(365), 100.0) is None
    # Put the same flow on an area making it 10,000 mm/yr: flagged, and the depth quoted.
    area = 1.0 * YEAR_S / 10_000.0 / 1e3  # km² for 10,000 mm/yr
    key, note = flow_depth_note(np.ones(365), area)
    assert key == "flow_depth_high"
    assert note.startswith("mean flow depth 10,000 mm/yr is above what rivers carry")


def test_flow_depth_range_edges():
    low, high = FLOW_DEPTH_MM_PER_YEAR
    assert (low, high) == (1.0, 5000.0)
    for depth, flagged in [(low * 1.01, False), (high * 0.99, False), (high * 1.01, True)]:
        area = YEAR_S / depth / 1e3  # 1 m³/s over this area gives ``depth`` mm/yr
        assert (flow_depth_note([1.0, 1.0], area) is not None) == flagged, depth
    assert flow_depth_note([1.0], YEAR_S / (low * 0.99) / 1e3)[0] == "flow_depth_low"


def test_flow_depth_is_skipped_without_area_or_flow():
    assert flow_depth_note([1e6] * 10, np.nan) is None
    assert flow_depth_note([1e6] * 10, 0.0) is None
    assert flow_depth_note([0.0, 0.0, np.nan], 10.0) is None  # a dry record is noted elsewhere
    assert flow_depth_note([np.nan], 10.0) is None


def test_unit_mix_up_follows_the_declared_units():
    """The factors are those of units.py (NIST SP 811): the mix-up named is an offered unit
    read as the declared one, in the direction the depth is off."""
    area = YEAR_S / 300.0 / 1e3  # km² where 1 m³/s gives 300 mm/yr
    # L/s values declared as ft3/s: 0.028316846592 / 0.001 = 28.3 times too large.
    _, note = flow_depth_note(np.full(5, CUBIC_FOOT_M3 / 1e-3), area, "ft3/s")
    assert "about 28.3 times too large" in note and "values in L/s are read as ft3/s" in note
    # m³/s values (30 mm/yr) declared as cfs (= ft3/s): 1 / 0.0283 = 35.3 times too small.
    _, note = flow_depth_note(np.full(5, 0.1 * CUBIC_FOOT_M3), area, "cfs")
    assert "below what rivers carry" in note
    assert "about 35.3 times too small" in note and "values in m3/s are read as ft3/s" in note
    # Declared m³/s, every other unit read as m³/s comes out too large: a depth too small
    # matches none, and the note gives the least factor that would bring it into the range.
    _, note = flow_depth_note(np.full(5, 1.0 / 2.55 / 300.0), area)  # 1 / 2.55 mm/yr
    assert "which no mix-up of the offered units explains" in note
    assert "at least 2.5 times too small" in note, note  # 2.55 rounded down


def test_subnormal_depth_needs_no_overflow():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        key, note = flow_depth_note([5e-324, 5e-324, 0.0], 1e6)
    assert key == "flow_depth_low"
    assert "far below what rivers carry" in note and "×10^-" in note


# --------------------------------------------------------------------------- water balance


@pytest.fixture(scope="module")
def qm04(demo_region):
    """One gauge of the demo region (55 km², 24 water years): its record and drainage area."""
    record = tidy_discharge(demo_region.discharge)["QM04"]
    area = float(demo_region.truth_gauges.set_index("gauge_id").loc["QM04", "area_km2"])
    return record, area


def _with_annual(result, **columns):
    """The result with some columns of its annual table replaced."""
    table = result.table("annual")
    changed = {name: table[name].copy() for name in table.order}
    changed.update(columns)
    result.tables["annual"] = ColumnTable(changed, table.order)


def test_recharge_above_flow_is_flagged(qm04):
    record, area = qm04
    settings = Settings().resolved()
    result = gauge_hydrology(record, area, settings)
    assert result.implausible == [] and result.quality_text == "ok"
    annual = result.table("annual")
    flow_mm = np.asarray(annual["flow_mm"], dtype=float)
    complete = np.asarray(annual["complete"], dtype=bool)
    # The check's flow volume per water year equals the annual table's flow depth × area
    # (Σ Q · 86,400 s over the water year's days, computed twice, apart).
    volume = quality._flow_m3_by_water_year(record.flow, 10, annual["water_year"])
    np.testing.assert_allclose(volume, flow_mm * area * 1e3, rtol=1e-12)
    # Recharge made 1.5 times the flow in every year (as a double count would).
    _with_annual(result, recharge_m3=np.where(complete, 1.5 * volume, np.nan))
    notes = quality._record_quality(record, result, settings)
    assert result.implausible == ["recharge_over_flow"]
    years = int(complete.sum())
    flow_mean = flow_mm[complete].mean()
    assert notes[0].startswith(
        f"mean annual recharge {float(f'{1.5 * flow_mean:.3g}'):,.0f} mm/yr is more than the "
        f"mean flow of the same {years} water years ({float(f'{flow_mean:.3g}'):,.0f} mm/yr)"
    ), notes[0]
    assert "the recession index (45 days) or the events are likely wrong" in notes[0]
    # Within the method's error of the flow (a stream fed wholly by groundwater): no flag.
    assert quality.RECHARGE_OVER_FLOW == 0.10
    _with_annual(result, recharge_m3=np.where(complete, 1.09 * volume, np.nan))
    assert water_balance_notes(result) == []
    _with_annual(result, recharge_m3=np.where(complete, 1.11 * volume, np.nan))
    assert [key for key, _ in water_balance_notes(result)] == ["recharge_over_flow"]


def test_steady_return_flow_breaks_the_method_and_is_flagged(qm04):
    """A steady inflow (an effluent, a regulated release) on top of the demo gauge, 30 times
    its median flow, breaks the method's assumption of an unregulated stream: recessions
    flatten, K comes out at some 2,300 days, and the displacement then reads some 15 % more
    recharge than the stream carries. The check says so (the flow depth, 4,300 mm/yr, stays
    in range)."""
    record, area = qm04
    spoilt = GaugeRecord("QM04", record.flow + 30 * record.flow.median())
    result = gauge_hydrology(spoilt, area, Settings())
    assert result.recession.days > 1000
    assert result.implausible == ["recharge_over_flow"]
    assert "is more than the mean flow of the same 24 water years" in result.quality_text


def test_recharge_above_flow_without_area_says_cubic_metres(qm04):
    record, _ = qm04
    result = gauge_hydrology(record, np.nan, Settings())
    annual = result.table("annual")
    volume = quality._flow_m3_by_water_year(record.flow, 10, annual["water_year"])
    _with_annual(result, recharge_m3=2.0 * volume)
    notes = quality._plausibility_notes(record, result, Settings().resolved())
    assert result.implausible == ["recharge_over_flow"]
    assert "m³/yr is more than the mean flow" in notes[0]
    assert "what rivers carry" not in " ".join(notes)  # no area: no flow-depth check


def test_baseflow_above_flow_is_flagged(qm04):
    record, area = qm04
    settings = Settings().resolved()
    result = gauge_hydrology(record, area, settings)
    assert result.baseflow_index < 1 and result.implausible == []
    result.baseflow_index = 1.2  # Σ baseflow / Σ flow as a broken separation would give
    notes = quality._record_quality(record, result, settings)
    assert result.implausible == ["baseflow_over_flow"]
    assert notes[0].startswith("baseflow index 1.20 is above 1: the baseflow exceeds the flow")
    assert "(check the baseflow method, --baseflow-method / BASEFLOW_METHOD)" in notes[0]


# --------------------------------------------------------------------------- the summary


@pytest.mark.parametrize(
    ("counts", "gauges", "said"),
    [
        ({"flow_depth_high": 5}, 6, "5 of 6 gauges have a mean flow depth above"),
        ({"flow_depth_high": 3}, 6, None),  # half is not most
        ({"flow_depth_low": 1}, 1, None),  # one gauge is not a pattern
        ({"flow_depth_low": 2}, 3, "2 of 3 gauges have a mean flow depth below"),
        ({"recharge_over_flow": 4, "baseflow_over_flow": 5}, 6, "5 of 6 gauges have more base"),
    ],
)
def test_summary_line_when_most_gauges_fail_one_check(counts, gauges, said):
    line = summary._plausibility_line(counts, gauges)
    if said is None:
        assert line == ""
    else:
        assert line.startswith(said) and line.count("\n") == 0
        assert set(PLAUSIBILITY_CHECKS) >= set(counts)


# --------------------------------------------------------------------------- the command line


def test_command_line_flags_litres_read_as_cubic_metres(tmp_path, sample_paths, capsys):
    discharge = pd.read_csv(sample_paths["discharge"], dtype={"gauge_id": str})
    discharge["discharge"] = discharge["discharge"] * 1000  # L/s, but read as m3/s
    path = tmp_path / "discharge_litres.csv"
    discharge.to_csv(path, index=False)
    out = tmp_path / "out.gpkg"
    code = main(run_args(sample_paths, out, discharge=path))
    captured = capsys.readouterr()
    assert code == 0, captured.err  # flagged results are results
    text = captured.out + captured.err
    assert "Traceback" not in text
    summary = [line for line in text.splitlines() if "6 of 6 gauges" in line]
    assert summary == [
        "caution: 6 of 6 gauges have a mean flow depth above what rivers carry: " + HINT
    ]
    layer = gpd.read_file(out, layer="catchments").dropna(subset=["gauge_id"])
    assert len(layer) == 6
    for text in layer["quality"]:
        assert "far above what rivers carry" in text and "about 1,000 times" in text
        assert HINT in text


def test_numbers_in_words():
    assert quality._number(math.log10(177_334.0)) == "177,000"
    assert quality._number(math.log10(12.34)) == "12.3"
    assert quality._number(math.log10(0.183)) == "0.18"
    assert quality._number(math.log10(3e-298)) == "3.0×10^-298"
    assert quality._number(math.log10(9.96e11)) == "1.0×10^12"
    assert quality._at_least(math.log10(20_766.0)) == "20,000"
    assert quality._at_least(math.log10(1.57)) == "1.5"
    assert quality._at_least(297.5) == "10^297"
