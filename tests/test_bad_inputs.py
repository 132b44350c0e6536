"""The catalogue of bad inputs (issue 7): every case gets a clear answer.

Each case spoils one input of a small invented region (``messy_region``: three gauges, six
years) and runs the command line. It checks the exit code, the message (naming the file,
field, gauge or row), that the inputs' bytes are unchanged, and that no partial or temporary
output is left. A case ends either in an error (exit 2, one or two lines on stderr, no output)
or in a result where the spoilt gauge is flagged in ``quality`` and the other gauges carry
exactly the numbers of the clean run. README "When things go wrong" lists the outcomes.
"""

from __future__ import annotations

import errno
import os
import subprocess
import sys
import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from bad_input_cases import OTHERS, SPOILT, _rows
from messy_region import digests
from shapely.geometry import LineString, Polygon
from test_end_to_end import run_args

from recharge_atlas.algorithms import files, geopackage, groups, pipeline
from recharge_atlas.cli import main

# --------------------------------------------------------------------------- files


def test_missing_file(case, capsys):
    case.run(capsys, discharge=case.inputs / "no_such_table.csv")
    case.error("the discharge table file does not exist", "no_such_table.csv")


def test_text_in_a_geopackage(case, capsys):
    case.paths["gauges"].write_text("gauge_id,x,y\nAB1,1,2\n")
    case.run(capsys)
    case.error("the gauges file is not a GeoPackage", "gauges.gpkg")


def test_a_geopackage_named_csv(case, capsys):
    fake = case.inputs / "discharge_export.csv"
    fake.write_bytes(case.paths["catchments"].read_bytes())
    case.run(capsys, discharge=fake)
    case.error("the discharge table file is not a text table", "discharge_export.csv")


def test_text_named_parquet(case, capsys):
    fake = case.inputs / "discharge.parquet"
    fake.write_text(case.paths["discharge"].read_text())
    case.run(capsys, discharge=fake)
    case.error("the discharge table file is not a Parquet file", "discharge.parquet")


def test_empty_file(case, capsys):
    case.paths["discharge"].write_bytes(b"")
    case.run(capsys)
    case.error("the discharge table file is empty", "discharge.csv")


def test_header_only(case, capsys):
    case.write_discharge(case.discharge().iloc[:0])
    case.run(capsys)
    case.error("the discharge table has no rows", "discharge.csv")


def test_a_folder_for_a_file(case, capsys):
    case.run(capsys, gauges=case.inputs)
    case.error("the gauges path is a folder, not a file")


def test_a_layer_that_is_not_there(case, capsys):
    case.run(capsys, gauges=f"{case.paths['gauges']}|layername=stations")
    case.error("the gauges file has no layer 'stations'", "layers found: gauges")


def test_latin1_text_is_read(case, capsys):
    frame = case.discharge()
    frame["remark"] = "débit estimé"  # a Windows export: Latin-1, not UTF-8
    frame.to_csv(case.paths["discharge"], index=False, encoding="latin-1")
    case.run(capsys)
    case.unchanged(case.result(), [SPOILT, *OTHERS])


# --------------------------------------------------------------------------- fields


@pytest.mark.parametrize(
    ("option", "words"),
    [
        ("--value-field", ["the discharge table has no field 'flow'", "fields found: gauge_id, date, discharge", "discharge.csv"]),
        ("--gauge-id-field", ["the gauges layer has no field 'flow'", "fields found: gauge_id, name", "gauges.gpkg"]),
        ("--catchment-gauge-field", ["the catchments layer has no field 'flow'", "catchments.gpkg"]),
        ("--date-field", ["the discharge table has no field 'flow'", "discharge.csv"]),
    ],
)  # fmt: skip
def test_missing_field_lists_the_fields_found(case, capsys, option, words):
    case.run(capsys, option, "flow")
    case.error(*words, f"; name the right field with {option} (file")  # issue 14, item 14


# --------------------------------------------------------------------------- dates


def test_some_dates_unreadable_are_left_out_and_flagged(case, capsys):
    frame = case.discharge()
    frame.loc[_rows(frame)[[40, 41, 900]], "date"] = "31st of never"
    case.write_discharge(frame)
    case.run(capsys)
    case.flagged(SPOILT, "3 rows with a date that could not be read left out", "'31st of never'")
    assert "3 rows with an unreadable date left out" in case.stderr


def test_no_date_readable_is_an_error_naming_the_row(case, capsys):
    frame = case.discharge()
    frame["date"] = "week " + frame.index.astype(str)
    case.write_discharge(frame)
    case.run(capsys)
    case.error(
        "no value of the date field could be read as a date",
        "row 1: 'week 0'",
        "field 'date'",
        "discharge.csv",
    )


@pytest.mark.parametrize(
    "form",
    ["%d/%m/%Y", "%m/%d/%Y", "%Y%m%d", "%d %b %Y", "%Y/%m/%d 00:00", "%Y-%m-%dT00:00:00+10:00", "%Y-%m-%dT00:00:00Z"],
)  # fmt: skip
def test_other_date_forms_give_the_same_numbers(case, capsys, form):
    """One gauge written in another form (beside the others in ISO form): each value is read
    on its own; day or month first is judged from the table; offsets keep the clock time."""
    frame = case.discharge()
    rows = _rows(frame)
    frame.loc[rows, "date"] = pd.to_datetime(frame.loc[rows, "date"]).dt.strftime(form)
    case.write_discharge(frame)
    case.run(capsys)
    case.unchanged(case.result(), [SPOILT, *OTHERS])


def test_day_first_and_month_first_together_is_an_error(case, capsys):
    frame = case.discharge()
    stamps = pd.to_datetime(frame["date"])
    frame["date"] = stamps.dt.strftime("%d/%m/%Y")
    rows = _rows(frame, "CD2")
    frame.loc[rows, "date"] = stamps[rows].dt.strftime("%m/%d/%Y")
    case.write_discharge(frame)
    case.run(capsys)
    case.error("the dates mix day/month/year", "month/day/year", "2020-01-31", "field 'date'")


def test_repeated_rows_with_the_same_value_are_merged(case, capsys):
    frame = case.discharge()
    frame = pd.concat([frame, frame.loc[_rows(frame)[:25]]], ignore_index=True)
    case.write_discharge(frame)
    case.run(capsys)
    case.unchanged(case.result(), [SPOILT, *OTHERS])  # not flagged: nothing was lost
    assert "25 rows repeating a date (or time) already given merged" in case.stderr


def test_repeated_dates_with_other_values_are_averaged_and_flagged(case, capsys):
    frame = case.discharge()
    extra = frame.loc[_rows(frame)[100:130]].copy()
    extra["discharge"] = (extra["discharge"].astype(float) * 1.5).astype(str)
    case.write_discharge(pd.concat([frame, extra], ignore_index=True))
    case.run(capsys)
    case.flagged(SPOILT, "30 days given more than once with different values (averaged)")


# --------------------------------------------------------------------------- values


def test_a_few_bad_values_are_left_out_and_counted(case, capsys):
    frame = case.discharge()
    rows = _rows(frame)
    for row, value in zip(rows[[10, 300, 700, 1100, 1500]], ["ice", "NaN", "inf", "-3.2", ""]):
        frame.loc[row, "discharge"] = value
    case.write_discharge(frame)
    case.run(capsys)
    layer = case.result()
    case.unchanged(layer, OTHERS)
    assert np.isfinite(layer.loc[SPOILT, "recession_index_days"])
    assert "values that are not numbers left out" in case.stderr
    assert "negative or infinite values left out" in case.stderr


def test_many_bad_values_are_flagged(case, capsys):
    frame = case.discharge()
    rows = _rows(frame)
    frame.loc[rows[::40], "discharge"] = "E"
    case.write_discharge(frame)
    case.run(capsys)
    case.flagged(SPOILT, "that are text, negative or infinite left out")


@pytest.mark.parametrize("code", ["-999", "-9999", "99999"])
def test_missing_value_codes_are_left_out_and_flagged(case, capsys, code):
    frame = case.discharge()
    frame.loc[_rows(frame)[200:260:3], "discharge"] = code
    case.write_discharge(frame)
    case.run(capsys)
    case.flagged(SPOILT, f"{code} used as a missing-value code on 20 rows (left out)")


def test_no_value_a_number_is_an_error(case, capsys):
    frame = case.discharge()
    frame["discharge"] = frame["discharge"].str.replace(".", ",", regex=False)
    case.write_discharge(frame)
    case.run(capsys)
    case.error(
        "no value of the discharge field is a number", "row 1:", "decimal commas are not read"
    )


def test_every_value_missing_is_an_error(case, capsys):
    frame = case.discharge()
    frame["discharge"] = np.resize(["", "NA", "n/a", "NaN", " - "], len(frame))
    case.write_discharge(frame)
    case.run(capsys)
    case.error("no gauge has a usable discharge value", "field 'discharge'", "discharge.csv")


def test_missing_value_markers_and_a_gauge_called_na(case, capsys):
    """Only blanks and markers in the value field are missing: a gauge may be called NA."""
    frame = case.discharge()
    frame.loc[_rows(frame, "CD2")[[3, 30]], "discharge"] = ["n/a", "null"]
    frame.loc[_rows(frame), "gauge_id"] = "NA"
    case.write_discharge(frame)
    layer = case.layer("gauges")
    layer.loc[layer["gauge_id"] == SPOILT, "gauge_id"] = "NA"
    case.write_layer("gauges", layer)
    layer = case.layer("catchments")
    layer.loc[layer["gauge_id"] == SPOILT, "gauge_id"] = "NA"
    case.write_layer("catchments", layer)
    case.run(capsys)
    out = case.result()
    assert out.loc["NA", "recharge_mm_per_year"] == pytest.approx(
        case.clean.loc[SPOILT, "recharge_mm_per_year"], rel=1e-9
    )
    assert "values that are not numbers" not in case.stderr  # markers are missing values


# --------------------------------------------------------------------------- records


def test_all_zero_record_is_flagged(case, capsys):
    frame = case.discharge()
    frame.loc[_rows(frame), "discharge"] = "0"
    case.write_discharge(frame)
    case.run(capsys)
    layer = case.flagged(SPOILT, "flow is zero on every day with a value")
    assert np.isnan(layer.loc[SPOILT, "recession_index_days"])


def test_record_too_short_is_flagged(case, capsys):
    frame = case.discharge()
    case.write_discharge(frame.drop(_rows(frame)[20:]))
    case.run(capsys)
    case.flagged(SPOILT, "record only 20 days long: too short for the method")


def test_gauge_without_record_is_flagged(case, capsys):
    frame = case.discharge()
    case.write_discharge(frame.drop(_rows(frame)))
    case.run(capsys)
    case.flagged(SPOILT, "no discharge record for this gauge")


def test_unknown_units(case, capsys):
    with pytest.raises(SystemExit) as stop:
        main(run_args(case.paths, case.out, "--units", "gallons"))
    assert stop.value.code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 2 and "invalid choice: 'gallons'" in err[0] and "--help" in err[1]
    assert list(case.outdir.iterdir()) == []


# --------------------------------------------------------------------------- geometry


@pytest.mark.parametrize(
    ("shape", "words"),
    [
        ("point", "geometry is a Point, not a polygon: no area"),
        ("line", "geometry is a LineString, not a polygon: no area"),
        ("empty", "empty geometry: no area"),
        ("missing", "empty geometry: no area"),
    ],
)
def test_catchment_without_area_is_flagged(case, capsys, shape, words):
    layer = case.layer("catchments")
    square = layer.geometry.iloc[0]
    layer.loc[0, "geometry"] = {
        "point": square.centroid,
        "line": LineString(square.exterior.coords),
        "empty": Polygon(),
        "missing": None,
    }[shape]
    case.write_layer("catchments", layer)
    case.run(capsys)
    out = case.flagged(SPOILT, words, "its catchment (row 0) has no area: depths not computed")
    assert np.isnan(out.loc[SPOILT, "recharge_mm_per_year"])


def test_bow_tie_is_repaired_and_said_so(case, capsys):
    layer = case.layer("catchments")
    x0, y0, x1, y1 = layer.geometry.iloc[0].bounds
    layer.loc[0, "geometry"] = Polygon([(x0, y0), (x1, y1), (x1, y0), (x0, y1)])
    case.write_layer("catchments", layer)
    case.run(capsys)
    out = case.flagged(SPOILT, "invalid polygon", "repaired")
    # The repaired bow-tie is its two triangles: half the square.
    half = case.clean.loc[SPOILT, "area_km2"] / 2
    assert out.loc[SPOILT, "area_km2"] == pytest.approx(half, rel=1e-6)


def test_catchments_that_are_all_points_are_an_error(case, capsys):
    layer = case.layer("catchments")
    layer["geometry"] = layer.geometry.centroid
    case.write_layer("catchments", layer)
    case.run(capsys)
    case.error(
        "the catchments layer holds no polygon (its geometries are Point)", "catchments.gpkg"
    )


def test_catchments_without_features_are_an_error(case, capsys):
    with warnings.catch_warnings():  # the writer warns of the empty layer
        warnings.simplefilter("ignore")
        case.write_layer("catchments", case.layer("catchments").iloc[:0])
    case.run(capsys)
    case.error("the catchments layer has no features", "catchments.gpkg")


def _without_crs(layer):
    return gpd.GeoDataFrame(
        layer.drop(columns=layer.geometry.name), geometry=gpd.GeoSeries(list(layer.geometry))
    )


def test_missing_crs_is_an_error(case, capsys):
    with warnings.catch_warnings():  # the writer warns of the missing CRS
        warnings.simplefilter("ignore")
        case.write_layer("catchments", _without_crs(case.layer("catchments")))
    case.run(capsys)
    case.error("the catchments layer has no coordinate reference system (CRS)", "catchments.gpkg")


def test_gauges_without_crs_are_fine_when_linked_by_id(case, capsys):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        case.write_layer("gauges", _without_crs(case.layer("gauges")))
    case.run(capsys)
    case.unchanged(case.result(), [SPOILT, *OTHERS])
    case.out.unlink()
    case.run(capsys, "--link", "spatial")
    case.error("the gauges layer has no coordinate reference system (CRS)", "gauges.gpkg")


@pytest.mark.parametrize("link", ["id", "spatial"])
def test_layers_in_different_crs_give_the_same_numbers(case, capsys, link):
    """Gauges in geographic coordinates, catchments in UTM: the gauges are transformed to the
    catchments' CRS for linking, and areas are geodesic whatever the CRS."""
    case.write_layer("gauges", case.layer("gauges").to_crs("EPSG:4326"))
    case.run(capsys, "--link", link)
    case.unchanged(case.result(), [SPOILT, *OTHERS])


# --------------------------------------------------------------------------- ids


def test_no_gauge_id_matches_is_an_error_showing_both_sides(case, capsys):
    frame = case.discharge()
    frame["gauge_id"] = "0" + frame["gauge_id"].str.lower()
    case.write_discharge(frame)
    case.run(capsys)
    case.error(
        "no gauge id of the discharge table matches the gauges layer",
        "'0ab1'",
        "'AB1'",
        "discharge.csv",
    )


def test_catchment_ids_that_match_no_gauge_are_flagged(case, capsys):
    layer = case.layer("catchments")
    layer.loc[0, "gauge_id"] = "ZZ9"
    case.write_layer("catchments", layer)
    case.run(capsys)
    out = case.result()
    assert out.loc["ZZ9", "quality"] == "gauge ZZ9 is not in the gauges layer"
    case.unchanged(out, OTHERS)


def test_unknown_ids_in_the_discharge_table_are_reported(case, capsys):
    frame = case.discharge()
    extra = frame.loc[_rows(frame)].assign(gauge_id="XY7")
    case.write_discharge(pd.concat([frame, extra], ignore_index=True))
    case.run(capsys)
    case.unchanged(case.result(), [SPOILT, *OTHERS])
    assert "1 gauge ids in the discharge table match no gauge: XY7" in case.stderr


# --------------------------------------------------------------------------- outputs


def test_output_over_an_input(case, capsys):
    case.out = case.paths["catchments"]
    case.run(capsys)
    case.error("the output path is one of the input files", "catchments.gpkg")


def test_output_over_an_input_by_another_path(case, capsys):
    case.out = case.inputs / ".." / "in" / "gauges.gpkg"
    case.run(capsys)
    case.error("the output path is one of the input files")


def test_output_folder_missing(case, capsys):
    case.out = case.outdir / "not_made" / "recharge.gpkg"
    case.run(capsys)
    case.error("the output folder does not exist", "not_made")


def test_output_path_is_a_folder(case, capsys):
    case.out = case.outdir / "recharge.gpkg"
    case.out.mkdir()
    case.run(capsys)
    assert case.code == 2 and "the output path is a folder" in case.stderr
    assert [p.name for p in case.outdir.iterdir()] == ["recharge.gpkg"]


def test_output_folder_read_only(case, capsys, monkeypatch):
    case.outdir.chmod(0o555)
    try:
        if os.geteuid() == 0:  # root may write anywhere: make the check see what a user sees
            real = os.access
            monkeypatch.setattr(
                os, "access", lambda p, m: False if Path(p) == case.outdir else real(p, m)
            )
        case.run(capsys)
        case.error("the output folder is not writable", str(case.outdir))
    finally:
        case.outdir.chmod(0o755)


def test_two_outputs_on_one_path(case, capsys):
    png = str(case.outdir / "map.png")
    case.run(capsys, "--map", png, "--year-maps", png)
    case.error("the per-year map path is also another output's", "map.png")


# --------------------------------------------------------------------------- nothing lost


def test_disk_full_mid_write_leaves_nothing(case, capsys, monkeypatch):
    """The GeoPackage fails after its first layer: exit 2 naming the output, no file left."""

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(geopackage, "add_attribute_table", full)
    case.run(capsys)
    case.error(f"no space left on device while writing the output (file {case.out})")


def test_failure_in_a_later_output_leaves_none(case, capsys, monkeypatch):
    """The report fails after the GeoPackage and the map are written: neither is left."""
    from recharge_atlas.algorithms import report

    def broken(*args, **kwargs):
        raise RuntimeError("the page could not be drawn")

    monkeypatch.setattr(report, "write_report", broken)
    case.run(
        capsys,
        "--map",
        str(case.outdir / "map.png"),
        "--report",
        str(case.outdir / "report.html"),
    )
    assert case.code == 1
    assert (
        case.errors[0]
        == "recharge-atlas: internal error: RuntimeError: the page could not be drawn"
    )
    assert "--debug" in case.errors[1] and "Traceback" not in case.stderr
    assert list(case.outdir.iterdir()) == []


def test_interrupt_mid_write_leaves_nothing(case, capsys, monkeypatch):
    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(geopackage, "add_attribute_table", interrupted)
    case.run(capsys)
    assert case.code == 130 and "interrupted; no output written" in case.stderr
    assert list(case.outdir.iterdir()) == []


def test_an_existing_output_is_replaced_only_when_complete(case, capsys, monkeypatch):
    earlier = case.paths["gauges"].read_bytes()  # an earlier result: any GeoPackage
    case.out.write_bytes(earlier)
    monkeypatch.setattr(geopackage, "add_attribute_table", lambda *a, **k: 1 / 0)
    case.run(capsys)
    assert case.code == 1
    assert case.out.read_bytes() == earlier
    assert [p.name for p in case.outdir.iterdir()] == [case.out.name]


# --------------------------------------------------------------------------- isolation


def test_one_failing_gauge_is_flagged_and_the_run_goes_on(case, capsys, monkeypatch):
    real = groups._gauge_hydrology

    def failing(record, *args, **kwargs):
        if record.gauge_id == "CD2":
            raise FloatingPointError("overflow in the recession fit\nsecond line of detail")
        return real(record, *args, **kwargs)

    monkeypatch.setattr(groups, "_gauge_hydrology", failing)
    case.run(capsys)
    out = case.flagged(
        "CD2",
        "could not be computed (internal error: FloatingPointError: overflow in the recession fit)",
        same=[SPOILT, "EF3"],
    )
    assert "second line" not in out.loc["CD2", "quality"]
    assert "3 gauges: 2 computed (0 flagged), 1 skipped (1 of them failed)" in case.stderr


def test_the_summary_counts_computed_flagged_and_failed(clean, monkeypatch):
    from recharge_atlas.algorithms.pipeline import run_atlas

    real = groups._gauge_hydrology

    def failing(record, *args, **kwargs):
        if record.gauge_id == "EF3":
            raise ValueError("made to fail")
        return real(record, *args, **kwargs)

    monkeypatch.setattr(groups, "_gauge_hydrology", failing)
    paths = clean["paths"]
    table = files.read_table(paths["discharge"])
    table = table[(table["gauge_id"] != "CD2") | (table.index % 2 == 0)]  # CD2: half its days
    result = run_atlas(
        files.read_layer(paths["gauges"]), files.read_layer(paths["catchments"]), table
    )
    summary = result.summary
    assert (summary["gauges"], summary["computed"], summary["flagged"]) == (3, 2, 1)
    assert (summary["skipped"], summary["failed"], summary["with_record"]) == (1, 1, 3)


# --------------------------------------------------------------------------- the messages


def test_internal_error_is_one_line_and_debug_shows_the_trace(case, capsys, monkeypatch):
    def broken(*args, **kwargs):
        raise ZeroDivisionError("division by zero")

    monkeypatch.setattr(pipeline, "run_atlas", broken)
    case.run(capsys)
    assert case.code == 1 and "Traceback" not in case.stderr
    assert case.errors == [
        "recharge-atlas: internal error: ZeroDivisionError: division by zero",
        "recharge-atlas: no output was written; rerun with --debug for the full trace, and please report it",
    ]
    case.run(capsys, "--debug")
    assert case.code == 1 and "Traceback (most recent call last)" in case.stderr
    assert "ZeroDivisionError: division by zero" in case.stderr
    assert list(case.outdir.iterdir()) == []


def test_debug_before_the_command_too(case, capsys, monkeypatch):
    monkeypatch.setattr(pipeline, "run_atlas", lambda *a, **k: {}["missing"])
    assert main(["--debug", *run_args(case.paths, case.out)]) == 1
    assert "Traceback" in capsys.readouterr().err


def test_a_real_process_prints_one_line(case):
    """The command as users run it: exit 2 and a single line on stderr."""
    frame = case.discharge()
    frame["date"] = "soon"
    case.write_discharge(frame)
    before = digests(case.inputs)
    done = subprocess.run(
        [sys.executable, "-m", "recharge_atlas", *run_args(case.paths, case.out)],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 2
    assert done.stderr.strip().splitlines() == [
        f"recharge-atlas: error: no value of the date field could be read as a date (row 1: 'soon'); "
        f"write dates as 2020-01-31 (file {case.paths['discharge']}, field 'date')"
    ]
    assert digests(case.inputs) == before and list(case.outdir.iterdir()) == []


@pytest.mark.parametrize(
    "words",
    [
        "the discharge table file does not exist",
        "is not a GeoPackage, though its name ends in .gpkg",
        "is not a text table",
        "has no layer 'stations'; layers found",
        "has no field 'flow'; fields found",
        "the discharge table has no rows",
        "no value of the date field could be read as a date",
        "may be day/month or month/day",
        "the dates mix day/month/year",
        "no value of the discharge field is a number",
        "no gauge has a usable discharge value",
        "no gauge id of the discharge table matches the gauges layer",
        "lies outside the years 1678 to 2261",
        "the gauges layer has gauge id 'AB1' on 2 features",
        "recession index 0.001 is outside 1 to 3,650 days",
        "values with a decimal comma",
        "not a number` |",
        "fields on line 6 where its header has 3",
        "is never closed",
        "looks damaged",
        "is not a regular file",
        "reading Parquet needs the Python package pyarrow",
        "name the right field with --value-field",
        "dated more than a century from the rest of the record",
        "holds no polygon (its geometries are Point)",
        "has no coordinate reference system (CRS)",
        "coordinates do not fit its coordinate reference system",
        "the output path is one of the input files",
        "the output folder does not exist",
        "is not writable",
        "the output could not be written",
        "rows with a date that could not be read left out",
        "used as a missing-value code on",
        "that are text, negative or infinite left out",
        "over 10 million m³/s left out",
        "given more than once with different values (averaged)",
        "flow is zero on every day with a value",
        "too short for the method",
        "has no area: depths not computed",
        "could not be computed (internal error:",
        "rerun with --debug for the full trace",
    ],
)
def test_readme_says_what_to_do_about_each_message(words):
    # The troubleshooting page of the docs (the README points to it).
    guide = Path(__file__).resolve().parents[1] / "docs" / "troubleshooting.md"
    readme = guide.read_text(encoding="utf-8")
    section = readme.split("## When things go wrong", 1)[1]
    assert words in section.replace("\n", " ")


@pytest.mark.parametrize("kind", ["flagged", "no match", "no rows", "no field"])
def test_reading_in_gauge_groups_gives_the_same_answers(case, capsys, kind):
    """Large tables are read a gauge group at a time (--gauges-per-group): same outcomes."""
    frame = case.discharge()
    if kind == "flagged":
        frame.loc[_rows(frame)[[7, 8]], "date"] = "unknown"
    elif kind == "no match":
        frame["gauge_id"] = frame["gauge_id"] + "-X"
    elif kind == "no rows":
        frame = frame.iloc[:0]
    case.write_discharge(frame)
    extra = ["--gauges-per-group", "1"] + (["--value-field", "flow"] if kind == "no field" else [])
    case.run(capsys, *extra)
    if kind == "flagged":
        case.flagged(SPOILT, "2 rows with a date that could not be read left out")
    elif kind == "no match":
        case.error("no gauge id of the discharge table matches the gauges layer", "discharge.csv")
    elif kind == "no rows":
        case.error("the discharge table has no rows", "discharge.csv")
    else:
        case.error("the discharge table has no field 'flow'", "discharge.csv")


def test_parquet_in_gauge_groups_no_match(case, capsys):
    pytest.importorskip("pyarrow")
    frame = case.discharge()
    frame["gauge_id"] = "Q-" + frame["gauge_id"]
    table = case.inputs / "discharge.parquet"
    frame.to_parquet(table)
    case.run(capsys, "--gauges-per-group", "2", discharge=table)
    case.error("no gauge id of the discharge table matches the gauges layer", "'Q-AB1'")
