"""The HTML report: self-contained, complete, cautious, and readable in a real browser.

Sources: the pipeline's own event table (each drawn construction must pass through the Q1 and
Q2 it reports, Rorabaugh 1964: both read at the critical time 0.2144 K after the peak); the
PNG file signature (ISO/IEC 15948); Debian's Chromium for the screenshot check.
"""

from __future__ import annotations

import base64
import dataclasses
import html
import os
import re

import numpy as np
import pandas as pd
import pytest
from browser_check import find_chromium, image_summary, screenshot

from recharge_atlas.algorithms import files, report
from recharge_atlas.algorithms.errors import InputError
from recharge_atlas.algorithms.pipeline import Settings, run_atlas
from recharge_atlas.algorithms.report import (
    CAUTIONS,
    chosen_years,
    hydrograph_figure,
    recession_figure,
    report_html,
    write_report,
)

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
IMAGE = re.compile(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"')
#: The cautions the product must state (design brief), as plain text after unescaping.
REQUIRED_CAUTIONS = [
    "homogeneous aquifer",
    "recharge spread evenly in space and quick in time",
    "no regulation, diversions, pumping or return flows",
    "perennial, baseflow-dominated streams",
    "3–1,300 km²",
    "common practice",
    "Frequent peaks, bank storage, riparian evapotranspiration and heterogeneous aquifers",
    "Halford & Mayer 2000",
    "not regional underflow",
    "qualified hydrogeologists",
]


@pytest.fixture(scope="module")
def demo(sample_paths):
    """The demo region run once for the module, with its gauges layer."""
    gauges = files.read_layer(sample_paths["gauges"], "gauges")
    catchments = files.read_layer(sample_paths["catchments"], "catchments")
    discharge = files.read_table(sample_paths["discharge"])
    settings = Settings().resolved()
    return run_atlas(gauges, catchments, discharge, settings), gauges, settings


@pytest.fixture(scope="module")
def demo_report(demo, tmp_path_factory):
    result, gauges, settings = demo
    path = tmp_path_factory.mktemp("report") / "report.html"
    write_report(result, path, gauges=gauges, settings=settings)
    return path, path.read_text(encoding="utf-8")


def _text(page):
    """The page's visible text, roughly: tags dropped, entities decoded."""
    return html.unescape(
        re.sub(r"<[^>]+>", " ", re.sub(r"<style>.*?</style>", "", page, flags=re.S))
    )


# --------------------------------------------------------------------------- content


def test_report_holds_every_gauge_with_a_section_and_a_contents_link(demo, demo_report):
    result, _, _ = demo
    _, page = demo_report
    for number, gid in enumerate(result.gauges, start=1):
        assert f'<section class="gauge" id="gauge-{number}"><h2>{gid}' in page
        assert f'href="#gauge-{number}"' in page
    # Sections come in the run's order.
    positions = [page.index(f'id="gauge-{n}"') for n in range(1, len(result.gauges) + 1)]
    assert positions == sorted(positions)


def test_report_states_the_cautions_before_any_gauge(demo_report):
    _, page = demo_report
    text = _text(page)
    for phrase in REQUIRED_CAUTIONS:
        assert phrase in text, phrase
    first_gauge = page.index('class="gauge"')
    assert page.index("Read this first") < first_gauge
    assert page.index(html.escape(CAUTIONS[-1][1])) < first_gauge


def test_report_opens_with_the_map_and_the_run_summary(demo, demo_report):
    result, _, _ = demo
    _, page = demo_report
    s = result.summary
    assert (
        f"{s['gauges']} gauges: {s['computed']} computed, {s['flagged']} flagged, "
        f"{s['failed']} failed." in _text(page)
    )
    assert page.index('id="maps"') < page.index('id="summary"') < page.index('class="gauge"')
    assert "Settings of this run" in page and "water year start" in page


def test_report_is_self_contained(demo_report):
    _, page = demo_report
    lowered = page.lower()
    for forbidden in ("http://", "https://", "<script", "<link", "@import", "url(", "<iframe"):
        assert forbidden not in lowered, forbidden
    images = IMAGE.findall(page)
    assert len(images) >= 3
    for data in images:
        assert base64.b64decode(data)[:8] == PNG_SIGNATURE
    assert len(page.encode("utf-8")) < 5_000_000  # a few MB at most for the demo


def test_every_figure_is_embedded_for_each_gauge(demo, demo_report):
    result, _, _ = demo
    _, page = demo_report
    for number in range(1, len(result.gauges) + 1):
        start = page.index(f'id="gauge-{number}"')
        end = page.find('<section class="gauge"', start + 1)
        section = page[start : end if end > 0 else len(page)]
        assert len(IMAGE.findall(section)) == 2  # hydrograph and recession segments
        assert "<h3>Water years</h3>" in section
        assert "Recession index by flow level" in section


def test_quality_flags_are_prominent_when_not_ok(demo, demo_report):
    result, _, _ = demo
    _, page = demo_report
    sections = page.split('<section class="gauge"')[1:]
    for gid, section in zip(result.gauges, sections):
        flags = result.gauges[gid].quality
        if flags:
            assert '<div class="flags"><strong>Check before use' in section
            for flag in flags:
                assert html.escape(flag) in section
        else:
            assert "Quality: ok" in section and 'class="flags"' not in section
    assert any(result.gauges[g].quality for g in result.gauges), "the demo has a flagged gauge"


def test_annual_table_rows_and_rounding(demo, demo_report):
    result, _, _ = demo
    _, page = demo_report
    gid = next(iter(result.gauges))
    annual = result.gauges[gid].annual
    section = page.split('<section class="gauge"')[1]
    table = section[section.index("<h3>Water years</h3>") :]
    for row in annual.itertuples():
        assert f"<td>{int(row.water_year)}</td><td>{row.recharge_mm:,.0f}</td>" in table
    assert "<td>-0</td>" not in page
    mean = annual.loc[annual["complete"], "recharge_mm"].mean()
    assert f"mean of {int(annual['complete'].sum())} complete</td><td>{mean:,.0f}</td>" in table


# --------------------------------------------------------------------------- figures


def test_hydrograph_construction_passes_through_q1_and_q2(demo):
    result, _, _ = demo
    gauge = result.gauges["QM01"]
    years = chosen_years(gauge.annual)
    figure = hydrograph_figure(gauge, years)
    assert len(figure.axes) == 1 + len(years)
    ax = figure.axes[1]
    year = years[0][0]
    events = gauge.events[
        gauge.events["used"]
        & (gauge.events["peak_date"] >= pd.Timestamp(year - 1, 10, 1))
        & (gauge.events["peak_date"] <= pd.Timestamp(year, 9, 30))
    ]
    lines = {line.get_label(): line for line in ax.get_lines()}
    q1 = lines["Q1 (pre-event, at critical time)"].get_ydata()
    q2 = lines["Q2 (post-event, at critical time)"].get_ydata()
    np.testing.assert_allclose(q1, events["q_before_m3s"], rtol=1e-12)
    np.testing.assert_allclose(q2, events["q_after_m3s"], rtol=1e-12)
    # The pre-event recession starts at the anchor and ends at Q1, one piece per event.
    pre = np.asarray(lines["pre-event recession, carried along K"].get_ydata(), float)
    pieces = [p for p in np.split(pre, np.where(np.isnan(pre))[0]) if np.isfinite(p).any()]
    starts = [p[np.isfinite(p)][0] for p in pieces]
    ends = [p[np.isfinite(p)][-1] for p in pieces]
    np.testing.assert_allclose(starts, events["pre_anchor_m3s"], rtol=1e-12)
    np.testing.assert_allclose(ends, events["q_before_m3s"], rtol=1e-9)
    # Critical times drawn at the (last) peak + 0.2144 K (Rorabaugh 1964).
    from matplotlib import dates as mdates

    x = lines["Q1 (pre-event, at critical time)"].get_xdata()
    peaks = mdates.date2num(pd.DatetimeIndex(events["last_peak_date"]).to_pydatetime())
    np.testing.assert_allclose(x - peaks, 0.2144 * gauge.recession.days, rtol=1e-9)


def test_recession_figure_draws_every_segment_and_k(demo):
    result, _, _ = demo
    gauge = result.gauges["QM01"]
    figure = recession_figure(gauge)
    ax = figure.axes[0]
    lines = {line.get_label(): line for line in ax.get_lines()}
    segments = np.asarray(lines["segments (one line each)"].get_xdata(), float)
    assert int(np.isnan(segments).sum()) == len(gauge.recession.segments)
    assert any(label.startswith("K fitted: ") for label in lines)


def test_chosen_years_median_and_wettest():
    annual = pd.DataFrame(
        {
            "water_year": [2001, 2002, 2003, 2004, 2005],
            "recharge_mm": [100.0, 300.0, 50.0, 200.0, 900.0],
            "recharge_m3": [1.0, 3.0, 0.5, 2.0, 9.0],
            "complete": [True, True, True, True, False],
        }
    )
    # Complete years only: 50, 100, 200, 300 -> lower median 100 (2001), wettest 300 (2002).
    assert chosen_years(annual) == [(2001, "median recharge"), (2002, "largest recharge")]
    one = annual.iloc[:1]
    assert chosen_years(one) == [(2001, "median recharge")]
    assert chosen_years(annual.iloc[:0]) == []


# --------------------------------------------------------------------------- size, escaping, errors


def test_gauges_beyond_the_limit_are_listed_not_drawn(demo):
    result, gauges, _ = demo
    page = report_html(result, gauges, max_gauges=1, include_year_maps=False)
    ids = list(result.gauges)
    assert page.count('<section class="gauge"') == 1
    assert f"Gauges not drawn ({len(ids) - 1})" in page
    listed = page[page.index('id="not-drawn"') :]
    for gid in ids[1:]:
        assert f'<td class="text">{gid}</td>' in listed


def test_user_text_is_escaped(demo):
    result, _, _ = demo
    gid = "TB06"
    odd = '<b>x&"y"</b>'
    catchments = result.catchments.copy()
    catchments["gauge_id"] = catchments["gauge_id"].replace(gid, odd)
    small = dataclasses.replace(
        result,
        catchments=catchments,
        gauges={odd: result.gauges[gid]},
        summary=dict(result.summary),
    )
    page = report_html(small, title="Run <1> & co", include_year_maps=False)
    assert odd not in page and "<title>Run &lt;1&gt; &amp; co</title>" in page
    assert html.escape(odd) in page


@pytest.mark.parametrize(
    "kw, match",
    [
        ({"scheme": "jenks"}, "map classes were 'jenks'"),
        ({"max_gauges": -1}, "max gauges"),
        ({"max_gauges": "many"}, "max gauges"),
    ],
)
def test_bad_report_options_are_short_input_errors(demo, kw, match):
    result, _, _ = demo
    with pytest.raises(InputError, match=match):
        report_html(result, **kw)


def test_write_report_is_atomic(demo, tmp_path, monkeypatch):
    result, _, _ = demo
    with pytest.raises(InputError, match="must be an HTML file"):
        write_report(result, tmp_path / "report.pdf")
    with pytest.raises(InputError, match="output folder does not exist"):
        write_report(result, tmp_path / "missing" / "report.html", include_year_maps=False)

    def broken(*args, **kw):
        raise RuntimeError("drawing failed")

    monkeypatch.setattr(report, "report_html", broken)
    with pytest.raises(RuntimeError):
        write_report(result, tmp_path / "report.html")
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------- a real browser


def test_report_renders_in_headless_chromium(request, tmp_path):
    chromium = find_chromium()
    if chromium is None:
        if os.environ.get("RECHARGE_ATLAS_QGIS_REQUIRED") == "1":
            pytest.fail("chromium is required here (RECHARGE_ATLAS_QGIS_REQUIRED=1) but missing")
        pytest.skip("chromium is not installed (Debian: apt-get install chromium)")
    path, _ = request.getfixturevalue("demo_report")  # built only when chromium is there
    png = screenshot(path, tmp_path / "report.png", width=1280, height=2400, chromium=chromium)
    # Colours the page must show at the top: the cautions box (its style sheet applied) and
    # the darkest map class (the embedded PNG maps decoded and displayed; the largest value
    # always falls in it).
    cautions, dark_blue = "#fff8e1", "#08519c"
    seen = image_summary(png, [cautions, dark_blue])
    assert seen["size"] == (1280, 2400)
    assert seen["ink"] > 0.15, seen  # not a blank page
    assert seen["distinct"] > 500, seen  # pictures, not only text on white
    assert seen[cautions] > 50_000, seen
    assert seen[dark_blue] > 2_000, seen


def test_subbasin_runs_add_the_subbasin_map(sample_paths):
    from recharge_atlas.algorithms.pipeline import run_atlas_subbasins

    subbasins_path = sample_paths["catchments"].with_name("subbasins.gpkg")
    if not subbasins_path.exists():
        pytest.skip("the demo region has no subbasin layer")
    gauges = files.read_layer(sample_paths["gauges"], "gauges")
    result = run_atlas_subbasins(
        gauges,
        files.read_layer(subbasins_path, "subbasins"),
        files.read_table(sample_paths["discharge"]),
    )
    page = report_html(result, gauges, max_gauges=0, include_year_maps=False)
    assert 'alt="Map of mean annual recharge by subbasin"' in page
    assert f"{result.summary['subbasins']} subbasins" in _text(page)
    assert page.count('<section class="gauge"') == 0


def test_report_reports_progress_and_stops_when_cancelled(demo, tmp_path):
    from recharge_atlas.algorithms.errors import Cancelled

    result, _, _ = demo

    class Stopper:
        def __init__(self):
            self.seen = []

        def progress(self, done, total, gauge_id=None):
            self.seen.append((done, total, gauge_id))

        def cancelled(self):
            return len(self.seen) >= 1  # stop before the second gauge

    stopper = Stopper()
    target = tmp_path / "report.html"
    with pytest.raises(Cancelled):
        write_report(result, target, include_year_maps=False, reporter=stopper)
    first = next(iter(result.gauges))
    assert stopper.seen == [(0, len(result.gauges), first)]
    assert list(tmp_path.iterdir()) == []  # nothing half-written


def test_ranges_hold_the_value_and_k_always_shows_its_interval():
    # Issue 15: a summary promised K's interval but showed one number, and a low-high of
    # "383-382" read as reversed. Ends are rounded outwards; K's interval gets more digits.
    from recharge_atlas.algorithms.report import _ends, _range

    assert _range(382.5, 382.49, 382.51) == " (382–383)"
    assert _range(45.0, 44.99, 45.01, 1, always=True) == " (44.9–45.1)"
    assert _range(45.0, 45.0, 45.0, 1) == ""
    assert _range(45.0, 45.0, 45.0, 1, always=True) == " (interval under 0.01 wide)"
    assert _range(45.0, None, 46.0) == "" and _range(45.0, float("nan"), 46.0) == ""
    for low, high in ((382.49, 382.51), (0.05, 0.95), (-1.5, -1.4)):
        a, b = _ends(low, high)
        assert float(a) <= low and float(b) >= high


def test_report_maps_the_recharge_trend_and_gives_each_gauge_its_trend(demo, demo_report):
    result, _, _ = demo
    _, page = demo_report
    slopes = result.catchments["recharge_trend_mm_per_decade"]
    assert np.isfinite(slopes.astype(float)).any()  # the demo has gauges with 10 years or more
    assert 'alt="Map of the trend of annual recharge by catchment"' in page
    text = " ".join(_text(page).split())
    assert "Sen's slope in mm/yr per decade" in text
    gid = result.catchments.loc[slopes.astype(float).notna(), "gauge_id"].iloc[0]
    g = result.gauges[gid]
    slope = f"{g.recharge_trend_mm_per_decade:+,.1f}"
    assert f"Trend of annual recharge: {slope} mm/yr per decade, {g.recharge_trend}" in text
