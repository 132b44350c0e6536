"""The result object's helpers: per-gauge table, gauges layer, summary counts."""

import numpy as np
import pytest

from recharge_atlas.algorithms.pipeline import Settings, check_links, run_atlas


@pytest.fixture(scope="module")
def result(demo_region):
    return run_atlas(demo_region.gauges, demo_region.catchments, demo_region.discharge)


def test_gauge_table_has_event_summaries(result):
    table = result.gauge_table().set_index("gauge_id")
    events = result.events[result.events["gauge_id"] == "QM01"]
    used = events[events["used"]]
    assert table.loc["QM01", "events"] == len(used)
    assert table.loc["QM01", "events_skipped"] == len(events) - len(used)
    assert table.loc["QM01", "mean_event_recharge_mm"] == pytest.approx(used["recharge_mm"].mean())


def test_gauge_layer_keeps_rows_and_says_what_is_missing(result, demo_region):
    layer = demo_region.gauges.iloc[[0, 1, 5]].assign(gauge_id=["QM01", None, "XX"])
    out = result.gauge_layer(layer)
    assert list(out.index) == list(layer.index) and out.geometry.name == "geometry"
    assert out["quality"].tolist() == ["ok", "no gauge id", "gauge not run"]
    assert out["events"].tolist()[1:] == [0, 0] and np.isnan(out["recharge_mm_per_year"].iloc[2])


def test_summary_counts_skipped_gauges(demo_region):
    discharge = demo_region.discharge[demo_region.discharge["gauge_id"] != "HB05"]
    summary = run_atlas(demo_region.gauges, demo_region.catchments, discharge).summary
    assert summary["gauges"] == 6 and summary["skipped"] == 1 and summary["computed"] == 5
    assert summary["failed"] == 0


def test_check_links_reports_progress_and_reported_areas(demo_region):
    from recharge_atlas.algorithms.pipeline import Reporter

    class Counting(Reporter):
        calls = []

        def progress(self, done, total, gauge_id=None):
            self.calls.append((done, total))

    gauges = demo_region.gauges.assign(reported_km2=[794.0, 400.0, 121.0, 55.0, 204.0, 90.0])
    reporter = Counting()
    layer, links = check_links(
        gauges,
        demo_region.catchments.drop(columns="gauge_id"),
        Settings(reported_area_field="reported_km2"),
        reporter,
    )
    assert reporter.calls[-1] == (6, 6) and len(reporter.calls) >= 6
    assert (
        "differs from the reported 400.0 km²" in layer.set_index("gauge_id").loc["QM02", "quality"]
    )


def test_attribute_tables_keep_values_types_and_nulls(tmp_path):
    """A table written into a GeoPackage reads back with its values; NaN and NaT become NULL."""
    import sqlite3

    import pandas as pd

    from recharge_atlas.algorithms.files import add_attribute_table, read_attribute_table

    frame = pd.DataFrame(
        {
            "gauge_id": ["A1", None, "C3"],
            "peak_date": pd.to_datetime(["2001-02-03", None, "2001-03-04"]),
            "recharge_mm": [1.5, np.nan, np.inf],
            "events": np.array([1, 2, 3], dtype=np.int64),
            "used": [True, False, True],
        }
    )
    path = tmp_path / "t.gpkg"
    with sqlite3.connect(path) as db:
        db.execute(
            "CREATE TABLE gpkg_contents (table_name TEXT, data_type TEXT, identifier TEXT, description TEXT, last_change TEXT)"
        )
        add_attribute_table(db, "t", frame)
    with sqlite3.connect(path) as db:
        rows = db.execute("SELECT gauge_id, peak_date, recharge_mm, events, used FROM t").fetchall()
    assert rows == [
        ("A1", "2001-02-03", 1.5, 1, 1),
        (None, None, None, 2, 0),
        ("C3", "2001-03-04", None, 3, 1),
    ]
    back = read_attribute_table(path, "t")
    assert list(back.columns) == list(frame.columns)


@pytest.mark.parametrize(
    "days",
    [
        ["2001-02-03", "NaT", "2001-02-03", "1999-12-31", "2030-06-01"],  # a span: a calendar
        ["0001-01-01", "9999-12-31", "NaT"],  # far apart: each written
        ["NaT", "NaT"],
        [],
    ],
)
def test_day_texts_are_numpys_iso_texts(days):
    """The calendar lookup gives, day by day, numpy's own ISO text of each day."""
    from recharge_atlas.algorithms.files import _day_texts

    values = np.array(days, dtype="datetime64[D]")
    got = _day_texts(values)
    expected = np.datetime_as_string(values).tolist()
    known = ~np.isnat(values)
    assert len(got) == len(days)
    assert [g for g, k in zip(got, known) if k] == [e for e, k in zip(expected, known) if k]


def test_text_cells_keep_text_and_nulls_whatever_the_dtype():
    """Text columns (pandas' string dtype or Python objects) go in as text, missing as NULL."""
    import pandas as pd

    from recharge_atlas.algorithms.files import _cells

    values = ["A1", None, "C3"]
    for series in (pd.Series(values, dtype=object), pd.Series(values, dtype="string")):
        assert _cells(series, "TEXT") == ["A1", None, "C3"]
    assert _cells(pd.Series([1, None], dtype=object), "TEXT") == ["1", None]


def test_day_texts_stay_right_as_the_calendar_is_reused_and_grows():
    """Slices and columns of different spans, one after another, share one calendar."""
    from recharge_atlas.algorithms.files import _day_texts

    rng = np.random.default_rng(3)
    for first, span in [(11000, 400), (10000, 3000), (11100, 50), (-5000, 9000), (40000, 20)]:
        values = (first + rng.integers(0, span, 500)).astype("datetime64[D]")
        assert _day_texts(values) == np.datetime_as_string(values).tolist()


@pytest.mark.parametrize("most_parameters", [999, 7, 2])
def test_rows_go_in_whole_and_in_order_whatever_the_rows_per_statement(
    tmp_path, monkeypatch, most_parameters
):
    """Many rows per INSERT statement: every row arrives once, in order, with its fid; a
    SQLite that takes few parameters gets fewer rows per statement (down to one)."""
    import sqlite3

    import pandas as pd

    from recharge_atlas.algorithms import files, geopackage

    monkeypatch.setattr(geopackage, "_most_parameters", lambda db: most_parameters)
    monkeypatch.setattr(geopackage, "ROWS_PER_INSERT", 250)  # slices that do not divide evenly
    n = 1003
    frame = pd.DataFrame(
        {"i": np.arange(n), "x": np.arange(n) / 7.0, "t": [f"r{i}" for i in range(n)]}
    )
    path = tmp_path / "rows.gpkg"
    with sqlite3.connect(path) as db:
        db.execute(
            "CREATE TABLE gpkg_contents (table_name TEXT, data_type TEXT, identifier TEXT, description TEXT, last_change TEXT)"
        )
        files.add_attribute_table(db, "rows", frame)
    with sqlite3.connect(path) as db:
        rows = db.execute("SELECT fid, i, x, t FROM rows ORDER BY fid").fetchall()
    assert rows == [(i + 1, i, i / 7.0, f"r{i}") for i in range(n)]


def test_most_parameters_falls_back_to_sqlites_old_default():
    """Where Python cannot ask SQLite (before 3.11), 999 parameters are assumed."""
    from recharge_atlas.algorithms.files import _most_parameters

    class OldConnection:  # no getlimit
        pass

    assert _most_parameters(OldConnection()) == 999
