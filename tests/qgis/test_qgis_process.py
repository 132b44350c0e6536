"""catchmentrecharge through the command-line runner ``qgis_process.bin`` (a separate QGIS
process with the plugin enabled in a throwaway profile)."""

from __future__ import annotations

import csv
import math

import pytest

pytest.importorskip("qgis.core")

from qgis.core import QgsVectorLayer  # noqa: E402
from support_qgis import SAMPLE  # noqa: E402

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


def _args(**parameters):
    return ["run", ALGORITHM] + [f"--{name}={value}" for name, value in parameters.items()]


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
