"""The catalogue of bad inputs, continued: the checks of issue 14 (dates, ids, settings,
separators, shapefiles, encodings, Parquet, text faults, pipes, option names). The harness
is bad_input_cases.py; see test_bad_inputs.py for what each case checks."""

from __future__ import annotations

import os
import sys

import pandas as pd
import pytest
from bad_input_cases import OTHERS, SPOILT, _rows

from recharge_atlas.algorithms import readers

# --------------------------------------------------------------------------- issue 14 (inputs)


@pytest.mark.parametrize("date", ["1430-03-15", "15 Mar 1430", "2300-01-01 06:00", "14300315"])
def test_a_date_outside_the_years_a_record_holds_is_refused_with_its_row(case, capsys, date):
    """Before, 1430-03-15 wrapped around by about 584 years and landed inside the record as a
    flood (exit 0, quality ok): pandas 1.5 holds dates in nanoseconds only."""
    frame = case.discharge()
    row = _rows(frame)[100]
    frame.loc[row, ["date", "discharge"]] = [date, "800"]
    case.write_discharge(frame)
    case.run(capsys)
    case.error(f"the date '{date}' lies outside the years 1678 to 2261", f"row {row + 1}",
               f"gauge {SPOILT}", "discharge.csv")  # fmt: skip


def test_a_date_out_of_range_in_gauge_groups_names_no_row_of_a_group(case, capsys):
    frame = case.discharge()
    frame.loc[_rows(frame, "CD2")[5], "date"] = "1430-03-15"
    case.write_discharge(frame)
    case.run(capsys, "--gauges-per-group", "1")
    text = case.error("the date '1430-03-15' lies outside", "gauge CD2")
    assert "row" not in text.split("lies outside")[1].split("(file")[1], text


def test_dates_far_from_the_rest_or_in_the_future_are_named_in_a_caution(case, capsys):
    frame = case.discharge()
    rows = _rows(frame)
    frame.loc[rows[[3, 4]], "date"] = ["1780-06-01", "2190-01-02"]
    case.write_discharge(frame)
    case.run(capsys)
    layer = case.result()
    quality = layer.loc[SPOILT, "quality"]
    assert (
        "2 rows dated more than a century from the rest of the record (1780-06-01, "
        "2190-01-02): a typo?" in quality
    ), quality
    assert "1 row dated in the future (2190-01-02)" in quality, quality


def test_one_gauge_id_at_two_points_is_an_error_naming_it(case, capsys):
    """Before, one of the two was linked silently and its flows went to the other's catchment."""
    layer = case.layer("gauges")
    layer.loc[layer["gauge_id"] == "CD2", "gauge_id"] = SPOILT
    case.write_layer("gauges", layer)
    case.run(capsys)
    case.error("the gauges layer has gauge id 'AB1' on 2 features (rows 1, 2)",
               "each gauge needs an id of its own", "field 'gauge_id'", "gauges.gpkg")  # fmt: skip


def test_features_and_rows_without_a_gauge_id_are_counted(case, capsys):
    layer = case.layer("gauges")
    layer = pd.concat([layer, layer.iloc[[0]].assign(gauge_id=None)], ignore_index=True)
    case.write_layer("gauges", layer)
    frame = case.discharge()
    first = _rows(frame, "CD2")[0]
    frame.loc[_rows(frame, "CD2")[[0, 1, 2]], "gauge_id"] = ["", " ", None]
    case.write_discharge(frame)
    case.run(capsys)
    case.result()
    assert (
        "caution: gauges layer: 1 feature without a gauge id in field 'gauge_id' left out "
        "(row 4)" in case.stderr
    ), case.stderr
    assert (
        f"caution: discharge table: 3 rows without a gauge id left out (the first: row "
        f"{first + 1})" in case.stderr
    ), case.stderr


@pytest.mark.parametrize(
    ("option", "value", "words"),
    [
        ("--recession-index", "0.001", "recession index 0.001 is outside 1 to 3,650 days per log cycle"),
        ("--recession-index", "1e9", "recession index 1e+09 is outside 1 to 3,650 days"),
        ("--recession-index", "nan", "recession index 'nan' is outside"),
        ("--runoff-end-lag", "1000", "runoff end lag was 1000.0; expected a number of days above 0"),
        ("--min-segment-days", "400", "expected a whole number of days from 2 to 365"),
    ],
)  # fmt: skip
def test_numeric_settings_out_of_range_are_refused(case, capsys, option, value, words):
    """Before, --recession-index 0.001 gave exit 0 with every gauge an internal error."""
    case.run(capsys, option, value)
    case.error(words)


def test_a_recession_index_field_value_out_of_range_names_the_gauge(case, capsys):
    layer = case.layer("gauges")
    layer["k_days"] = [40.0, 0.001, None]
    case.write_layer("gauges", layer)
    case.run(capsys, "--recession-index-field", "k_days")
    case.error("recession index 0.001 is outside 1 to 3,650 days", "field 'k_days'", "gauge CD2")


@pytest.mark.parametrize("extra", [[], ["--gauges-per-group", "1"]])
def test_semicolons_and_decimal_commas_with_some_whole_numbers_are_an_error(case, capsys, extra):
    """Before, the whole numbers were read and the rest left out: exit 0, every gauge empty."""
    frame = case.discharge()
    values = frame["discharge"].astype(float).round(1)
    frame["discharge"] = values.map(lambda v: f"{v:g}".replace(".", ","))
    frame.to_csv(case.paths["discharge"], sep=";", index=False)
    case.run(capsys, *extra)
    case.error("with a decimal comma (row 1: '1,9')", "decimal commas are not read",
               "field 'discharge'", "discharge.csv")  # fmt: skip


def test_one_stray_decimal_comma_is_counted_not_refused(case, capsys):
    frame = case.discharge()
    frame.loc[_rows(frame)[50], "discharge"] = "1,5"
    case.write_discharge(frame)
    case.run(capsys)
    assert case.code == 0, case.stderr


def _as_shapefile(case, name, keep_dbf=True):
    path = case.inputs / f"{name}.shp"
    case.layer(name).to_file(path)
    if not keep_dbf:
        (case.inputs / f"{name}.dbf").unlink()
    return path


def test_a_missing_dbf_beside_the_catchments_is_said_and_spatial_linking_named(case, capsys):
    """Before, linking switched to spatial silently (the summary said only '(spatial)')."""
    shp = _as_shapefile(case, "catchments", keep_dbf=False)
    case.run(capsys, catchments=shp)
    case.unchanged(case.result(), [SPOILT, *OTHERS])
    assert (
        "caution: the catchments layer has no field 'gauge_id' (its attribute file "
        "catchments.dbf is missing beside the .shp): gauges are linked to catchments by "
        "location instead" in case.stderr
    ), case.stderr
    assert "--catchment-gauge-field" in case.stderr
    assert (
        "3 linked to catchments by location (each gauge at its catchment's outlet), not "
        "by an id field" in case.stderr
    ), case.stderr


def test_a_missing_dbf_beside_the_gauges_is_named_in_the_error(case, capsys):
    shp = _as_shapefile(case, "gauges", keep_dbf=False)
    case.run(capsys, gauges=shp)
    case.error("the gauges layer has no field 'gauge_id'; its attribute file gauges.dbf is "
               "missing beside the .shp", "gauges.shp")  # fmt: skip


def test_linking_by_id_is_named_in_the_summary(case, capsys):
    case.run(capsys)
    case.result()
    assert "3 linked to catchments by the id field 'gauge_id'" in case.stderr, case.stderr


@pytest.mark.parametrize("option", ["--recession-index-field", "--reported-area-field"])
def test_a_text_field_given_for_numbers_is_an_error(case, capsys, option):
    """Before, a text field given here was ignored without a word (exit 0)."""
    case.run(capsys, option, "name")
    case.error("the gauges layer's field holds 'Wendle Beck at Oxmoor', not a number "
               "(3 features so)", "field 'name'", "gauge AB1", "gauges.gpkg")  # fmt: skip


def test_empty_values_in_a_recession_index_field_mean_estimate(case, capsys):
    layer = case.layer("gauges")
    layer["k_days"] = ["", None, " "]
    case.write_layer("gauges", layer)
    case.run(capsys, "--recession-index-field", "k_days")
    case.unchanged(case.result(), [SPOILT, *OTHERS])


@pytest.mark.parametrize(
    ("change", "hint"),
    [
        (lambda ids: "00" + ids, "some match when leading zeros are ignored; ids read as numbers "
                                 "lose their leading zeros: keep the column as text"),
        (lambda ids: ids.str.lower(), "some match when letter case is ignored"),
        (lambda ids: ids.str[:2] + " " + ids.str[2:], "some match when spaces are ignored"),
        (lambda ids: "X" + ids, None),
    ],
)  # fmt: skip
def test_no_id_matching_is_one_error_alone_with_a_hint(case, capsys, change, hint):
    """Before, the error came after a caution for every gauge (thousands for a network)."""
    frame = case.discharge()
    frame["gauge_id"] = change(frame["gauge_id"])
    case.write_discharge(frame)
    case.run(capsys)
    text = case.error("no gauge id of the discharge table matches the gauges layer")
    assert case.stderr.strip() == text, case.stderr
    if hint:
        assert hint in text, text
    else:
        assert "some match" not in text, text


@pytest.mark.parametrize("encoding", ["utf-16", "utf-16-le"])
def test_utf16_text_is_read(case, capsys, encoding):
    """Before, UTF-16 text (as Windows tools write it) was called binary data."""
    case.discharge().to_csv(case.paths["discharge"], index=False, encoding=encoding)
    case.run(capsys)
    case.unchanged(case.result(), [SPOILT, *OTHERS])


def test_parquet_without_an_engine_says_which_package_to_install(case, capsys, monkeypatch):
    def no_engine(*args, **kwargs):  # what pandas raises when neither engine is installed
        raise ImportError("Unable to find a usable engine; tried using: 'pyarrow', 'fastparquet'.")

    table = case.inputs / "discharge.parquet"
    table.write_bytes(b"PAR1" + b"\0" * 16 + b"PAR1")
    monkeypatch.setattr(readers.pd, "read_parquet", no_engine)
    monkeypatch.setitem(sys.modules, "pyarrow", None)  # not installed: importing it fails
    monkeypatch.setitem(sys.modules, "pyarrow.parquet", None)
    case.run(capsys, discharge=table)
    case.error("reading Parquet needs the Python package pyarrow: install it (pip install "
               "pyarrow", "discharge.parquet")  # fmt: skip


def _lines(case):
    return case.paths["discharge"].read_text().splitlines()


@pytest.mark.parametrize(
    ("spoil", "words"),
    [
        (lambda t: t[:5] + [t[5] + ",7,8"] + t[6:],
         "the discharge table file has 5 fields on line 6 where its header has 3: a value "
         "with the separator in it needs quotes"),
        (lambda t: ["# made by the river office", "# units m3/s"] + t,
         "the discharge table file has 3 fields on line 3 where its first line has 1: are "
         "there lines (a title, comments) before the header? remove them"),
        (lambda t: t[:5] + [t[5].replace(",", ',"', 1)] + t[6:],
         "the discharge table file has a quote on line 6 that is never closed"),
    ],
)  # fmt: skip
def test_text_faults_are_said_in_our_words_with_the_line(case, capsys, spoil, words):
    """Before, the CSV reader's own words ('Error tokenizing data. C error: ...')."""
    case.paths["discharge"].write_text("\n".join(spoil(_lines(case))) + "\n")
    case.run(capsys)
    text = case.error(words, "discharge.csv")
    assert "C error" not in text and "tokenizing" not in text


def test_a_truncated_shapefile_is_said_to_look_damaged(case, capsys):
    """Before, reported as 'empty geometry' catchments."""
    shp = _as_shapefile(case, "catchments")
    data = shp.read_bytes()
    shp.write_bytes(data[: len(data) // 2])
    case.run(capsys, catchments=shp)
    case.error("the catchments file looks damaged", "cut short", "catchments.shp")


def test_a_pipe_as_input_is_refused_not_waited_on(case, capsys, tmp_path):
    """Before, the run hung reading the pipe."""
    pipe = tmp_path / "discharge.csv"
    os.mkfifo(pipe)
    case.run(capsys, discharge=pipe)
    case.error("the discharge table path is not a regular file (a pipe, socket or device)")


@pytest.mark.parametrize(
    ("extra", "option"),
    [
        (["--discharge-gauge-field", "station"], "--discharge-gauge-field"),
        (["--flag-field", "station"], "--flag-field"),
        (["--reported-area-field", "station"], "--reported-area-field"),
        (["--value-field", "station", "--gauges-per-group", "1"], "--value-field"),
        (["--discharge-gauge-field", "station", "--gauges-per-group", "1"], "--discharge-gauge-field"),
    ],
)  # fmt: skip
def test_a_missing_field_names_the_option_that_named_it(case, capsys, extra, option):
    case.run(capsys, *extra)
    case.error("has no field 'station'", f"; name the right field with {option} (file")
