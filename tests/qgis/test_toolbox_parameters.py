"""The toolbox's algorithms as QGIS shows them: ids, groups, parameters (static-string enums,
fields tied to their layers, advanced options), outputs that chain in models, the check of bad
values before a run, and help that covers every parameter, every output field and the
cautions."""

from __future__ import annotations

import re

import pytest

pytest.importorskip("qgis.core")

from qgis.core import QgsApplication, QgsProcessingContext, QgsVectorLayer  # noqa: E402
from support_qgis import SAMPLE, TOOLBOX  # noqa: E402

#: id: (display name, group, group id)
NAMES = {
    "recessionindex": ("Recession index", "Recession and baseflow", "recession"),
    "baseflowseparation": ("Baseflow separation", "Recession and baseflow", "recession"),
    "eventrecharge": ("Event recharge", "Recharge", "recharge"),
    "linkcheck": ("Check gauge links and nesting", "Basins", "basins"),
    "rechargereport": ("Recharge report", "Reports", "reports"),
}
GAUGE_INPUTS = [
    "GAUGES",
    "GAUGE_ID_FIELD",
    "AREA_FIELD",
    "DISCHARGE",
    "DISCHARGE_GAUGE_FIELD",
    "DATE_FIELD",
    "VALUE_FIELD",
    "UNITS",
]
#: id: (parameters in order, the advanced ones, outputs)
PARAMETERS = {
    "recessionindex": (
        [
            *GAUGE_INPUTS,
            "RUNOFF_END_LAG",
            "MIN_SEGMENT_DAYS",
            "FLAG_FIELD",
            "FLAG_VALUES",
            "CLASSES",
            "CLASS_COUNT",
        ],
        ["RUNOFF_END_LAG", "MIN_SEGMENT_DAYS", "FLAG_FIELD", "FLAG_VALUES", "CLASSES"],
        ["OUTPUT", "SEGMENTS", "MASTER_RECESSION"],
    ),
    "baseflowseparation": (
        [
            *GAUGE_INPUTS,
            "WATER_YEAR_START",
            "BASEFLOW_METHOD",
            "BFI_MAX",
            "RECESSION_INDEX",
            "RECESSION_INDEX_FIELD",
            "RUNOFF_END_LAG",
            "MIN_SEGMENT_DAYS",
            "FLAG_FIELD",
            "FLAG_VALUES",
            "CLASSES",
            "CLASS_COUNT",
        ],
        ["RECESSION_INDEX_FIELD", "RUNOFF_END_LAG", "MIN_SEGMENT_DAYS", "FLAG_FIELD"],
        ["OUTPUT", "DAILY"],
    ),
    "eventrecharge": (
        [
            *GAUGE_INPUTS,
            "WATER_YEAR_START",
            "RECESSION_INDEX",
            "RECESSION_INDEX_FIELD",
            "RUNOFF_END_LAG",
            "MIN_SEGMENT_DAYS",
            "FLAG_FIELD",
            "FLAG_VALUES",
            "CLASSES",
            "CLASS_COUNT",
        ],
        ["RECESSION_INDEX", "RECESSION_INDEX_FIELD", "RUNOFF_END_LAG", "CLASS_COUNT"],
        ["EVENTS", "OUTPUT"],
    ),
    "linkcheck": (
        [
            "GAUGES",
            "GAUGE_ID_FIELD",
            "CATCHMENTS",
            "CATCHMENT_GAUGE_FIELD",
            "LINK",
            "LINK_TOLERANCE",
            "OVERLAP_TOLERANCE",
        ],
        ["LINK", "LINK_TOLERANCE", "OVERLAP_TOLERANCE"],
        ["OUTPUT", "LINKS"],
    ),
    "rechargereport": (None, ["RECESSION_INDEX", "LINK", "CLASSES", "REPORTED_AREA_FIELD"], []),
}
#: Parameters whose parent layer is GAUGES, DISCHARGE or CATCHMENTS.
PARENTS = {
    "GAUGE_ID_FIELD": "GAUGES",
    "AREA_FIELD": "GAUGES",
    "RECESSION_INDEX_FIELD": "GAUGES",
    "REPORTED_AREA_FIELD": "GAUGES",
    "DISCHARGE_GAUGE_FIELD": "DISCHARGE",
    "DATE_FIELD": "DISCHARGE",
    "VALUE_FIELD": "DISCHARGE",
    "FLAG_FIELD": "DISCHARGE",
    "CATCHMENT_GAUGE_FIELD": "CATCHMENTS",
}


def _alg(name):
    alg = QgsApplication.processingRegistry().createAlgorithmById(f"recharge_atlas:{name}")
    assert alg is not None, f"the provider did not register {name}"
    return alg


@pytest.mark.parametrize("name", TOOLBOX)
def test_names_and_groups(qgis_app, name):
    alg = _alg(name)
    assert (alg.displayName(), alg.group(), alg.groupId()) == NAMES[name]
    assert alg.name() == name and name.islower()
    assert alg.shortDescription() and alg.tags()
    assert alg.canExecute() == (True, "")
    assert not alg.icon().isNull()


@pytest.mark.parametrize("name", [*TOOLBOX, "catchmentrecharge", "subbasinrecharge"])
def test_runs_in_the_background_and_can_be_cancelled(qgis_app, name):
    """Processing runs an algorithm in a background thread unless it asks not to, so the
    interface never blocks; the cancel button shows when it says it can cancel."""
    from recharge_atlas.plugin import compat

    flags = _alg(name).flags()
    assert flags & compat.ALGORITHM_CAN_CANCEL
    assert not flags & compat.ALGORITHM_NO_THREADING


@pytest.mark.parametrize("name", TOOLBOX)
def test_parameters(qgis_app, name):
    from recharge_atlas.plugin import compat

    alg = _alg(name)
    names, advanced, outputs = PARAMETERS[name]
    definitions = alg.parameterDefinitions()
    declared = [p.name() for p in definitions]
    sinks = [p.name() for p in definitions if p.isDestination()]
    if names is not None:
        assert declared[: len(names)] == names
    else:  # the report: catchmentrecharge's inputs (no precipitation), then the page alone
        other = _alg("catchmentrecharge")
        inputs = [
            p.name()
            for p in other.parameterDefinitions()
            if not p.isDestination() and not p.name().startswith("PRECIPITATION_")
        ]
        assert declared == [*inputs, "REPORT"]
        outputs = ["REPORT"]
    assert sinks == outputs
    for parameter in definitions:
        flagged = bool(parameter.flags() & compat.PARAMETER_ADVANCED)
        if parameter.name() in advanced:
            assert flagged, parameter.name()
        if parameter.name() in ("GAUGES", "DISCHARGE", "CATCHMENTS", "UNITS", *outputs):
            assert not flagged, parameter.name()
        if parameter.type() == "enum":
            assert parameter.usesStaticStrings(), parameter.name()
            assert parameter.defaultValue() in parameter.options(), parameter.name()
        if parameter.type() == "field":
            assert parameter.parentLayerParameterName() == PARENTS[parameter.name()]
        if parameter.name() in ("GAUGE_ID_FIELD", "DATE_FIELD", "VALUE_FIELD"):
            assert parameter.defaultValue() in ("gauge_id", "date", "discharge")
    if "BASEFLOW_METHOD" in declared and name == "baseflowseparation":
        for main in ("BASEFLOW_METHOD", "BFI_MAX", "RECESSION_INDEX"):
            assert not alg.parameterDefinition(main).flags() & compat.PARAMETER_ADVANCED
    kinds = {o.name(): o.type() for o in alg.outputDefinitions()}
    for output in outputs:
        want = "outputHtml" if output == "REPORT" else "outputVector"
        assert kinds[output] == want, (name, output)


def test_batch_and_scripts_take_plain_values(qgis_app):
    """Batch mode, the Model Designer and the history write parameters out as plain values:
    an enum as its label, numbers as numbers."""
    alg = _alg("baseflowseparation")
    parameters = {
        "GAUGES": str(SAMPLE / "gauges.gpkg"),
        "DISCHARGE": str(SAMPLE / "discharge.csv"),
        "BASEFLOW_METHOD": "smoothed minima",
        "BFI_MAX": 0.5,
        "OUTPUT": "TEMPORARY_OUTPUT",
    }
    context = QgsProcessingContext()
    ok, message = alg.checkParameterValues(parameters, context)
    assert ok, message
    command = alg.asPythonCommand(parameters, context)
    assert "'BASEFLOW_METHOD':'smoothed minima'" in command, command
    assert "'BFI_MAX':0.5" in command, command


def _parameters(name, **changes):
    gauges = {
        "GAUGES": str(SAMPLE / "gauges.gpkg"),
        "DISCHARGE": str(SAMPLE / "discharge.csv"),
    }
    catchments = {
        "GAUGES": str(SAMPLE / "gauges.gpkg"),
        "CATCHMENTS": str(SAMPLE / "catchments.gpkg"),
    }
    base = {
        "recessionindex": {**gauges, "OUTPUT": "TEMPORARY_OUTPUT"},
        "baseflowseparation": {**gauges, "OUTPUT": "TEMPORARY_OUTPUT"},
        "eventrecharge": {**gauges, "EVENTS": "TEMPORARY_OUTPUT"},
        "linkcheck": {**catchments, "OUTPUT": "TEMPORARY_OUTPUT"},
        "rechargereport": {
            **catchments,
            "DISCHARGE": str(SAMPLE / "discharge.csv"),
            "REPORT": "/tmp/never/report.html",
        },
    }[name]
    base.update(changes)
    return {k: v for k, v in base.items() if v is not None}


CHECKS = [
    # (algorithm, what, changes, accepted, words the message must contain)
    ("recessionindex", "the defaults", {}, True, []),
    ("recessionindex", "units by alias", {"UNITS": "cfs"}, True, []),
    ("recessionindex", "unknown units", {"UNITS": "furlongs"}, False, ["furlongs", "ML/d"]),
    ("recessionindex", "segments of 1 day", {"MIN_SEGMENT_DAYS": 1}, False, ["(MIN_SEGMENT_"]),
    ("recessionindex", "negative lag", {"RUNOFF_END_LAG": -2}, False, ["(RUNOFF_END_LAG)"]),
    ("recessionindex", "no discharge", {"DISCHARGE": None}, False, []),
    ("recessionindex", "classes by core id", {"CLASSES": "natural_breaks"}, True, []),
    ("recessionindex", "13 map classes", {"CLASS_COUNT": 13}, False, ["(CLASS_COUNT)"]),
    ("baseflowseparation", "method by core id", {"BASEFLOW_METHOD": "lyne_hollick"}, True, []),
    ("baseflowseparation", "method by index", {"BASEFLOW_METHOD": "2"}, True, []),
    (
        "baseflowseparation",
        "unknown method",
        {"BASEFLOW_METHOD": "wavelet"},
        False,
        ["'wavelet'", "Eckhardt filter", "(BASEFLOW_METHOD)"],
    ),
    ("baseflowseparation", "BFImax 1.5", {"BFI_MAX": 1.5}, False, ["BFImax was 1.5"]),
    ("baseflowseparation", "K as text", {"RECESSION_INDEX": "45"}, True, []),
    ("baseflowseparation", "zero K", {"RECESSION_INDEX": 0}, False, ["(RECESSION_INDEX)"]),
    ("eventrecharge", "the defaults", {}, True, []),
    ("eventrecharge", "month 13", {"WATER_YEAR_START": 13}, False, ["(WATER_YEAR_START)"]),
    ("eventrecharge", "negative K", {"RECESSION_INDEX": -3}, False, ["-3 is outside"]),
    ("eventrecharge", "no event table", {"EVENTS": None}, False, []),
    ("linkcheck", "the defaults", {}, True, []),
    ("linkcheck", "by location", {"LINK": "spatial"}, True, []),
    ("linkcheck", "unknown link", {"LINK": "nearest"}, False, ["'nearest'", "(LINK)"]),
    ("linkcheck", "negative tolerance", {"LINK_TOLERANCE": -1}, False, ["(LINK_TOLERANCE)"]),
    ("linkcheck", "overlap 0.7", {"OVERLAP_TOLERANCE": 0.7}, False, ["OVERLAP_TOLERANCE"]),
    ("linkcheck", "no catchments", {"CATCHMENTS": None}, False, []),
    ("rechargereport", "the defaults", {}, True, []),
    ("rechargereport", "a PDF", {"REPORT": "/tmp/r.pdf"}, False, ["r.pdf", "(REPORT)"]),
    ("rechargereport", "no page", {"REPORT": None}, False, []),
    ("rechargereport", "unknown period", {"PERIOD": "week"}, False, ["'week'"]),
]


@pytest.mark.parametrize(
    "name, what, changes, accepted, words", CHECKS, ids=[f"{c[0]}: {c[1]}" for c in CHECKS]
)
def test_check_parameter_values(qgis_app, name, what, changes, accepted, words):
    ok, message = _alg(name).checkParameterValues(
        _parameters(name, **changes), QgsProcessingContext()
    )
    assert ok is accepted, message
    for word in words:
        assert word in message


# --------------------------------------------------------------------------- help

CAUTIONS = (
    "homogeneous aquifer",
    "evenly in space",
    "no regulation, diversions, pumping or return",
    "3–1,300 km²",
    "(common practice)",
    "Halford &amp; Mayer 2000",
    "not regional",
    "underflow",
    "qualified hydrogeologists",
)
#: Words each help must hold: the method, by its published names.
METHOD_WORDS = {
    "recessionindex": ("0.2144", "Rorabaugh 1964", "master recession curve", "log cycle"),
    "baseflowseparation": (
        "Eckhardt 2005",
        "Lyne &amp; Hollick 1979",
        "Nathan &amp; McMahon 1990",
        "Institute of Hydrology 1980",
        "a = 10<sup>−1/K</sup>",
        "Σ baseflow / Σ flow",
    ),
    "eventrecharge": ("0.2144", "Rorabaugh 1964", "R = 2(Q2 − Q1)·K/2.3026", "water year"),
    "linkcheck": ("ellipsoid", "outlet", "incremental", "5 %"),
    "rechargereport": ("self-contained", "Rorabaugh 1964", "Meyboom 1961", "0.2144"),
}


def _output_fields(run):
    """Every field the run wrote to any layer (the GeoPackage's fid and the inputs' own
    fields left out)."""
    from qgis.core import QgsProviderRegistry

    fields = set()
    path = run["path"]
    if not path.exists():
        return fields
    metadata = QgsProviderRegistry.instance().providerMetadata("ogr")
    for sub in metadata.querySublayers(str(path)):
        layer = QgsVectorLayer(f"{path}|layername={sub.name()}", sub.name(), "ogr")
        fields |= set(layer.fields().names())
    return fields - {"fid", "name"}


@pytest.mark.parametrize("name", TOOLBOX)
def test_help_covers_parameters_outputs_and_cautions(toolbox_runs, name):
    alg = _alg(name)
    from recharge_atlas.plugin.base import help_text

    text = help_text(alg.name())  # the full page (Help button)
    assert text, f"plugin/help/{name}.html is missing"
    for heading in (
        "What it does",
        "Method in brief",
        "Parameters",
        "Outputs",
        "Cautions",
        "References",
    ):
        assert f"<h3>{heading}</h3>" in text, (name, heading)
    for parameter in alg.parameterDefinitions():
        assert re.search(rf"\({parameter.name()}[,)]", text), (name, parameter.name())
    produced = _output_fields(toolbox_runs[name])
    undescribed = sorted(f for f in produced if f"<b>{f}</b>" not in text)
    assert not undescribed, f"plugin/help/{name}.html does not describe {undescribed}"
    for words in (*CAUTIONS, *METHOD_WORDS[name]):
        assert words in text, (name, words)
    if name != "rechargereport":
        assert produced, "the run wrote fields to check"
