"""catchmentrecharge inside real QGIS through processing.run: same numbers as the core pipeline
(what the CLI computes), clear errors for bad input, cancel, and the choropleth style."""

from __future__ import annotations

import hashlib
import math
import re

import pytest

pytest.importorskip("qgis.core")

from qgis.core import (  # noqa: E402
    QgsGraduatedSymbolRenderer,
    QgsProcessingContext,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsProcessingOutputLayerDefinition,
    QgsProcessingUtils,
    QgsProject,
    QgsVectorLayer,
)
from support_qgis import SAMPLE, sample_parameters  # noqa: E402

ALGORITHM = "recharge_atlas:catchmentrecharge"
#: Relative tolerance for "the same number": the same pipeline on the same values.
SAME = 1e-9


def _digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def input_digests():
    """Digests of the demo inputs before any run here, to check that no run changes them."""
    return {p.name: _digest(p) for p in sorted(SAMPLE.glob("*")) if p.is_file()}


def _layer(path, table):
    layer = QgsVectorLayer(f"{path}|layername={table}", table, "ogr")
    assert layer.isValid(), f"{table} missing from {path}"
    return layer


def _rows(layer):
    names = layer.fields().names()
    return [dict(zip(names, feature.attributes())) for feature in layer.getFeatures()]


def _number(value):
    """A QGIS attribute as float, NaN for NULL."""
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _same(a, b, rel=SAME):
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return math.isclose(a, b, rel_tol=rel, abs_tol=1e-12)


# --------------------------------------------------------------------------- the main run


def test_outputs_have_the_documented_fields(processing_run, input_digests):
    path = processing_run["path"]
    results = processing_run["results"]
    assert set(results) >= {"OUTPUT", "ANNUAL", "EVENTS"}
    catchments = _layer(path, "catchments")
    names = set(catchments.fields().names())
    assert {
        "gauge_id",
        "area_km2",
        "recession_index_days",
        "recharge_mm_per_year",
        "quality",
    } <= names
    assert "name" in names, "the input's own fields are kept"
    assert catchments.featureCount() == 9
    assert (
        catchments.crs().authid()
        == QgsVectorLayer(str(SAMPLE / "catchments.gpkg"), "c", "ogr").crs().authid()
    )
    annual = _layer(path, "annual")
    assert {"gauge_id", "water_year", "recharge_mm", "recharge_m3", "complete"} <= set(
        annual.fields().names()
    )
    assert not annual.isSpatial()
    events = _layer(path, "events")
    assert {
        "gauge_id",
        "peak_date",
        "critical_time_days",
        "q_before_m3s",
        "q_after_m3s",
        "recharge_m3",
        "recharge_mm",
    } <= set(events.fields().names())
    assert not events.isSpatial()


def test_geometry_is_the_input_geometry(processing_run):
    source = QgsVectorLayer(str(SAMPLE / "catchments.gpkg"), "in", "ogr")
    out = _layer(processing_run["path"], "catchments")
    before = [f.geometry().asWkt(6) for f in source.getFeatures()]
    after = [f.geometry().asWkt(6) for f in out.getFeatures()]
    assert after == before


def test_same_numbers_as_the_core_pipeline(processing_run, core_result):
    """QGIS and the CLI run one pipeline: per gauge, recharge and K agree to ~1e-9."""
    expected = core_result.catchments.set_index("name")
    rows = _rows(_layer(processing_run["path"], "catchments"))
    assert len(rows) == len(expected)
    for row in rows:
        want = expected.loc[row["name"]]
        for field in (
            "recharge_mm_per_year",
            "recession_index_days",
            "area_km2",
            "recharge_m3_per_year",
        ):
            assert _same(_number(row[field]), float(want[field])), (row["name"], field)
        assert row["quality"] == want["quality"]
        assert int(row["events"]) == int(want["events"])


def test_annual_and_event_tables_match_the_core(processing_run, core_result):
    annual = _rows(_layer(processing_run["path"], "annual"))
    events = _rows(_layer(processing_run["path"], "events"))
    assert len(annual) == len(core_result.annual)
    assert len(events) == len(core_result.events)
    total_qgis = sum(
        _number(r["recharge_m3"]) for r in events if not math.isnan(_number(r["recharge_m3"]))
    )
    total_core = float(core_result.events["recharge_m3"].sum())
    assert _same(total_qgis, total_core, 1e-9)
    first = core_result.events.iloc[0]
    assert events[0]["peak_date"].toPyDate() == first["peak_date"].date()
    complete = [bool(r["complete"]) for r in annual]
    assert complete == [bool(v) for v in core_result.annual["complete"]]


def test_poor_record_gauge_is_flagged(processing_run):
    rows = {r["gauge_id"]: r for r in _rows(_layer(processing_run["path"], "catchments"))}
    assert rows["TB06"]["quality"] != "ok"
    assert rows["QM01"]["quality"] == "ok"


def test_catchments_without_a_gauge_are_kept_and_say_so(processing_run):
    rows = _rows(_layer(processing_run["path"], "catchments"))
    ungauged = [r for r in rows if "no gauge" in str(r["quality"])]
    assert len(ungauged) == 3
    assert all(math.isnan(_number(r["recharge_mm_per_year"])) for r in ungauged)


def test_typed_table_layer_gives_the_same_numbers(qgis_app, core_result):
    """DISCHARGE as a delimited-text layer with detected types (QDate dates, double values,
    NULL for empty cells) gives the numbers of the text-only read."""
    import processing

    uri = f"file://{SAMPLE / 'discharge.csv'}?delimiter=,&detectTypes=yes&geomType=none"
    table = QgsVectorLayer(uri, "discharge", "delimitedtext")
    assert table.isValid()
    assert table.fields().field("date").typeName().lower() == "date"
    results = processing.run(
        ALGORITHM, sample_parameters(DISCHARGE=table, OUTPUT="TEMPORARY_OUTPUT")
    )
    expected = core_result.catchments.set_index("name")
    for row in _rows(results["OUTPUT"]):
        want = expected.loc[row["name"]]
        assert _same(_number(row["recharge_mm_per_year"]), float(want["recharge_mm_per_year"]))
        assert _same(_number(row["recession_index_days"]), float(want["recession_index_days"]))


# --------------------------------------------------------------------------- parameters

CHECKS = [
    # (what, changes, accepted, words the message must contain)
    ("the demo parameters", {}, True, []),
    ("units by alias", {"UNITS": "cfs"}, True, []),
    ("every unit label", {"UNITS": "ML/d"}, True, []),
    (
        "field defaults left out",
        {"GAUGE_ID_FIELD": None, "DATE_FIELD": None, "VALUE_FIELD": None},
        True,
        [],
    ),
    ("no gauges", {"GAUGES": None}, False, []),
    ("no catchments", {"CATCHMENTS": None}, False, []),
    ("water year month 13", {"WATER_YEAR_START": 13}, False, ["WATER_YEAR_START"]),
    ("water year month 0", {"WATER_YEAR_START": 0}, False, ["WATER_YEAR_START"]),
    ("unknown units", {"UNITS": "furlongs"}, False, ["furlongs", "m3/s", "ft3/s"]),
]


@pytest.mark.parametrize("what, changes, accepted, words", CHECKS, ids=[c[0] for c in CHECKS])
def test_check_parameter_values(algorithm, what, changes, accepted, words):
    parameters = sample_parameters(OUTPUT="TEMPORARY_OUTPUT", **changes)
    parameters = {k: v for k, v in parameters.items() if v is not None}
    ok, message = algorithm.checkParameterValues(parameters, QgsProcessingContext())
    assert ok is accepted, message
    for word in words:
        assert word in message


BAD_FIELDS = [
    ("VALUE_FIELD", "flow"),
    ("DATE_FIELD", "day"),
    ("DISCHARGE_GAUGE_FIELD", "station"),
    ("GAUGE_ID_FIELD", "site_code"),
    ("CATCHMENT_GAUGE_FIELD", "basin_gauge"),
]


@pytest.mark.parametrize("parameter, field", BAD_FIELDS)
def test_missing_field_is_named_and_nothing_is_written(
    qgis_app, tmp_path, input_digests, parameter, field
):
    import processing

    out = tmp_path / "bad.gpkg"
    parameters = sample_parameters(
        OUTPUT=str(out), ANNUAL=str(tmp_path / "annual.gpkg"), EVENTS=str(tmp_path / "events.gpkg")
    )
    parameters[parameter] = field
    with pytest.raises(QgsProcessingException, match=field) as caught:
        processing.run(ALGORITHM, parameters, feedback=QgsProcessingFeedback())
    assert "Traceback" not in str(caught.value)
    assert list(tmp_path.iterdir()) == []


class CancelAfterFirstGauge(QgsProcessingFeedback):
    """Presses cancel as soon as the second gauge starts."""

    def __init__(self):
        super().__init__()
        self.gauges = []

    def setProgressText(self, text):  # noqa: N802 (QGIS API name)
        super().setProgressText(text)
        if text.startswith("Gauge "):
            self.gauges.append(text)
            if len(self.gauges) >= 2:
                self.cancel()


def test_cancel_leaves_no_output(qgis_app, tmp_path):
    import processing

    out = tmp_path / "cancelled.gpkg"
    feedback = CancelAfterFirstGauge()
    with pytest.raises(QgsProcessingException, match="cancelled"):
        processing.run(
            ALGORITHM,
            sample_parameters(
                OUTPUT=str(out),
                ANNUAL=str(tmp_path / "a.gpkg"),
                EVENTS=str(tmp_path / "e.gpkg"),
                REPORT=str(tmp_path / "report.html"),
            ),
            feedback=feedback,
        )
    assert len(feedback.gauges) == 2, feedback.gauges
    assert list(tmp_path.iterdir()) == []


def test_optional_tables_can_be_skipped(qgis_app, tmp_path):
    import processing

    out = tmp_path / "only.gpkg"
    results = processing.run(ALGORITHM, sample_parameters(OUTPUT=str(out)))
    assert out.exists()
    assert "ANNUAL" not in results or not results["ANNUAL"]
    assert [p.name for p in tmp_path.iterdir()] == ["only.gpkg"]


# --------------------------------------------------------------------------- style


def _value_ranges(renderer):
    """The renderer's classes of values, the "no estimate" class (NULL) left out."""
    from recharge_atlas.plugin.styling import NO_ESTIMATE_LABEL

    return [r for r in renderer.ranges() if r.label() != NO_ESTIMATE_LABEL]


def test_style_is_a_graduated_map_of_recharge(processing_run):
    from recharge_atlas.plugin.styling import (
        NO_ESTIMATE_LABEL,
        apply_recharge_style,
        no_estimate_expression,
    )

    layer = _layer(processing_run["path"], "catchments")
    renderer = apply_recharge_style(layer)
    assert isinstance(layer.renderer(), QgsGraduatedSymbolRenderer)
    # The demo has catchments without an estimate: NULL is classified as a stand-in number
    # that only the last class, "no estimate", holds.
    assert renderer.classAttribute() == no_estimate_expression("recharge_mm_per_year")
    assert renderer.ranges()[-1].label() == NO_ESTIMATE_LABEL
    ranges = _value_ranges(renderer)
    assert len(ranges) >= 3
    assert all("mm/yr" in r.label() for r in ranges)
    lows = [r.lowerValue() for r in ranges]
    assert lows == sorted(lows)
    values = [_number(f["recharge_mm_per_year"]) for f in layer.getFeatures()]
    values = [v for v in values if not math.isnan(v)]
    # Limits are rounded outwards (maps.map_classes): the first starts at or just below the
    # smallest value, never at a false 0 made of the catchments without an estimate.
    assert 0.9 * min(values) <= lows[0] <= min(values), "no estimate is not class 0"
    assert ranges[-1].upperValue() >= max(values)
    colours = [r.symbol().color().lightness() for r in ranges]
    assert colours[0] > colours[-1], "little recharge light, much recharge dark"


@pytest.mark.parametrize("scheme", ["quantiles", "equal_interval", "natural_breaks"])
def test_style_classes_are_the_cores(processing_run, scheme):
    """The style's class limits and labels are the core's map_classes and class_labels, the
    ones the command line's PNG map draws."""
    from recharge_atlas.algorithms.maps import class_labels, map_classes
    from recharge_atlas.plugin.styling import apply_recharge_style

    layer = _layer(processing_run["path"], "catchments")
    renderer = apply_recharge_style(layer, scheme=scheme)
    values = [_number(f["recharge_mm_per_year"]) for f in layer.getFeatures()]
    breaks = map_classes(values, scheme, 5)
    ranges = _value_ranges(renderer)
    assert [r.lowerValue() for r in ranges] == breaks[:-1].tolist()
    assert [r.upperValue() for r in ranges] == breaks[1:].tolist()
    assert [r.label() for r in ranges] == [f"{t} mm/yr" for t in class_labels(breaks)]


def test_style_is_applied_when_the_output_loads(algorithm, qgis_app):
    """The post-processor is attached to OUTPUT when it is to be loaded into a project, with
    the classes asked for (CLASSES, CLASS_COUNT): natural breaks give the core's limits."""
    from recharge_atlas.algorithms.maps import map_classes
    from recharge_atlas.plugin.styling import no_estimate_expression

    project = QgsProject()
    context = QgsProcessingContext()
    context.setProject(project)
    feedback = QgsProcessingFeedback()
    parameters = sample_parameters(
        OUTPUT=QgsProcessingOutputLayerDefinition("TEMPORARY_OUTPUT", project),
        ANNUAL="TEMPORARY_OUTPUT",
        EVENTS="TEMPORARY_OUTPUT",
        CLASSES="natural breaks",
        CLASS_COUNT=3,
    )
    alg = algorithm.create()
    results, ok = alg.run(parameters, context, feedback)
    assert ok, results
    dest = results["OUTPUT"]
    assert context.willLoadLayerOnCompletion(dest)
    processor = context.layerToLoadOnCompletionDetails(dest).postProcessor()
    assert processor is not None
    layer = QgsProcessingUtils.mapLayerFromString(dest, context)
    processor.postProcessLayer(layer, context, feedback)
    assert isinstance(layer.renderer(), QgsGraduatedSymbolRenderer)
    assert layer.renderer().classAttribute() == no_estimate_expression("recharge_mm_per_year")
    values = [_number(f["recharge_mm_per_year"]) for f in layer.getFeatures()]
    breaks = map_classes(values, "natural_breaks", 3)
    ranges = _value_ranges(layer.renderer())
    assert len(ranges) == 3
    assert [r.upperValue() for r in ranges] == breaks[1:].tolist()
    assert layer.renderer().classificationMethod().id() == "Jenks"


def test_style_ignores_a_layer_without_the_field(qgis_app):
    from recharge_atlas.plugin.styling import apply_recharge_style

    layer = QgsVectorLayer("Polygon?crs=EPSG:4326&field=name:string", "plain", "memory")
    assert apply_recharge_style(layer) is None


def test_no_run_changed_the_inputs(processing_run, input_digests):
    after = {p.name: _digest(p) for p in sorted(SAMPLE.glob("*")) if p.is_file()}
    assert after == input_digests


def test_help_describes_every_output_field_and_the_cautions(algorithm, core_result):
    """Every field the algorithm writes to any output, the parameters with their ids, and the
    cautions, are in the help."""
    from recharge_atlas.plugin.base import help_text
    from recharge_atlas.plugin.sink_writing import _TABLE_FIELDS, table_fields

    text = help_text(algorithm.name())  # the full page (Help button)
    input_fields = {"name", "geometry"}  # the demo catchments' own fields
    produced = {c for c in core_result.catchments.columns if c not in input_fields}
    for frame in (
        core_result.annual,
        core_result.events,
        core_result.periods,
        core_result.segments,
        core_result.master_recession,
        core_result.daily(),
    ):
        produced |= set(frame.columns)
    for name in _TABLE_FIELDS:
        produced |= {field for field, _kind in table_fields(name)}
    undescribed = sorted(f for f in produced if f"<b>{f}</b>" not in text)
    assert not undescribed, f"plugin/help/catchmentrecharge.html does not describe {undescribed}"
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
    ):
        assert words in text.replace("\n", " "), words
    for words in (
        "Eckhardt 2005",
        "Lyne &amp; Hollick 1979",
        "Nathan &amp; McMahon 1990",
        "Institute of Hydrology 1980",
        "Meyboom 1961",
        "lower bound",
        "recharge − baseflow − storage_change",
    ):
        assert words in text, words
    for parameter in algorithm.parameterDefinitions():  # "(NAME)" or "(NAME, optional ...)"
        assert re.search(rf"\({parameter.name()}[,)]", text), parameter.name()


def test_two_worker_processes_give_the_same_numbers(qgis_app, processing_run, tmp_path):
    """WORKERS shares the gauges among processes; the numbers do not change (issue 6)."""
    import processing
    from support_qgis import gpkg_layer

    out = tmp_path / "workers.gpkg"
    processing.run(
        "recharge_atlas:catchmentrecharge",
        sample_parameters(
            WORKERS=2,
            OUTPUT=gpkg_layer(out, "catchments", geometry=True),
            ANNUAL=gpkg_layer(out, "annual"),
        ),
    )
    one = {r["name"]: r for r in _rows(_layer(processing_run["path"], "catchments"))}
    two = {r["name"]: r for r in _rows(_layer(out, "catchments"))}
    assert one.keys() == two.keys()
    for name, row in two.items():
        for field in ("recharge_mm_per_year", "recession_index_days", "baseflow_index"):
            assert _same(_number(row[field]), _number(one[name][field])), (name, field)
