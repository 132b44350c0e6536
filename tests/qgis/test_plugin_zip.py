"""The plugin zip (``make plugin-zip``) as a user installs it, and the toolbox run headless from
that install.

The zip is built from this checkout into a temporary folder, checked (one top folder
``recharge_atlas/``, everything the plugin needs, nothing else), unzipped into the plugin
folder of a clean, throwaway QGIS profile and enabled there. Every ``qgis_process.bin`` run
below uses that profile and nothing else: no QGIS_PLUGINPATH, no PYTHONPATH, so the plugin can
only come from the zip. The runs are started together so they share the two cores.
"""

from __future__ import annotations

import configparser
import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

pytest.importorskip("qgis.core")

from qgis.core import QgsVectorLayer  # noqa: E402
from support_qgis import (  # noqa: E402
    ONE_GAUGE,
    QGIS_PROCESS,
    ROOT,
    SAMPLE,
    QgisProcess,
    assert_table_is,
    subprocess_env,
)

BUILD = ROOT / "tools" / "build-plugin-zip"
#: The algorithms the provider offers.
ALGORITHMS = (
    "baseflowseparation",
    "catchmentrecharge",
    "eventrecharge",
    "linkcheck",
    "recessionindex",
    "rechargereport",
    "subbasinrecharge",
)


def _version():
    parser = configparser.ConfigParser(interpolation=None)
    parser.read(ROOT / "metadata.txt", encoding="utf-8")
    return parser["general"]["version"]


def _build(out):
    done = subprocess.run(
        [sys.executable, str(BUILD), "--out", str(out)], capture_output=True, text=True
    )
    assert done.returncode == 0, done.stderr
    return Path(done.stdout.strip())


@pytest.fixture(scope="module")
def plugin_zip(tmp_path_factory):
    return _build(tmp_path_factory.mktemp("zip"))


def test_zip_is_named_after_the_version(plugin_zip):
    assert plugin_zip.name == f"recharge_atlas-{_version()}.zip"


def test_zip_holds_the_plugin_and_nothing_else(plugin_zip):
    names = zipfile.ZipFile(plugin_zip).namelist()
    assert all(n.startswith("recharge_atlas/") for n in names), "one top folder"
    inside = {n[len("recharge_atlas/") :] for n in names}
    for needed in ("__init__.py", "metadata.txt", "LICENSE", "plugin/icon.svg"):
        assert needed in inside, needed
    for name in ALGORITHMS:
        assert f"plugin/help/{name}.html" in inside, name
    code = {
        p.relative_to(ROOT).as_posix()
        for folder in ("plugin", "algorithms")
        for p in (ROOT / folder).rglob("*")
        if p.is_file() and "__pycache__" not in p.parts and not p.name.startswith(".")
    }
    assert code <= inside, sorted(code - inside)
    for name in inside:
        parts = name.split("/")
        assert parts[0] in ("plugin", "algorithms") or name in (
            "__init__.py",
            "metadata.txt",
            "LICENSE",
        ), name
        assert "__pycache__" not in parts and not name.endswith((".pyc", ".pyo")), name
        assert not any(p.startswith(".") or p.startswith("test") for p in parts), name


def test_zip_is_the_same_when_built_again(plugin_zip, tmp_path):
    assert _build(tmp_path).read_bytes() == plugin_zip.read_bytes()


# --------------------------------------------------------------------------- installed


@pytest.fixture(scope="module")
def installed(plugin_zip, tmp_path_factory):
    """qgis_process.bin in a clean profile with the plugin installed from the zip."""
    if not QGIS_PROCESS.exists():
        pytest.skip(f"{QGIS_PROCESS} is not installed")
    home = tmp_path_factory.mktemp("clean-profile")
    env = subprocess_env(home)
    env.pop("QGIS_PLUGINPATH")
    profile = Path(env["XDG_DATA_HOME"]) / "QGIS" / "QGIS3" / "profiles" / "default"
    plugins = profile / "python" / "plugins"
    plugins.mkdir(parents=True)
    with zipfile.ZipFile(plugin_zip) as archive:
        archive.extractall(plugins)
    runner = QgisProcess(env)
    enabled = runner("plugins", "enable", "recharge_atlas")
    assert enabled.returncode == 0, enabled.stdout + enabled.stderr
    yield runner, plugins
    shutil.rmtree(home, ignore_errors=True)


def _args(algorithm, **parameters):
    return ["run", f"recharge_atlas:{algorithm}"] + [
        f"--{name}={value}" for name, value in parameters.items()
    ]


#: Headless runs of the toolbox on the short one-gauge table: algorithm -> (parameters, outputs),
#: the longest first. Values as a script or a batch file passes them: enums by the core's id,
#: numbers as text.
HEADLESS = {
    "rechargereport": ({"CLASSES": "natural_breaks"}, ("REPORT",)),
    "recessionindex": ({"AREA_FIELD": "area_km2", "MIN_SEGMENT_DAYS": "10"}, ("OUTPUT",)),
    "baseflowseparation": (
        {"BASEFLOW_METHOD": "smoothed_minima", "UNITS": "ML/d"},
        ("OUTPUT", "DAILY"),
    ),
    "eventrecharge": ({"AREA_FIELD": "area_km2", "RECESSION_INDEX": "40"}, ("EVENTS",)),
    "linkcheck": ({"LINK": "spatial", "LINK_TOLERANCE": "250"}, ("OUTPUT", "LINKS")),
}


#: qgis_process runs at a time: the machine's two cores (more only thrash).
AT_ONCE = 2


@pytest.fixture(scope="module")
def headless_runs(installed, gauges_with_area, short_discharge, tmp_path_factory):
    """``qgis_process.bin list`` and each toolbox algorithm, from the installed zip, two at a
    time (the longest first); returns {name: (finished process, {output: path})}."""
    from concurrent.futures import ThreadPoolExecutor

    runner, _plugins = installed
    folder = tmp_path_factory.mktemp("headless")
    jobs = {}
    for name, (parameters, outputs) in HEADLESS.items():
        suffix = ".html" if name == "rechargereport" else ".gpkg"
        paths = {output: folder / f"{name}_{output.lower()}{suffix}" for output in outputs}
        inputs = {"GAUGES": gauges_with_area}
        if name in ("linkcheck", "rechargereport"):
            inputs["CATCHMENTS"] = SAMPLE / "catchments.gpkg"
        if name != "linkcheck":
            inputs["DISCHARGE"] = short_discharge
        jobs[name] = (_args(name, **inputs, **parameters, **paths), paths)
    jobs["list"] = (["list"], {})
    with ThreadPoolExecutor(max_workers=AT_ONCE) as pool:
        futures = {
            name: (pool.submit(runner, *args), paths) for name, (args, paths) in jobs.items()
        }
        return {name: (future.result(), paths) for name, (future, paths) in futures.items()}


def _finished(headless_runs, name):
    done, paths = headless_runs[name]
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]
    assert "Traceback" not in done.stdout + done.stderr
    assert "Summary: " in done.stdout, "the summary line ends the log"
    return {
        output: QgsVectorLayer(str(path), output, "ogr")
        for output, path in paths.items()
        if path.suffix == ".gpkg"
    }


def test_qgis_process_lists_the_toolbox(headless_runs):
    done, _paths = headless_runs["list"]
    assert done.returncode == 0, done.stderr[-2000:]
    listed = [line.split()[0] for line in done.stdout.splitlines() if "recharge_atlas:" in line]
    assert sorted(listed) == [f"recharge_atlas:{name}" for name in ALGORITHMS]
    assert len(listed) >= 5


def test_recession_index_from_the_zip(
    headless_runs, core_gauges, gauges_with_area, short_discharge
):
    layers = _finished(headless_runs, "recessionindex")
    core = core_gauges(
        gauges=gauges_with_area,
        discharge=short_discharge,
        area_field="area_km2",
        min_segment_days=10,
    )
    fields = ["gauge_id", "recession_index_days", "recession_segments", "quality"]
    assert_table_is(layers["OUTPUT"], core.gauge_table()[fields], "gauges", fields=fields)


def test_baseflow_separation_from_the_zip(
    headless_runs, core_gauges, gauges_with_area, short_discharge
):
    layers = _finished(headless_runs, "baseflowseparation")
    core = core_gauges(
        gauges=gauges_with_area,
        discharge=short_discharge,
        units="ML/d",
        baseflow_method="smoothed_minima",
    )
    assert_table_is(layers["DAILY"], core.daily(), "daily")
    fields = ["gauge_id", "baseflow_index"]
    assert_table_is(layers["OUTPUT"], core.gauge_table()[fields], "gauges", fields=fields)


def test_event_recharge_from_the_zip(headless_runs, core_gauges, gauges_with_area, short_discharge):
    layers = _finished(headless_runs, "eventrecharge")
    core = core_gauges(
        gauges=gauges_with_area,
        discharge=short_discharge,
        area_field="area_km2",
        recession_index_days=40.0,
    )
    assert_table_is(layers["EVENTS"], core.events, "events")
    assert {f["critical_time_days"] for f in layers["EVENTS"].getFeatures()} == {0.2144 * 40}


def test_link_check_from_the_zip(headless_runs, gauges_with_area):
    from recharge_atlas.algorithms import files
    from recharge_atlas.algorithms.pipeline import Settings, check_links
    from recharge_atlas.plugin.link_check import LINK_FIELDS

    layers = _finished(headless_runs, "linkcheck")
    layer, links = check_links(
        files.read_layer(gauges_with_area, "gauges"),
        files.read_layer(SAMPLE / "catchments.gpkg", "catchments"),
        Settings(link="spatial", link_tolerance_m=250.0),
    )
    assert_table_is(layers["OUTPUT"], layer, "catchments", fields=list(LINK_FIELDS))
    assert_table_is(layers["LINKS"], links, "links")
    assert {f["method"] for f in layers["LINKS"].getFeatures()} == {"spatial"}


def test_report_from_the_zip(headless_runs, installed):
    """The report needs the most of the core (maps, figures): it runs from the zip alone."""
    _finished(headless_runs, "rechargereport")
    _done, paths = headless_runs["rechargereport"]
    text = paths["REPORT"].read_text(encoding="utf-8")
    assert text.lstrip().lower().startswith("<!doctype html")
    assert ONE_GAUGE in text and "Halford" in text
    _runner, plugins = installed
    assert (plugins / "recharge_atlas" / "plugin" / "recharge_report.py").exists()
    assert not (plugins / "recharge_atlas" / "tests").exists()
