"""catchmentrecharge through the command-line runner ``qgis_process.bin`` (a separate QGIS
process with the plugin enabled in a throwaway profile)."""

from __future__ import annotations

import csv
import math

import pytest

pytest.importorskip("qgis.core")

from qgis.core import QgsVectorLayer  # noqa: E402
from support_qgis import (  # noqa: E402
    ONE_GAUGE,
    SAMPLE,
    assert_catchments_are,
    assert_table_is,
    is_null,
)

ALGORITHM = "recharge_atlas:catchmentrecharge"
#: 1 ft³ in m³ (NIST SP 811, exact).
CUBIC_FOOT_M3 = 0.028316846592


@pytest.fixture(scope="module")
def discharge_in_cfs(tmp_path_factory):
    """The demo discharge table converted to ft³/s (full precision), so a run with
    UNITS=ft3/s should reproduce the m³/s run."""
    path = tmp_path_factory.mktemp("cfs") / "discharge_cfs.csv"
    with open(SAMPLE / "discharge.csv", newline="") as src, open(path, "w", newline="") as dst:
        reader = csv.DictReader(src)
        writer = csv.DictWriter(dst, fieldnames=reader.fieldnames)
        writer.writeheader()
        for row in reader:
            value = row["discharge"].strip()
            try:
                row["discharge"] = repr(float(value) / CUBIC_FOOT_M3)
            except ValueError:
                pass  # missing or non-numeric values stay as they are
            writer.writerow(row)
    return path


def _args(algorithm=ALGORITHM, **parameters):
    return ["run", algorithm] + [f"--{name}={value}" for name, value in parameters.items()]


def test_qgis_process_ft3s_writes_the_same_numbers(
    qgis_process, discharge_in_cfs, core_result, tmp_path
):
    out = tmp_path / "recharge_cfs.gpkg"
    done = qgis_process(
        *_args(
            GAUGES=SAMPLE / "gauges.gpkg",
            GAUGE_ID_FIELD="gauge_id",
            DISCHARGE=discharge_in_cfs,
            DATE_FIELD="date",
            VALUE_FIELD="discharge",
            CATCHMENTS=SAMPLE / "catchments.gpkg",
            UNITS="ft3/s",
            WATER_YEAR_START=10,
            OUTPUT=out,
        )
    )
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]
    assert "Traceback" not in done.stderr + done.stdout
    assert out.exists()
    layer = QgsVectorLayer(str(out), "out", "ogr")
    assert layer.isValid() and layer.featureCount() == 9
    expected = core_result.catchments.set_index("name")
    names = layer.fields().names()
    for feature in layer.getFeatures():
        row = dict(zip(names, feature.attributes()))
        want = expected.loc[row["name"]]
        for field in ("recharge_mm_per_year", "recession_index_days"):
            try:
                got = float(row[field])
            except (TypeError, ValueError):
                got = math.nan
            if math.isnan(float(want[field])):
                assert math.isnan(got), (row["name"], field)
            else:
                assert got == pytest.approx(float(want[field]), rel=1e-6), (row["name"], field)
        assert row["quality"] == want["quality"]


def test_qgis_process_bad_field_is_a_short_error(qgis_process, tmp_path):
    out = tmp_path / "never.gpkg"
    done = qgis_process(
        *_args(
            GAUGES=SAMPLE / "gauges.gpkg",
            DISCHARGE=SAMPLE / "discharge.csv",
            CATCHMENTS=SAMPLE / "catchments.gpkg",
            VALUE_FIELD="flow",
            UNITS="cfs",
            OUTPUT=out,
        )
    )
    assert done.returncode != 0
    text = done.stdout + done.stderr
    assert "'flow'" in text
    assert "Traceback" not in text
    assert not out.exists()


def test_qgis_process_method_parameters_give_the_cores_numbers(
    qgis_process, gauges_with_k, core_run, tmp_path
):
    """The advanced parameters as a script passes them: the baseflow method by its core id,
    a K for all gauges beside a K field, a fixed lag and seasons (the Settings of
    test_method_parameters, which passes the method by its label)."""
    out = tmp_path / "recharge_methods.gpkg"
    done = qgis_process(
        *_args(
            GAUGES=gauges_with_k,
            DISCHARGE=SAMPLE / "discharge.csv",
            CATCHMENTS=SAMPLE / "catchments.gpkg",
            RECESSION_INDEX=45,
            RECESSION_INDEX_FIELD="k_days",
            RUNOFF_END_LAG=4,
            BASEFLOW_METHOD="lyne_hollick",
            PERIOD="season",
            OUTPUT=out,
            PERIODS=tmp_path / "periods.gpkg",
        )
    )
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]
    assert "Traceback" not in done.stderr + done.stdout
    core = core_run(
        gauges=gauges_with_k,
        recession_index_days=45.0,
        recession_index_field="k_days",
        runoff_end_lag_days=4.0,
        baseflow_method="lyne_hollick",
        period="season",
    )
    expected = core.catchments.set_index("name")
    layer = QgsVectorLayer(str(out), "out", "ogr")
    names = layer.fields().names()
    for feature in layer.getFeatures():
        row = dict(zip(names, feature.attributes()))
        want = expected.loc[row["name"]]
        for field in ("recharge_mm_per_year", "recession_index_days", "baseflow_index"):
            got = math.nan if _null(row[field]) else float(row[field])
            if math.isnan(float(want[field])):
                assert math.isnan(got), (row["name"], field)
            else:
                assert got == pytest.approx(float(want[field]), rel=1e-9), (row["name"], field)
        assert row["quality"] == want["quality"]
    periods = QgsVectorLayer(str(tmp_path / "periods.gpkg"), "periods", "ogr")
    assert periods.featureCount() == len(core.periods)
    assert {f["period"] for f in periods.getFeatures()} == set(core.periods["period"])


def _null(value):
    from recharge_atlas.plugin.compat import is_null

    return is_null(value)


def test_qgis_process_links_by_location_when_asked(
    qgis_process, core_run, one_gauge_discharge, tmp_path
):
    """LINK=spatial (the core's id) links by location although the catchments carry gauge ids;
    the numbers are the core's for the same Settings."""
    out = tmp_path / "spatial.gpkg"
    links = tmp_path / "links.gpkg"
    done = qgis_process(
        *_args(
            GAUGES=SAMPLE / "gauges.gpkg",
            DISCHARGE=one_gauge_discharge,
            CATCHMENTS=SAMPLE / "catchments.gpkg",
            LINK="spatial",
            LINK_TOLERANCE=250,
            OUTPUT=out,
            LINKS=links,
        )
    )
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]
    assert "Traceback" not in done.stderr + done.stdout
    core = core_run(discharge=one_gauge_discharge, link="spatial", link_tolerance_m=250.0)
    assert_catchments_are(QgsVectorLayer(str(out), "out", "ogr"), core)
    table = QgsVectorLayer(str(links), "links", "ogr")
    assert_table_is(table, core.links, "links")
    assert {f["method"] for f in table.getFeatures()} == {"spatial"}


def test_qgis_process_subbasins_left_empty_with_a_report(
    qgis_process, core_run, one_gauge_discharge, tmp_path
):
    """subbasinrecharge headless, subbasins with no gauge downstream left empty (UNGAUGED by
    the core's id), the derived basins and the HTML report written."""
    out = tmp_path / "subbasins.gpkg"
    basins = tmp_path / "basins.gpkg"
    report = tmp_path / "report.html"
    done = qgis_process(
        *_args(
            "recharge_atlas:subbasinrecharge",
            GAUGES=SAMPLE / "gauges.gpkg",
            DISCHARGE=one_gauge_discharge,
            SUBBASINS=SAMPLE / "subbasins.gpkg",
            UNGAUGED="empty",
            OUTPUT=out,
            CATCHMENTS=basins,
            REPORT=report,
        )
    )
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]
    assert "Traceback" not in done.stderr + done.stdout
    core = core_run(
        subbasins=SAMPLE / "subbasins.gpkg", discharge=one_gauge_discharge, ungauged="empty"
    )
    layer = QgsVectorLayer(str(out), "out", "ogr")
    fields = ["subbasin_id", "downstream_gauge", "recharge_mm_per_year", "estimate_source"]
    assert_table_is(layer, core.subbasins, "subbasins", fields=fields)
    rows = {f["subbasin_id"]: f for f in layer.getFeatures()}
    for sid in ("U7", "U8", "U9"):
        assert is_null(rows[sid]["recharge_mm_per_year"]), sid
        assert rows[sid]["estimate_source"] == "no gauge downstream", sid
    assert rows["U5"]["estimate_source"] == f"gauge {ONE_GAUGE}"
    assert_catchments_are(QgsVectorLayer(str(basins), "basins", "ogr"), core)
    text = report.read_text(encoding="utf-8")
    assert text.lstrip().lower().startswith("<!doctype html")
    assert ONE_GAUGE in text


def test_outputs_into_one_geopackage_keep_the_command_lines_layer_names(qgis_process, tmp_path):
    # Issue 15: QGIS named the layer after the file ("recharge"), the command line
    # "catchments". Plain .gpkg paths now get the command line's names, and several outputs
    # can share one file as on the command line.
    out = tmp_path / "recharge.gpkg"
    out.write_bytes(b"an old file, replaced as QGIS replaces a plain path")
    done = qgis_process(
        *_args(
            GAUGES=SAMPLE / "gauges.gpkg",
            DISCHARGE=SAMPLE / "discharge.csv",
            CATCHMENTS=SAMPLE / "catchments.gpkg",
            OUTPUT=out,
            ANNUAL=out,
            EVENTS=out,
        )
    )
    assert done.returncode == 0, done.stderr[-2000:]
    from osgeo import ogr

    source = ogr.Open(str(out))
    names = sorted(source.GetLayer(i).GetName() for i in range(source.GetLayerCount()))
    assert names == ["annual", "catchments", "events"]
    layer = QgsVectorLayer(f"{out}|layername=catchments", "c", "ogr")
    assert layer.isValid() and layer.featureCount() == 9


def test_readme_qgis_example_runs_as_written(tmp_path):
    # The README's headless example, pasted into a shell in a folder holding the demo's
    # files under the names it uses. Only the plugin path and, on Debian 12, the name of the
    # qgis_process binary are filled in (the README says both).
    import re
    import shutil
    import subprocess
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    block = re.search(r"```sh\n(export QGIS_PLUGINPATH=.*?)```", readme, re.S).group(1)
    for name in ("gauges.gpkg", "catchments.gpkg", "discharge.csv"):
        shutil.copy(SAMPLE / name, tmp_path / name)
    plugin_path = Path(__file__).resolve().parents[2] / ".qgis-path"
    script = block.replace("/path/containing/recharge_atlas", str(plugin_path))
    if Path("/usr/bin/qgis_process.bin").exists():
        script = re.sub(r"^qgis_process ", "/usr/bin/qgis_process.bin ", script, flags=re.M)
    import os

    # A fresh user profile, as on a first run (a second "enable" says it already is, exit 1).
    env = {k: v for k, v in os.environ.items() if not k.startswith(("QGIS_", "QT_QPA"))}
    env.update(HOME=str(tmp_path / "home"), XDG_DATA_HOME=str(tmp_path / "home" / "data"))
    done = subprocess.run(
        ["bash", "-e", "-c", script],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=600,
        env=env,
    )
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]
    layer = QgsVectorLayer(f"{tmp_path / 'recharge.gpkg'}|layername=catchments", "c", "ogr")
    assert layer.isValid() and layer.featureCount() == 9
