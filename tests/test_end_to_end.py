"""End to end: the CLI on the invented demo region, compared with the generator's known truth."""

from __future__ import annotations

import subprocess
import sys

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest

from recharge_atlas.algorithms.files import read_attribute_table
from recharge_atlas.cli import main


def run_args(paths, out, *extra, discharge=None):
    """Arguments of ``recharge-atlas run`` on the demo layers."""
    return [
        "run",
        "--gauges", str(paths["gauges"]),
        "--catchments", str(paths["catchments"]),
        "--discharge", str(discharge or paths["discharge"]),
        "--out", str(out),
        *extra,
    ]  # fmt: skip


# The acceptance bound is ±15 %; the method does better on this region, so hold it to
# ±10 % to catch regressions early.
TOLERANCE = 0.10


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory, sample_paths):
    out = tmp_path_factory.mktemp("e2e")
    gpkg, png = out / "recharge.gpkg", out / "map.png"
    code = main(run_args(sample_paths, gpkg, "--map", str(png)))
    assert code == 0
    return {
        "gpkg": gpkg,
        "png": png,
        "catchments": gpd.read_file(gpkg, layer="catchments"),
        "annual": read_attribute_table(gpkg, "annual"),
        "events": read_attribute_table(gpkg, "events"),
    }


def test_geopackage_has_the_stable_schema(demo_run):
    for name in ["gauge_id", "area_km2", "recession_index_days", "recharge_mm_per_year", "quality"]:
        assert name in demo_run["catchments"].columns
    for name in ["gauge_id", "water_year", "recharge_mm", "recharge_m3", "complete"]:
        assert name in demo_run["annual"].columns
    for name in [
        "gauge_id",
        "peak_date",
        "critical_time_days",
        "q_before_m3s",
        "q_after_m3s",
        "recharge_m3",
        "recharge_mm",
    ]:
        assert name in demo_run["events"].columns
    assert len(demo_run["catchments"]) == 9  # every input polygon comes back


def test_geopackages_are_version_1_2(demo_run, sample_paths):
    # OGC GeoPackage 1.2 (OGC 12-128r15): PRAGMA application_id 'GPKG' (0x47504B47) and
    # user_version 10200. GDAL 3.6 (QGIS 3.22 on Debian 12) warns about 1.4 (10400), which
    # newer GDALs write by default.
    import sqlite3

    shipped = [sample_paths["gauges"], sample_paths["catchments"]]
    shipped.append(sample_paths["gauges"].with_name("subbasins.gpkg"))
    for path in [demo_run["gpkg"], *shipped]:
        with sqlite3.connect(path) as db:
            assert db.execute("PRAGMA application_id").fetchone()[0] == 0x47504B47, path
            assert db.execute("PRAGMA user_version").fetchone()[0] == 10200, path


def test_recharge_and_recession_index_match_the_known_truth(demo_run, sample_paths):
    truth = pd.read_csv(sample_paths["truth_gauges"], dtype={"gauge_id": str}).set_index("gauge_id")
    truth_annual = pd.read_csv(sample_paths["truth_annual"], dtype={"gauge_id": str})
    out = demo_run["catchments"].dropna(subset=["gauge_id"]).set_index("gauge_id")
    annual = demo_run["annual"]
    checked = 0
    for gid, row in truth.iterrows():
        if row["poor_record"]:
            continue
        est = out.loc[gid]
        assert est["quality"] == "ok", gid
        assert est["recession_index_days"] == pytest.approx(
            row["recession_index_days"], rel=TOLERANCE
        ), gid
        complete = annual[(annual["gauge_id"] == gid) & (annual["complete"] == 1)]["water_year"]
        assert len(complete) >= 20
        true_mean = truth_annual[
            (truth_annual["gauge_id"] == gid) & truth_annual["water_year"].isin(complete)
        ]["recharge_mm"].mean()
        assert est["recharge_mm_per_year"] == pytest.approx(true_mean, rel=TOLERANCE), gid
        checked += 1
    assert checked == 5


def test_poor_record_gauge_is_flagged(demo_run):
    row = demo_run["catchments"].set_index("gauge_id").loc["TB06"]
    assert row["quality"] != "ok"
    assert "complete water year" in row["quality"]


def test_catchments_without_a_gauge_say_so(demo_run):
    ungauged = demo_run["catchments"][demo_run["catchments"]["gauge_id"].isna()]
    assert len(ungauged) == 3
    assert (ungauged["quality"] == "no gauge linked to this catchment").all()


def test_depth_is_volume_over_area(demo_run):
    events = demo_run["events"].dropna(subset=["recharge_m3"])
    areas = demo_run["catchments"].dropna(subset=["gauge_id"]).set_index("gauge_id")["area_km2"]
    depth = events["recharge_m3"] / (events["gauge_id"].map(areas) * 1e3)
    np.testing.assert_allclose(events["recharge_mm"], depth, rtol=1e-12)


def test_map_is_a_png(demo_run):
    data = demo_run["png"].read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 20_000


def test_demo_command_writes_the_results(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path / "demo")]) == 0
    assert (tmp_path / "demo" / "recharge.gpkg").exists()
    assert (tmp_path / "demo" / "recharge_map.png").exists()
    assert "recharge.gpkg" in capsys.readouterr().out


def _run_cli(*args):
    return subprocess.run(
        [sys.executable, "-m", "recharge_atlas", *args], capture_output=True, text=True, timeout=300
    )


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"--discharge": "missing.csv"}, "discharge table file does not exist"),
        ({"--value-field": "flow"}, "no field 'flow'"),
        ({"--water-year-start": "13"}, "water year start was 13"),
        ({"--units": "gallons"}, "invalid choice"),
    ],
)
def test_bad_input_exits_2_with_a_short_message_and_no_output(
    tmp_path, sample_paths, change, message
):
    args = {
        "--gauges": str(sample_paths["gauges"]),
        "--catchments": str(sample_paths["catchments"]),
        "--discharge": str(sample_paths["discharge"]),
        "--out": str(tmp_path / "out.gpkg"),
    }
    args.update({k: (str(tmp_path / v) if v.endswith(".csv") else v) for k, v in change.items()})
    flat = [item for pair in args.items() for item in pair]
    result = _run_cli("run", *flat)
    assert result.returncode == 2
    assert message in result.stderr
    assert "Traceback" not in result.stderr
    assert not (tmp_path / "out.gpkg").exists()
    assert list(tmp_path.iterdir()) == []  # no partial or temporary file left behind


def test_output_over_an_input_is_refused(tmp_path, sample_paths):
    copy = tmp_path / "discharge.csv"
    copy.write_bytes(sample_paths["discharge"].read_bytes())
    before = copy.read_bytes()
    code = main(run_args(sample_paths, copy, discharge=copy))
    assert code == 2
    assert copy.read_bytes() == before


def test_generator_reproduces_the_committed_demo_data(demo_region, sample_paths):
    committed = pd.read_csv(sample_paths["discharge"], dtype={"gauge_id": str})
    fresh = demo_region.discharge
    assert list(committed["gauge_id"]) == list(fresh["gauge_id"])
    np.testing.assert_allclose(
        committed["discharge"].to_numpy(), fresh["discharge"].to_numpy(), rtol=1e-5
    )
    truth = pd.read_csv(sample_paths["truth_gauges"], dtype={"gauge_id": str})
    np.testing.assert_allclose(
        truth["recharge_mm_per_year"], demo_region.truth_gauges["recharge_mm_per_year"], rtol=1e-5
    )


def test_method_options_reach_the_outputs(tmp_path, sample_paths):
    out = tmp_path / "options.gpkg"
    code = main(
        run_args(
            sample_paths,
            out,
            "--period",
            "season",
            "--baseflow-method",
            "lyne-hollick",
            "--recession-index",
            "45",
            "--daily",
        )
    )
    assert code == 0
    periods = read_attribute_table(out, "periods")
    assert set(periods["period"]) == {"Dec-Feb", "Mar-May", "Jun-Aug", "Sep-Nov"}
    daily = read_attribute_table(out, "daily")
    assert {"gauge_id", "date", "discharge_m3s", "baseflow_m3s"} <= set(daily.columns)
    catchments = gpd.read_file(out, layer="catchments").dropna(subset=["gauge_id"])
    assert (catchments["recession_index_days"].dropna() == 45.0).all()
    for table in ("annual", "events", "segments", "master_recession"):
        assert len(read_attribute_table(out, table)) > 0 or table == "segments"


@pytest.mark.parametrize(
    ("option", "value", "message"),
    [
        ("--bfi-max", "1.5", "BFImax was 1.5"),
        ("--min-segment-days", "1", "minimum segment length"),
        ("--recession-index", "-3", "recession index -3 is outside 1 to 3,650 days"),
        ("--min-day-coverage", "2", "minimum day coverage was 2.0"),
        ("--flag-field", "quality_code", "no field 'quality_code'"),
    ],
)
def test_bad_method_options_exit_2(tmp_path, sample_paths, option, value, message, capsys):
    code = main(run_args(sample_paths, tmp_path / "out.gpkg", option, value))
    assert code == 2
    assert message in capsys.readouterr().err
    assert not (tmp_path / "out.gpkg").exists()


def test_subbasin_map_from_the_command_line(tmp_path, sample_paths):
    out, png = tmp_path / "sub.gpkg", tmp_path / "sub.png"
    args = [
        "run",
        "--gauges",
        str(sample_paths["gauges"]),
        "--subbasins",
        str(sample_paths["catchments"].parent / "subbasins.gpkg"),
    ]
    args += [
        "--discharge",
        str(sample_paths["discharge"]),
        "--out",
        str(out),
        "--map",
        str(png),
        "--ungauged",
        "empty",
    ]
    assert main(args) == 0
    subbasins = gpd.read_file(out, layer="subbasins")
    assert len(subbasins) == 9
    assert set(subbasins.loc[subbasins["downstream_gauge"].isna(), "estimate_source"]) == {
        "no gauge downstream"
    }
    links = read_attribute_table(out, "links")
    assert (links["link"] == "linked").all()
    assert png.exists()


def test_catchments_and_subbasins_are_exclusive(tmp_path, sample_paths, capsys):
    args = run_args(
        sample_paths, tmp_path / "x.gpkg", "--subbasins", str(sample_paths["catchments"])
    )
    with pytest.raises(SystemExit) as stop:
        main(args)
    assert stop.value.code == 2
    assert "not allowed with argument" in capsys.readouterr().err


def test_tables_keep_their_typed_columns_when_empty():
    from shapely.geometry import Point, box

    from recharge_atlas.algorithms.pipeline import run_atlas

    gauges = gpd.GeoDataFrame({"gauge_id": ["A"]}, geometry=[Point(0, 0)], crs="EPSG:32624")
    catchments = gpd.GeoDataFrame(
        {"gauge_id": ["A"]}, geometry=[box(0, 0, 1000, 1000)], crs="EPSG:32624"
    )
    discharge = pd.DataFrame({"gauge_id": ["B"], "date": ["2020-01-01"], "discharge": [1.0]})
    result = run_atlas(gauges, catchments, discharge)
    assert len(result.annual) == 0 and result.annual["water_year"].dtype == "int64"
    assert result.events["peak_date"].dtype.kind == "M" and result.events["used"].dtype == bool
    assert list(result.segments.columns)[:3] == ["gauge_id", "first_date", "last_date"]
    assert "recession_index_q75" in result.master_recession.columns
    assert list(result.daily().columns) == ["gauge_id", "date", "discharge_m3s", "baseflow_m3s"]


def test_report_year_maps_and_classes_from_the_command_line(tmp_path, sample_paths):
    html, years = tmp_path / "report.html", tmp_path / "years.png"
    args = run_args(
        sample_paths,
        tmp_path / "r.gpkg",
        "--report",
        str(html),
        "--year-maps",
        str(years),
        "--classes",
        "natural-breaks",
        "--class-count",
        "4",
    )
    assert main(args) == 0
    page = html.read_text(encoding="utf-8")
    assert (
        "qualified hydrogeologists" in page and "QM01" in page and "data:image/png;base64," in page
    )
    assert years.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--report", "report.txt"], "must be a file ending in .html"),
        (["--class-count", "40"], "class"),
    ],
)
def test_bad_output_options_exit_2_before_any_work(tmp_path, sample_paths, capsys, extra, message):
    extra = [str(tmp_path / e) if e.endswith(".txt") else e for e in extra]
    assert main(run_args(sample_paths, tmp_path / "r.gpkg", *extra)) == 2
    assert message in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []
