"""The plugin loads headless, registers its provider, and still loads when the scientific
packages are missing, saying what to install."""

from __future__ import annotations

import inspect
import json
import subprocess
import textwrap

import pytest

pytest.importorskip("qgis.core")

from qgis.core import QgsApplication  # noqa: E402
from support_qgis import PROCESSING_PLUGINS, QGIS_PYTHON, SAMPLE, subprocess_env  # noqa: E402


def test_class_factory_without_iface_registers_and_unloads(qgis_app):
    from recharge_atlas import classFactory

    registry = QgsApplication.processingRegistry()
    assert registry.providerById("recharge_atlas") is not None  # from the session fixture
    plugin = classFactory(None)
    plugin.initGui()  # a second registration of the same id is refused, not duplicated
    assert plugin.provider is None
    assert sum(p.id() == "recharge_atlas" for p in registry.providers()) == 1
    plugin.unload()
    assert registry.providerById("recharge_atlas") is not None


def test_provider_lists_the_algorithm_with_its_icon(qgis_app):
    provider = QgsApplication.processingRegistry().providerById("recharge_atlas")
    assert provider.name() == "Recharge Atlas"
    assert not provider.icon().isNull()
    ids = sorted(a.id() for a in provider.algorithms())
    assert ids == [
        "recharge_atlas:baseflowseparation",
        "recharge_atlas:catchmentrecharge",
        "recharge_atlas:eventrecharge",
        "recharge_atlas:linkcheck",
        "recharge_atlas:recessionindex",
        "recharge_atlas:rechargereport",
        "recharge_atlas:subbasinrecharge",
    ]
    alg = provider.algorithm("catchmentrecharge")
    assert alg.displayName() == "Catchment recharge"
    assert (alg.group(), alg.groupId()) == ("Recharge", "recharge")
    assert alg.canExecute() == (True, "")


def test_parameters_are_the_briefs(algorithm):
    names = [p.name() for p in algorithm.parameterDefinitions()]
    assert names == [
        "GAUGES",
        "GAUGE_ID_FIELD",
        "DISCHARGE",
        "DISCHARGE_GAUGE_FIELD",
        "DATE_FIELD",
        "VALUE_FIELD",
        "CATCHMENTS",
        "CATCHMENT_GAUGE_FIELD",
        "UNITS",
        "WATER_YEAR_START",
        "RECESSION_INDEX",
        "RECESSION_INDEX_FIELD",
        "RUNOFF_END_LAG",
        "MIN_SEGMENT_DAYS",
        "FLAG_FIELD",
        "FLAG_VALUES",
        "BASEFLOW_METHOD",
        "BFI_MAX",
        "PERIOD",
        "LINK",
        "LINK_TOLERANCE",
        "OVERLAP_TOLERANCE",
        "REPORTED_AREA_FIELD",
        "CLASSES",
        "CLASS_COUNT",
        "WORKERS",
        "PRECIPITATION_FIELD",
        "PRECIPITATION_RASTER",
        "OUTPUT",
        "INCREMENTAL_AREAS",
        "ANNUAL",
        "EVENTS",
        "PERIODS",
        "SEGMENTS",
        "MASTER_RECESSION",
        "DAILY",
        "LINKS",
        "REPORT",
    ]
    units = algorithm.parameterDefinition("UNITS")
    assert units.usesStaticStrings()
    assert units.options() == ["m3/s", "L/s", "ft3/s", "ML/d"]
    assert algorithm.parameterDefinition("WATER_YEAR_START").defaultValue() == 10
    assert algorithm.parameterDefinition("GAUGE_ID_FIELD").defaultValue() == "gauge_id"
    assert algorithm.parameterDefinition("GAUGE_ID_FIELD").parentLayerParameterName() == "GAUGES"
    assert (
        algorithm.parameterDefinition("CATCHMENT_GAUGE_FIELD").parentLayerParameterName()
        == "CATCHMENTS"
    )


ADVANCED = [
    "RECESSION_INDEX",
    "RECESSION_INDEX_FIELD",
    "RUNOFF_END_LAG",
    "MIN_SEGMENT_DAYS",
    "FLAG_FIELD",
    "FLAG_VALUES",
    "BASEFLOW_METHOD",
    "BFI_MAX",
    "PERIOD",
    "LINK",
    "LINK_TOLERANCE",
    "OVERLAP_TOLERANCE",
    "REPORTED_AREA_FIELD",
    "CLASSES",
    "CLASS_COUNT",
    "WORKERS",
    "PRECIPITATION_FIELD",
    "PRECIPITATION_RASTER",
]


def test_method_parameters_are_advanced_with_their_defaults(algorithm):
    from recharge_atlas.plugin import compat

    for parameter in algorithm.parameterDefinitions():
        advanced = bool(parameter.flags() & compat.PARAMETER_ADVANCED)
        assert advanced is (parameter.name() in ADVANCED), parameter.name()
    for name in ADVANCED:
        assert algorithm.parameterDefinition(name).flags() & compat.PARAMETER_OPTIONAL or (
            algorithm.parameterDefinition(name).defaultValue() is not None
        ), f"{name} needs a value or a default"
    method = algorithm.parameterDefinition("BASEFLOW_METHOD")
    assert method.usesStaticStrings()
    assert method.options() == ["Eckhardt filter", "Lyne-Hollick filter", "smoothed minima"]
    assert method.defaultValue() == "Eckhardt filter"
    period = algorithm.parameterDefinition("PERIOD")
    assert period.usesStaticStrings()
    assert (period.options(), period.defaultValue()) == (["month", "season"], "month")
    assert algorithm.parameterDefinition("BFI_MAX").defaultValue() == 0.80
    assert algorithm.parameterDefinition("MIN_SEGMENT_DAYS").defaultValue() == 7
    assert algorithm.parameterDefinition("MIN_SEGMENT_DAYS").minimum() == 2
    for name, parent in (
        ("RECESSION_INDEX_FIELD", "GAUGES"),
        ("FLAG_FIELD", "DISCHARGE"),
        ("REPORTED_AREA_FIELD", "GAUGES"),
    ):
        assert algorithm.parameterDefinition(name).parentLayerParameterName() == parent
    link = algorithm.parameterDefinition("LINK")
    assert link.usesStaticStrings() and len(link.options()) == 3
    assert link.defaultValue() == link.options()[0]
    assert all("," not in o for o in link.options()), "QGIS reads a comma as a list of options"
    classes = algorithm.parameterDefinition("CLASSES")
    assert classes.usesStaticStrings()
    assert classes.options() == ["quantiles", "equal interval", "natural breaks"]
    assert classes.defaultValue() == "quantiles"
    assert algorithm.parameterDefinition("LINK_TOLERANCE").defaultValue() == 100
    assert algorithm.parameterDefinition("LINK_TOLERANCE").minimum() == 0
    assert algorithm.parameterDefinition("OVERLAP_TOLERANCE").defaultValue() == 0.05
    count = algorithm.parameterDefinition("CLASS_COUNT")
    assert (count.defaultValue(), count.minimum(), count.maximum()) == (5, 1, 12)


TABLES = (
    "OUTPUT",
    "ANNUAL",
    "EVENTS",
    "PERIODS",
    "SEGMENTS",
    "MASTER_RECESSION",
    "DAILY",
    "LINKS",
)


def test_table_outputs_chain_as_vector_layers(algorithm):
    """Every sink has a vector-layer output, so the Model Designer can feed it to the next
    algorithm; the new tables are optional and not created by default."""
    from recharge_atlas.plugin import compat

    outputs = {o.name(): o.type() for o in algorithm.outputDefinitions()}
    for name in TABLES:
        assert outputs.get(name) == "outputVector", name
    for name in ("PERIODS", "SEGMENTS", "MASTER_RECESSION", "DAILY", "LINKS"):
        sink = algorithm.parameterDefinition(name)
        assert sink.type() == "sink"
        assert not sink.createByDefault(), name
    report = algorithm.parameterDefinition("REPORT")
    assert report.type() == "fileDestination" and not report.createByDefault()
    assert report.flags() & compat.PARAMETER_OPTIONAL
    assert report.defaultFileExtension() == "html"
    assert outputs["REPORT"] == "outputHtml", "the dialog shows the page in its results"


def test_fallback_defaults_equal_the_core():
    """The dialog's defaults and method ids, kept in the plugin for drawing the dialog without
    the core, are the core's."""
    from recharge_atlas.algorithms.baseflow import METHODS
    from recharge_atlas.algorithms.maps import MAX_CLASSES, SCHEMES, class_breaks
    from recharge_atlas.algorithms.settings import LINK_METHODS, Settings
    from recharge_atlas.algorithms.subbasins import UNGAUGED_CHOICES
    from recharge_atlas.plugin import choices, styling

    assert tuple(choices.BASEFLOW_METHODS) == tuple(METHODS)
    assert choices._BFI_MAX == Settings().bfi_max
    assert choices._MIN_SEGMENT_DAYS == Settings().min_segment_days
    assert choices.PERIODS[0] == Settings().period
    assert tuple(choices.LINK_METHODS) == LINK_METHODS
    assert choices.LINK_METHODS["auto"].startswith(Settings().link)
    assert choices._LINK_TOLERANCE_M == Settings().link_tolerance_m
    assert choices._OVERLAP_TOLERANCE == Settings().overlap_tolerance
    assert tuple(choices.UNGAUGED_CHOICES) == UNGAUGED_CHOICES
    assert next(iter(choices.UNGAUGED_CHOICES)) == Settings().ungauged
    assert tuple(choices.MAP_CLASSES) == SCHEMES
    assert choices._MAX_CLASSES == MAX_CLASSES
    default = inspect.signature(class_breaks).parameters["classes"].default
    assert choices._CLASS_COUNT == default == styling.CLASSES
    assert tuple(styling.SCHEMES) == SCHEMES


def test_fallback_unit_labels_equal_the_core():
    from recharge_atlas.algorithms.units import DISCHARGE_UNITS, UNIT_ALIASES
    from recharge_atlas.plugin import choices

    assert list(choices._UNIT_LABELS) == list(DISCHARGE_UNITS)
    assert choices._UNIT_ALIASES == UNIT_ALIASES


def test_compat_constants_are_enums_not_ints():
    from recharge_atlas.plugin import compat

    names = [n for n in dir(compat) if n.isupper() and not n.startswith("_") and n != "FIELD_TYPES"]
    assert names
    for name in names:
        assert type(getattr(compat, name)) is not int, name
    for kind, value in compat.FIELD_TYPES.items():
        assert type(value) is not int, kind


def test_dependency_message_names_packages_and_commands():
    from recharge_atlas.plugin import dependencies

    message = dependencies.install_message(["pandas", "pyproj"])
    assert "pandas, pyproj" in message
    assert (
        "sudo apt install python3-pandas python3-geopandas python3-scipy python3-matplotlib python3-pyproj"
        in message
    )
    assert "python -m pip install pandas geopandas scipy matplotlib pyproj" in message
    assert dependencies.check() == (True, "")


HIDDEN_PANDAS = textwrap.dedent(
    """
    import json, sys
    sys.modules["pandas"] = None  # as if pandas were not installed
    sys.path.append({processing!r})
    from qgis.core import QgsApplication, QgsProcessingException
    QgsApplication.setPrefixPath("/usr", True)
    app = QgsApplication([], False, {profile!r})
    app.initQgis()
    import recharge_atlas
    plugin = recharge_atlas.classFactory(None)
    plugin.initProcessing()
    registry = QgsApplication.processingRegistry()
    alg = registry.algorithmById("recharge_atlas:catchmentrecharge")
    ok, message = alg.canExecute()
    from processing.core.Processing import Processing
    Processing.initialize()
    import processing
    try:
        processing.run("recharge_atlas:catchmentrecharge", {parameters!r})
        run_error = None
    except QgsProcessingException as exc:
        run_error = str(exc)
    try:
        processing.run("recharge_atlas:linkcheck", {link_parameters!r})
        link_error = None
    except QgsProcessingException as exc:
        link_error = str(exc)
    provider = registry.providerById("recharge_atlas")
    print(json.dumps({{
        "provider": provider is not None,
        "algorithm": alg is not None,
        "ok": ok,
        "message": message,
        "run_error": run_error,
        "link_error": link_error,
        "every": {{a.name(): list(a.canExecute()) for a in provider.algorithms()}},
    }}))
    """
)


def test_plugin_loads_without_pandas_and_says_what_to_install(tmp_path):
    """With pandas hidden the provider and every algorithm still register; canExecute and
    headless runs all give the install message."""
    home = tmp_path / "home"
    home.mkdir()
    parameters = {
        "GAUGES": str(SAMPLE / "gauges.gpkg"),
        "DISCHARGE": str(SAMPLE / "discharge.csv"),
        "CATCHMENTS": str(SAMPLE / "catchments.gpkg"),
        "OUTPUT": str(tmp_path / "never.gpkg"),
    }
    link_parameters = {
        "GAUGES": str(SAMPLE / "gauges.gpkg"),
        "CATCHMENTS": str(SAMPLE / "catchments.gpkg"),
        "OUTPUT": str(tmp_path / "never_links.gpkg"),
    }
    script = tmp_path / "hidden_pandas.py"
    script.write_text(
        HIDDEN_PANDAS.format(
            processing=str(PROCESSING_PLUGINS),
            profile=str(home / "profile"),
            parameters=parameters,
            link_parameters=link_parameters,
        )
    )
    done = subprocess.run(
        [str(QGIS_PYTHON), str(script)],
        env=subprocess_env(home, pythonpath=True),
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr[-3000:]
    report = json.loads(done.stdout.strip().splitlines()[-1])
    assert report["provider"] and report["algorithm"]
    assert report["ok"] is False
    assert "pandas" in report["message"] and "geopandas" in report["message"]
    assert "sudo apt install python3-pandas" in report["message"]
    assert "OSGeo4W" in report["message"]
    assert report["run_error"] == report["message"]
    assert not (tmp_path / "never.gpkg").exists()
    assert len(report["every"]) == 7
    for name, (ok, message) in report["every"].items():
        assert (ok, message) == (False, report["message"]), name
    assert report["link_error"] == report["message"], "no discharge, still the message"
    assert not (tmp_path / "never_links.gpkg").exists()
