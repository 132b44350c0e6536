"""subbasinrecharge inside real QGIS: the subbasin map of the demo region gives exactly what
``run_atlas_subbasins`` (the CLI's ``--subbasins``) gives, donors or empty subbasins as asked,
clear errors for a bad network, the style and the help."""

from __future__ import annotations

import math
import re

import pytest

pytest.importorskip("qgis.core")

from qgis.core import (  # noqa: E402
    QgsApplication,
    QgsGraduatedSymbolRenderer,
    QgsProcessingContext,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsProcessingOutputLayerDefinition,
    QgsProcessingUtils,
    QgsProject,
    QgsVectorLayer,
    QgsWkbTypes,
)
from support_qgis import (  # noqa: E402
    ONE_GAUGE,
    SAMPLE,
    assert_table_is,
    gpkg_layer,
    is_null,
    write_layer_copy,
)

ALGORITHM = "recharge_atlas:subbasinrecharge"
#: The demo subbasins' own fields.
INPUT_FIELDS = ["subbasin_id", "downstream_id", "name"]
#: Subbasins with no gauge downstream in the demo region.
UNGAUGED = ("U7", "U8", "U9")


def subbasin_parameters(**changes):
    """Parameters for the demo subbasin map; field parameters left to their defaults."""
    parameters = {
        "GAUGES": str(SAMPLE / "gauges.gpkg"),
        "DISCHARGE": str(SAMPLE / "discharge.csv"),
        "SUBBASINS": str(SAMPLE / "subbasins.gpkg"),
        "UNITS": "m3/s",
    }
    parameters.update(changes)
    return parameters


def _layer(path, table):
    layer = QgsVectorLayer(f"{path}|layername={table}", table, "ogr")
    assert layer.isValid(), f"{table} missing from {path}"
    return layer


def _by_id(layer):
    names = layer.fields().names()
    return {f["subbasin_id"]: dict(zip(names, f.attributes())) for f in layer.getFeatures()}


@pytest.fixture(scope="module")
def subbasin_algorithm(qgis_app):
    alg = QgsApplication.processingRegistry().createAlgorithmById(ALGORITHM)
    assert alg is not None, "the provider did not register subbasinrecharge"
    return alg


@pytest.fixture(scope="module")
def core_subbasins(core_run):
    return core_run(subbasins=SAMPLE / "subbasins.gpkg")


@pytest.fixture(scope="module")
def subbasin_run(qgis_app, tmp_path_factory):
    """One processing.run of subbasinrecharge on the demo region into a GeoPackage."""
    import processing

    out = tmp_path_factory.mktemp("subbasins") / "subbasins.gpkg"
    results = processing.run(
        ALGORITHM,
        subbasin_parameters(
            OUTPUT=gpkg_layer(out, "subbasins", geometry=True),
            CATCHMENTS=gpkg_layer(out, "catchments", geometry=True),
            ANNUAL=gpkg_layer(out, "annual"),
            EVENTS=gpkg_layer(out, "events"),
            LINKS=gpkg_layer(out, "links"),
        ),
    )
    return {"path": out, "results": results}


# --------------------------------------------------------------------------- the demo


def test_subbasins_are_the_cores(subbasin_run, core_subbasins):
    from recharge_atlas.plugin.subbasin_recharge import SUBBASIN_FIELDS

    added = [c for c in core_subbasins.subbasins.columns if c not in [*INPUT_FIELDS, "geometry"]]
    assert added == list(SUBBASIN_FIELDS), "the plugin knows the core's subbasin fields"
    layer = _layer(subbasin_run["path"], "subbasins")
    assert_table_is(
        layer, core_subbasins.subbasins, "subbasins", fields=[*INPUT_FIELDS, *SUBBASIN_FIELDS]
    )
    source = QgsVectorLayer(str(SAMPLE / "subbasins.gpkg"), "in", "ogr")
    assert [f.geometry().asWkt(6) for f in layer.getFeatures()] == [
        f.geometry().asWkt(6) for f in source.getFeatures()
    ], "valid subbasins are written as they came"
    rows = _by_id(layer)
    assert rows["U2"]["downstream_gauge"] == "QM02"
    assert rows["U4"]["estimate_source"] == "gauge QM01"
    for sid in UNGAUGED:
        assert rows[sid]["estimate_source"].startswith("donor: gauge"), sid
        assert math.isfinite(float(rows[sid]["recharge_mm_per_year"])), sid


def test_gauged_basins_built_from_the_subbasins_are_the_cores(subbasin_run, core_subbasins):
    from shapely import wkb

    layer = _layer(subbasin_run["path"], "catchments")
    assert_table_is(layer, core_subbasins.catchments.drop(columns="geometry"), "catchments")
    assert QgsWkbTypes.isMultiType(layer.wkbType())
    assert layer.crs().authid() == "EPSG:32624"
    for feature, want in zip(layer.getFeatures(), core_subbasins.catchments.geometry):
        assert wkb.loads(bytes(feature.geometry().asWkb())).equals(want), feature["gauge_id"]


def test_tables_are_the_cores(subbasin_run, core_subbasins):
    path = subbasin_run["path"]
    assert_table_is(_layer(path, "annual"), core_subbasins.annual, "annual")
    assert_table_is(_layer(path, "events"), core_subbasins.events, "events")
    assert_table_is(_layer(path, "links"), core_subbasins.links, "links")
    assert set(subbasin_run["results"]) == {"OUTPUT", "CATCHMENTS", "ANNUAL", "EVENTS", "LINKS"}


# --------------------------------------------------------------------------- donors, style


@pytest.fixture(scope="module")
def donor_run(subbasin_algorithm, one_gauge_discharge):
    """The one-gauge record run as the dialog runs it (outputs loaded into a project)."""
    project = QgsProject()
    context = QgsProcessingContext()
    context.setProject(project)
    parameters = subbasin_parameters(
        DISCHARGE=str(one_gauge_discharge),
        UNGAUGED="depth of the nearest gauged subbasin",
        CLASSES="equal interval",
        OUTPUT=QgsProcessingOutputLayerDefinition("TEMPORARY_OUTPUT", project),
        CATCHMENTS=QgsProcessingOutputLayerDefinition("TEMPORARY_OUTPUT", project),
    )
    alg = subbasin_algorithm.create()
    results, ok = alg.run(parameters, context, QgsProcessingFeedback())
    assert ok, results
    yield {"results": results, "context": context}
    del context  # before the project it points to
    del project


def test_donors_give_ungauged_subbasins_the_nearest_gauged_depth(
    donor_run, core_run, one_gauge_discharge
):
    core = core_run(subbasins=SAMPLE / "subbasins.gpkg", discharge=one_gauge_discharge)
    context = donor_run["context"]
    layer = QgsProcessingUtils.mapLayerFromString(donor_run["results"]["OUTPUT"], context)
    assert_table_is(layer, core.subbasins, "subbasins", fields=["subbasin_id", "estimate_source"])
    assert_table_is(layer, core.subbasins, "subbasins", fields=["recharge_mm_per_year"])
    rows = _by_id(layer)
    depth = float(rows["U5"]["recharge_mm_per_year"])
    assert rows["U5"]["estimate_source"] == f"gauge {ONE_GAUGE}"
    for sid in UNGAUGED:  # the only gauged subbasin with an estimate is the donor
        assert float(rows[sid]["recharge_mm_per_year"]) == depth, sid
        assert rows[sid]["estimate_source"].startswith(f"donor: gauge {ONE_GAUGE}"), sid
    assert is_null(rows["U1"]["recharge_mm_per_year"])
    assert rows["U1"]["estimate_source"] == "gauge QM04 (no estimate)", "not a donor's place"


def test_both_outputs_load_as_choropleths_with_the_classes_asked_for(donor_run):
    from recharge_atlas.algorithms.maps import map_classes
    from recharge_atlas.plugin.styling import NO_ESTIMATE_LABEL, no_estimate_expression

    context = donor_run["context"]
    processors = [
        context.layerToLoadOnCompletionDetails(donor_run["results"][name]).postProcessor()
        for name in ("OUTPUT", "CATCHMENTS")
    ]
    assert processors[0] is not processors[1], "Processing deletes each with its output"
    for name in ("OUTPUT", "CATCHMENTS"):
        dest = donor_run["results"][name]
        assert context.willLoadLayerOnCompletion(dest), name
        processor = context.layerToLoadOnCompletionDetails(dest).postProcessor()
        assert processor is not None, name
        layer = QgsProcessingUtils.mapLayerFromString(dest, context)
        processor.postProcessLayer(layer, context, QgsProcessingFeedback())
        renderer = layer.renderer()
        assert isinstance(renderer, QgsGraduatedSymbolRenderer), name
        assert renderer.classificationMethod().id() == "EqualInterval"
        values = [f["recharge_mm_per_year"] for f in layer.getFeatures()]
        nulls = sum(is_null(v) for v in values)
        values = [float(v) for v in values if not is_null(v)]
        breaks = map_classes(values, "equal_interval", 5)
        ranges = renderer.ranges()
        if nulls:  # subbasins without an estimate are drawn grey, in a last class
            assert renderer.classAttribute() == no_estimate_expression("recharge_mm_per_year")
            assert ranges.pop().label() == NO_ESTIMATE_LABEL, name
        else:
            assert renderer.classAttribute() == "recharge_mm_per_year"
        assert [r.upperValue() for r in ranges] == breaks[1:].tolist(), name


# --------------------------------------------------------------------------- errors


def _fails(tmp_path, match, **changes):
    import processing

    out = tmp_path / "out"
    out.mkdir()
    parameters = subbasin_parameters(
        OUTPUT=str(out / "subbasins.gpkg"), CATCHMENTS=str(out / "catchments.gpkg")
    )
    parameters.update(changes)
    with pytest.raises(QgsProcessingException, match=match) as caught:
        processing.run(ALGORITHM, parameters, feedback=QgsProcessingFeedback())
    assert "Traceback" not in str(caught.value)
    assert list(out.iterdir()) == [], "nothing is written"
    return str(caught.value)


def test_missing_downstream_field_is_named(qgis_app, tmp_path):
    message = _fails(tmp_path, "'flows_to'", DOWNSTREAM_FIELD="flows_to")
    assert "(DOWNSTREAM_FIELD)" in message
    assert "downstream_id" in message, "the fields found are listed"


def test_a_loop_in_the_network_is_named(qgis_app, tmp_path):
    """U1 -> U2 -> U4, and U4 made to drain back into U1."""
    looped = write_layer_copy(
        tmp_path / "looped.gpkg",
        SAMPLE / "subbasins.gpkg",
        "subbasins",
        values={3: {"downstream_id": "U1"}},
    )
    message = _fails(tmp_path, "drain in a loop", SUBBASINS=str(looped))
    assert "U1 -> U2 -> U4 -> U1" in message
    assert "'downstream_id'" in message and "(DOWNSTREAM_FIELD)" in message


def test_repeated_subbasin_ids_are_named(qgis_app, tmp_path):
    repeated = write_layer_copy(
        tmp_path / "repeated.gpkg",
        SAMPLE / "subbasins.gpkg",
        "subbasins",
        values={8: {"subbasin_id": "U8"}},
    )
    message = _fails(tmp_path, "repeated: U8", SUBBASINS=str(repeated))
    assert "(SUBBASIN_ID_FIELD)" in message


CHECKS = [
    # (what, changes, accepted, words the message must contain)
    ("the demo parameters", {}, True, []),
    ("donor by core id", {"UNGAUGED": "donor"}, True, []),
    ("empty by core id", {"UNGAUGED": "empty"}, True, []),
    ("empty by label", {"UNGAUGED": "no estimate"}, True, []),
    ("unknown choice", {"UNGAUGED": "mean"}, False, ["'mean'", "(UNGAUGED)", "donor"]),
    ("classes", {"CLASSES": "natural breaks"}, True, []),
    ("tolerance", {"LINK_TOLERANCE": -1}, False, ["(LINK_TOLERANCE)"]),
]


@pytest.mark.parametrize("what, changes, accepted, words", CHECKS, ids=[c[0] for c in CHECKS])
def test_check_parameter_values(subbasin_algorithm, what, changes, accepted, words):
    parameters = subbasin_parameters(OUTPUT="TEMPORARY_OUTPUT", **changes)
    ok, message = subbasin_algorithm.checkParameterValues(parameters, QgsProcessingContext())
    assert ok is accepted, message
    for word in words:
        assert word in message


# --------------------------------------------------------------------------- parameters, help


def test_parameters(subbasin_algorithm):
    from recharge_atlas.plugin import compat

    alg = subbasin_algorithm
    assert (alg.displayName(), alg.group(), alg.groupId()) == (
        "Subbasin recharge",
        "Recharge",
        "recharge",
    )
    names = [p.name() for p in alg.parameterDefinitions()]
    assert names[:12] == [
        "GAUGES",
        "GAUGE_ID_FIELD",
        "DISCHARGE",
        "DISCHARGE_GAUGE_FIELD",
        "DATE_FIELD",
        "VALUE_FIELD",
        "SUBBASINS",
        "SUBBASIN_ID_FIELD",
        "DOWNSTREAM_FIELD",
        "UNGAUGED",
        "UNITS",
        "WATER_YEAR_START",
    ]
    outputs = [
        "OUTPUT",
        "CATCHMENTS",
        "ANNUAL",
        "EVENTS",
        "PERIODS",
        "SEGMENTS",
        "MASTER_RECESSION",
        "DAILY",
        "LINKS",
        "REPORT",
    ]
    assert names[-len(outputs) :] == outputs
    assert "LINK" not in names, "subbasins locate their gauges by location"
    other = QgsApplication.processingRegistry().algorithmById("recharge_atlas:catchmentrecharge")
    shared = [
        p.name() for p in other.parameterDefinitions() if p.flags() & compat.PARAMETER_ADVANCED
    ]
    advanced = [
        p.name() for p in alg.parameterDefinitions() if p.flags() & compat.PARAMETER_ADVANCED
    ]
    # Subbasins neither link by a field nor take precipitation (catchments only).
    not_here = ("LINK", "PRECIPITATION_FIELD", "PRECIPITATION_RASTER")
    assert advanced == [n for n in shared if n not in not_here], "the same method parameters"
    for name, default in (
        ("SUBBASIN_ID_FIELD", "subbasin_id"),
        ("DOWNSTREAM_FIELD", "downstream_id"),
    ):
        parameter = alg.parameterDefinition(name)
        assert parameter.defaultValue() == default
        assert parameter.parentLayerParameterName() == "SUBBASINS"
    ungauged = alg.parameterDefinition("UNGAUGED")
    assert ungauged.usesStaticStrings() and len(ungauged.options()) == 2
    assert ungauged.defaultValue() == ungauged.options()[0]
    assert not alg.parameterDefinition("CATCHMENTS").flags() & compat.PARAMETER_ADVANCED


def test_help_describes_every_output_field_and_the_cautions(subbasin_algorithm, core_subbasins):
    from recharge_atlas.plugin.base import help_text
    from recharge_atlas.plugin.sink_writing import _TABLE_FIELDS, table_fields

    text = help_text(subbasin_algorithm.name())  # the full page (Help button)
    assert text, "plugin/help/subbasinrecharge.html is missing"
    produced = {c for c in core_subbasins.subbasins.columns if c not in INPUT_FIELDS}
    produced |= set(core_subbasins.catchments.columns)
    for name in _TABLE_FIELDS:
        produced |= {field for field, _kind in table_fields(name)}
    produced -= {"geometry"}
    undescribed = sorted(f for f in produced if f"<b>{f}</b>" not in text)
    assert not undescribed, f"plugin/help/subbasinrecharge.html does not describe {undescribed}"
    for words in (
        "homogeneous aquifer",
        "evenly in",
        "no regulation, diversions, pumping or return",
        "3–1,300 km²",
        "Halford &amp; Mayer 2000",
        "not regional",
        "qualified hydrogeologists",
        "0.2144",
        "Rorabaugh 1964",
        "donor",
        "estimate_source",
    ):
        assert words in text, words
    for parameter in subbasin_algorithm.parameterDefinitions():
        assert re.search(rf"\({parameter.name()}[,)]", text), parameter.name()
