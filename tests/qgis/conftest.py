"""Fixtures and rules for the tests that need a real QGIS (run by ``make test-qgis``).

Outside QGIS (the .venv run) every module here skips cleanly. Inside QGIS with
``RECHARGE_ATLAS_IN_QGIS=1`` and ``RECHARGE_ATLAS_QGIS_REQUIRED=1`` (CI), a missing QGIS or a
skipped QGIS test fails the run instead: a green CI must mean the plugin ran in QGIS.

QGIS starts once per session, offscreen, with its profile, settings and caches in a temporary
folder so the user's own QGIS profile is never touched.
"""

from __future__ import annotations

import csv
import os
import shutil
import sys
from pathlib import Path

import pytest
from support_qgis import (
    GIVEN_K,
    HERE,
    ONE_GAUGE,
    PROCESSING_PLUGINS,
    QGIS_PLUGIN_PATH,
    QGIS_PROCESS,
    QUALITY_CODES,
    REQUIRED,
    SAMPLE,
    SHORT_YEARS,
    TOOLBOX_SETTINGS,
    QgisProcess,
    gpkg_layer,
    private_qt_folders,
    sample_parameters,
    subprocess_env,
    write_gauges_copy,
)

try:
    import qgis.core  # noqa: F401

    QGIS_MISSING = None
except Exception as exc:  # ImportError, or a broken install
    QGIS_MISSING = f"QGIS's Python bindings cannot be imported ({type(exc).__name__}: {exc})"

_REQUIRED_NOTE = "QGIS tests are required here (RECHARGE_ATLAS_QGIS_REQUIRED=1)"


def _ours(path) -> bool:
    try:
        Path(str(path)).resolve().relative_to(HERE)
    except ValueError:
        return False
    return True


def _skip_reason(report) -> str:
    longrepr = report.longrepr
    if isinstance(longrepr, tuple) and len(longrepr) == 3:
        return str(longrepr[2])
    return str(longrepr)


# --------------------------------------------------------------------------- skips fail in CI


@pytest.hookimpl(hookwrapper=True)
def pytest_runtest_makereport(item, call):
    outcome = yield
    report = outcome.get_result()
    if REQUIRED and report.skipped and _ours(item.path):
        report.outcome = "failed"
        report.longrepr = f"{_REQUIRED_NOTE}, but this test skipped: {_skip_reason(report)}"


@pytest.hookimpl(hookwrapper=True)
def pytest_make_collect_report(collector):
    outcome = yield
    report = outcome.get_result()
    if REQUIRED and report.skipped and _ours(getattr(collector, "path", "")):
        report.outcome = "failed"
        report.longrepr = f"{_REQUIRED_NOTE}, but this module skipped: {_skip_reason(report)}"


def pytest_sessionfinish(session, exitstatus):
    if REQUIRED and QGIS_MISSING:
        reporter = session.config.pluginmanager.get_plugin("terminalreporter")
        if reporter is not None:
            reporter.write_line(f"error: {_REQUIRED_NOTE}: {QGIS_MISSING}", red=True)
        session.exitstatus = pytest.ExitCode.TESTS_FAILED


def pytest_collection_modifyitems(config, items):
    for item in items:
        if _ours(item.path):
            item.add_marker(pytest.mark.qgis)


# --------------------------------------------------------------------------- QGIS itself

_APP = None  # the one QgsApplication, kept alive for the whole session


@pytest.fixture(scope="session")
def qgis_app(tmp_path_factory):
    """QgsApplication (no GUI, offscreen) with Processing and the recharge_atlas provider."""
    global _APP
    from qgis.core import QgsApplication

    base = tmp_path_factory.mktemp("qgis-home")
    saved = {
        name: os.environ.get(name)
        for name in ("XDG_CONFIG_HOME", "XDG_CACHE_HOME", "XDG_DATA_HOME", "XDG_RUNTIME_DIR")
    }
    os.environ.update(private_qt_folders(base))
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    if _APP is None:
        QgsApplication.setPrefixPath("/usr", True)
        _APP = QgsApplication([], False, str(base / "profile"))
        _APP.initQgis()
    if str(PROCESSING_PLUGINS) not in sys.path:
        sys.path.append(str(PROCESSING_PLUGINS))
    from processing.core.Processing import Processing

    Processing.initialize()
    from recharge_atlas import classFactory

    plugin = classFactory(None)
    plugin.initProcessing()
    yield _APP
    plugin.unload()
    for name, value in saved.items():
        if value is None:
            os.environ.pop(name, None)
        else:
            os.environ[name] = value


@pytest.fixture(scope="session")
def algorithm(qgis_app):
    """A fresh instance of recharge_atlas:catchmentrecharge from the registry."""
    from qgis.core import QgsApplication

    alg = QgsApplication.processingRegistry().createAlgorithmById(
        "recharge_atlas:catchmentrecharge"
    )
    assert alg is not None, "the provider did not register catchmentrecharge"
    return alg


@pytest.fixture(scope="session")
def core_result():
    """The core pipeline run directly on the demo files (what the CLI computes)."""
    from recharge_atlas.algorithms import files
    from recharge_atlas.algorithms.pipeline import Settings, run_atlas

    return run_atlas(
        files.read_layer(SAMPLE / "gauges.gpkg", "gauges"),
        files.read_layer(SAMPLE / "catchments.gpkg", "catchments"),
        files.read_table(SAMPLE / "discharge.csv"),
        Settings(),
    )


@pytest.fixture(scope="session")
def core_run():
    """Run the core pipeline on files, as the CLI does: ``core_run(gauges=..., discharge=...,
    catchments=..., **settings)`` with paths (the demo files by default) and Settings keywords;
    with ``subbasins=PATH`` instead of catchments, the subbasin form. Results are kept for the
    session, so tests of one configuration share one core run."""
    from recharge_atlas.algorithms import files
    from recharge_atlas.algorithms.pipeline import Settings, run_atlas, run_atlas_subbasins

    done = {}

    def run(gauges=None, discharge=None, catchments=None, subbasins=None, **settings):
        gauges = str(gauges or SAMPLE / "gauges.gpkg")
        discharge = str(discharge or SAMPLE / "discharge.csv")
        basins = str(subbasins or catchments or SAMPLE / "catchments.gpkg")
        key = (gauges, discharge, basins, subbasins is None, tuple(sorted(settings.items())))
        if key not in done:
            pipeline = run_atlas if subbasins is None else run_atlas_subbasins
            done[key] = pipeline(
                files.read_layer(gauges, "gauges"),
                files.read_layer(basins, "basins"),
                files.read_table(discharge),
                Settings(**settings),
            )
        return done[key]

    return run


@pytest.fixture(scope="session")
def core_gauges():
    """Run the core's gauge pipeline (``run_gauges``, no basins) on files:
    ``core_gauges(gauges=..., discharge=..., area_field=..., **settings)``, the demo files by
    default; results are kept for the session."""
    from recharge_atlas.algorithms import files
    from recharge_atlas.algorithms.pipeline import Settings, run_gauges

    done = {}

    def run(gauges=None, discharge=None, area_field=None, **settings):
        gauges = str(gauges or SAMPLE / "gauges.gpkg")
        discharge = str(discharge or SAMPLE / "discharge.csv")
        key = (gauges, discharge, area_field, tuple(sorted(settings.items())))
        if key not in done:
            done[key] = run_gauges(
                files.read_layer(gauges, "gauges"),
                files.read_table(discharge),
                Settings(**settings),
                area_field=area_field,
            )
        return done[key]

    return run


@pytest.fixture(scope="session")
def gauges_with_area(qgis_app, core_result, tmp_path_factory):
    """A GeoPackage copy of the demo gauges with ``area_km2``: the drainage area of each
    gauge's catchment as the core computes it, so gauge-only runs see the catchment runs'
    areas."""
    linked = core_result.catchments.dropna(subset=["gauge_id"])
    areas = dict(zip(linked["gauge_id"], linked["area_km2"].astype(float)))
    return write_gauges_copy(
        tmp_path_factory.mktemp("gauges-area") / "gauges_area.gpkg", "area_km2", areas
    )


@pytest.fixture(scope="session")
def one_gauge_discharge(tmp_path_factory):
    """The demo discharge table of gauge ONE_GAUGE only: runs on it take a fraction of the
    demo's time, while areas, links, nesting and that gauge's numbers are all computed."""
    path = tmp_path_factory.mktemp("one-gauge") / "discharge_one_gauge.csv"
    with open(SAMPLE / "discharge.csv", newline="") as src, open(path, "w", newline="") as dst:
        reader = csv.DictReader(src)
        writer = csv.DictWriter(dst, fieldnames=reader.fieldnames)
        writer.writeheader()
        writer.writerows(row for row in reader if row["gauge_id"] == ONE_GAUGE)
    return path


@pytest.fixture(scope="session")
def short_discharge(tmp_path_factory):
    """The first SHORT_YEARS water years of gauge ONE_GAUGE only: for headless runs, whose
    report and reading time grow with the record."""
    path = tmp_path_factory.mktemp("short") / "discharge_short.csv"
    end = f"{2000 + SHORT_YEARS}-10-01"
    with open(SAMPLE / "discharge.csv", newline="") as src, open(path, "w", newline="") as dst:
        reader = csv.DictReader(src)
        writer = csv.DictWriter(dst, fieldnames=reader.fieldnames)
        writer.writeheader()
        writer.writerows(r for r in reader if r["gauge_id"] == ONE_GAUGE and r["date"] < end)
    return path


@pytest.fixture(scope="session")
def flagged_discharge(tmp_path_factory):
    """The demo discharge table with a ``code`` column (invented codes; most rows empty)."""
    path = tmp_path_factory.mktemp("flagged") / "discharge_codes.csv"
    with open(SAMPLE / "discharge.csv", newline="") as src, open(path, "w", newline="") as dst:
        reader = csv.DictReader(src)
        writer = csv.DictWriter(dst, fieldnames=[*reader.fieldnames, "code"])
        writer.writeheader()
        for i, row in enumerate(reader):
            row["code"] = next((c for c, every, at in QUALITY_CODES if i % every == at), "")
            writer.writerow(row)
    return path


@pytest.fixture(scope="session")
def gauges_with_k(qgis_app, tmp_path_factory):
    """A GeoPackage copy of the demo gauges with a numeric field ``k_days`` (GIVEN_K)."""
    return write_gauges_copy(
        tmp_path_factory.mktemp("gauges-k") / "gauges_k.gpkg", "k_days", GIVEN_K
    )


@pytest.fixture(scope="session")
def processing_run(qgis_app, tmp_path_factory):
    """One processing.run of catchmentrecharge on the demo region into a GeoPackage."""
    import processing

    folder = tmp_path_factory.mktemp("processing-run")
    out = folder / "recharge.gpkg"
    results = processing.run(
        "recharge_atlas:catchmentrecharge",
        sample_parameters(
            OUTPUT=gpkg_layer(out, "catchments", geometry=True),
            ANNUAL=gpkg_layer(out, "annual"),
            EVENTS=gpkg_layer(out, "events"),
            LINKS=gpkg_layer(out, "links"),
        ),
    )
    return {"path": out, "results": results}


@pytest.fixture(scope="session")
def qgis_process(tmp_path_factory):
    """Run ``qgis_process.bin`` with the plugin enabled in a throwaway profile; returns a runner."""
    if not QGIS_PROCESS.exists():
        pytest.skip(f"{QGIS_PROCESS} is not installed")
    if not (QGIS_PLUGIN_PATH / "recharge_atlas").exists():
        pytest.skip(f"{QGIS_PLUGIN_PATH}/recharge_atlas is missing: run `make qgis-path`")
    home = tmp_path_factory.mktemp("qgis-process-home")
    runner = QgisProcess(subprocess_env(home))
    enabled = runner("plugins", "enable", "recharge_atlas")
    assert enabled.returncode == 0, enabled.stdout + enabled.stderr
    yield runner
    shutil.rmtree(home, ignore_errors=True)


@pytest.fixture(scope="session")
def log_feedback(qgis_app):
    """A QgsProcessingFeedback class that keeps every log line and progress text."""
    from qgis.core import QgsProcessingFeedback

    class LogFeedback(QgsProcessingFeedback):
        def __init__(self):
            super().__init__()
            self.lines = []  # (kind, text)
            self.progress_texts = []

        def pushInfo(self, text):  # noqa: N802 (QGIS API name)
            super().pushInfo(text)
            self.lines.append(("info", text))

        def pushWarning(self, text):  # noqa: N802
            super().pushWarning(text)
            self.lines.append(("warning", text))

        def reportError(self, text, fatalError=False):  # noqa: N802, N803
            super().reportError(text, fatalError)
            self.lines.append(("error", text))

        def setProgressText(self, text):  # noqa: N802
            super().setProgressText(text)
            self.progress_texts.append(text)

        def text(self, kind=None):
            return "\n".join(t for k, t in self.lines if kind is None or k == kind)

    return LogFeedback


@pytest.fixture(scope="session")
def toolbox_runs(
    qgis_app, tmp_path_factory, gauges_with_area, one_gauge_discharge, short_discharge, log_feedback
):
    """One processing.run of each algorithm of the toolbox beside the two recharge ones, on the
    demo region with the one-gauge discharge table (the other five gauges have no record, so
    they are skipped and said so; the report takes the short table, as its pictures take
    time), each into its own GeoPackage, with its log kept.

    Settings per algorithm are TOOLBOX_SETTINGS, so tests can run the core the same way."""
    import processing

    folder = tmp_path_factory.mktemp("toolbox")
    gauges = {
        "GAUGES": str(gauges_with_area),
        "AREA_FIELD": "area_km2",
        "DISCHARGE": str(one_gauge_discharge),
    }
    catchments = {
        "GAUGES": str(SAMPLE / "gauges.gpkg"),
        "CATCHMENTS": str(SAMPLE / "catchments.gpkg"),
    }

    def out(name, table, geometry=False):
        return gpkg_layer(folder / f"{name}.gpkg", table, geometry=geometry)

    parameters = {
        "recessionindex": {
            **gauges,
            "OUTPUT": out("recessionindex", "gauges", True),
            "SEGMENTS": out("recessionindex", "segments"),
            "MASTER_RECESSION": out("recessionindex", "master_recession"),
        },
        "baseflowseparation": {
            **gauges,
            "BASEFLOW_METHOD": "Lyne-Hollick filter",
            "OUTPUT": out("baseflowseparation", "gauges", True),
            "DAILY": out("baseflowseparation", "daily"),
        },
        "eventrecharge": {
            **gauges,
            "WATER_YEAR_START": 4,
            "OUTPUT": out("eventrecharge", "gauges", True),
            "EVENTS": out("eventrecharge", "events"),
        },
        "linkcheck": {
            **catchments,
            "OUTPUT": out("linkcheck", "catchments", True),
            "LINKS": out("linkcheck", "links"),
        },
        "rechargereport": {
            **catchments,
            "DISCHARGE": str(short_discharge),
            "REPORT": str(folder / "report.html"),
        },
    }
    runs = {}
    for name, values in parameters.items():
        feedback = log_feedback()
        results = processing.run(f"recharge_atlas:{name}", values, feedback=feedback)
        runs[name] = {
            "path": folder / f"{name}.gpkg",
            "results": results,
            "log": feedback,
            "parameters": values,
            "settings": TOOLBOX_SETTINGS[name],
        }
    return runs
