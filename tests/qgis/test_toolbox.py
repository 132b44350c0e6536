"""The toolbox beside the two recharge algorithms, inside real QGIS through processing.run:
recessionindex, baseflowseparation, eventrecharge, linkcheck and rechargereport give the core's
numbers (run_gauges, check_links, run_atlas), say what they did in the log, read discharge
from any table QGIS reads, chain in a model, stop cleanly, and style what they load.

Runs use the one-gauge discharge table: the other gauges have no record, so they are skipped
and the summary says so, while every field of every output is still written.
"""

from __future__ import annotations

import math

import pytest

pytest.importorskip("qgis.core")

from qgis.core import (  # noqa: E402
    QgsCoordinateTransformContext,
    QgsGraduatedSymbolRenderer,
    QgsProcessingContext,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsProcessingOutputLayerDefinition,
    QgsProcessingUtils,
    QgsProject,
    QgsVectorFileWriter,
    QgsVectorLayer,
)
from support_qgis import (  # noqa: E402
    ONE_GAUGE,
    SAMPLE,
    assert_table_is,
    is_null,
)


def _layer(path, table):
    layer = QgsVectorLayer(f"{path}|layername={table}", table, "ogr")
    assert layer.isValid(), f"{table} missing from {path}"
    return layer


def _rows(layer, key="gauge_id"):
    names = layer.fields().names()
    return {f[key]: dict(zip(names, f.attributes())) for f in layer.getFeatures()}


@pytest.fixture(scope="module")
def core_one_gauge(core_gauges, gauges_with_area, one_gauge_discharge):
    """The core's gauge pipeline on the inputs of each gauge run of ``toolbox_runs``."""

    def run(name):
        from support_qgis import TOOLBOX_SETTINGS

        return core_gauges(
            gauges=gauges_with_area,
            discharge=one_gauge_discharge,
            area_field="area_km2",
            **TOOLBOX_SETTINGS[name],
        )

    return run


# --------------------------------------------------------------------------- same numbers


def test_recession_index_is_the_cores(toolbox_runs, core_one_gauge):
    run = toolbox_runs["recessionindex"]
    core = core_one_gauge("recessionindex")
    fields = [
        "gauge_id",
        "area_km2",
        "recession_index_days",
        "recession_index_low",
        "recession_index_high",
        "recession_segments",
        "critical_time_days",
        "runoff_end_lag_days",
        "quality",
    ]
    gauges = _layer(run["path"], "gauges")
    assert gauges.fields().names() == ["fid", "name", *fields], "the gauges' own fields first"
    assert_table_is(gauges, core.gauge_table()[fields], "gauges", fields=fields)
    assert_table_is(_layer(run["path"], "segments"), core.segments, "segments")
    assert_table_is(
        _layer(run["path"], "master_recession"), core.master_recession, "master_recession"
    )
    assert gauges.wkbType() == QgsVectorLayer(str(SAMPLE / "gauges.gpkg"), "g", "ogr").wkbType()


def test_recession_index_is_the_one_catchment_recharge_uses(toolbox_runs, processing_run):
    """With the catchment's area as the gauge's, the gauge-only K, Tc and N are exactly those
    catchmentrecharge wrote for that catchment."""
    gauges = _rows(_layer(toolbox_runs["recessionindex"]["path"], "gauges"))
    catchments = _rows(_layer(processing_run["path"], "catchments"))
    for field in ("recession_index_days", "critical_time_days", "runoff_end_lag_days"):
        assert float(gauges[ONE_GAUGE][field]) == float(catchments[ONE_GAUGE][field]), field


def test_gauges_without_a_record_are_skipped_and_said_so(toolbox_runs):
    run = toolbox_runs["recessionindex"]
    rows = _rows(_layer(run["path"], "gauges"))
    assert len(rows) == 6
    for gid, row in rows.items():
        if gid == ONE_GAUGE:
            assert not is_null(row["recession_index_days"])
        else:
            assert is_null(row["recession_index_days"]), gid
            assert "no discharge record" in row["quality"], gid
    log = run["log"]
    assert any(t.startswith(f"Gauge {ONE_GAUGE} (") for t in log.progress_texts), "per gauge"
    summary = [t for k, t in log.lines if t.startswith("Summary:")]
    assert summary == [
        "Summary: 6 gauges: 1 computed (0 of them flagged), 5 skipped "
        "(QM01, QM02, QT03, QM04, TB06)"
    ]
    assert "gauge QM01: no discharge record" in log.text("warning"), "per-gauge warnings"


def test_baseflow_is_the_cores(toolbox_runs, core_one_gauge):
    run = toolbox_runs["baseflowseparation"]
    core = core_one_gauge("baseflowseparation")
    fields = [
        "gauge_id",
        "area_km2",
        "recession_index_days",
        "baseflow_index",
        "baseflow_mm_per_year",
        "quality",
    ]
    gauges = _layer(run["path"], "gauges")
    assert gauges.fields().names()[-len(fields) :] == fields
    assert_table_is(gauges, core.gauge_table()[fields], "gauges", fields=fields)
    daily = _layer(run["path"], "daily")
    assert_table_is(daily, core.daily(), "daily")
    row = _rows(gauges)[ONE_GAUGE]
    assert 0 < float(row["baseflow_index"]) < 1


def test_events_are_the_cores(toolbox_runs, core_one_gauge):
    run = toolbox_runs["eventrecharge"]
    core = core_one_gauge("eventrecharge")
    assert_table_is(_layer(run["path"], "events"), core.events, "events")
    gauges = _layer(run["path"], "gauges")
    plain = [
        "gauge_id",
        "area_km2",
        "recession_index_days",
        "critical_time_days",
        "runoff_end_lag_days",
        "events",
        "recharge_m3_per_year",
        "recharge_mm_per_year",
        "complete_years",
        "quality",
    ]
    assert_table_is(gauges, core.gauge_table()[plain], "gauges", fields=plain)
    row = _rows(gauges)[ONE_GAUGE]
    events = core.events[core.events["gauge_id"] == ONE_GAUGE]
    used = events[events["used"].astype(bool)]
    assert int(row["events"]) == len(used)
    assert int(row["events_skipped"]) == len(events) - len(used)
    assert float(row["mean_event_recharge_m3"]) == pytest.approx(used["recharge_m3"].mean())
    assert float(row["mean_event_recharge_mm"]) == pytest.approx(used["recharge_mm"].mean())
    assert not used["recharge_mm"].isna().any(), "the area field gives depths"
    other = _rows(gauges)["QM01"]
    assert int(other["events"]) == 0 and int(other["events_skipped"]) == 0
    assert is_null(other["mean_event_recharge_m3"])


def test_water_year_start_is_used(toolbox_runs, core_one_gauge, core_gauges, gauges_with_area):
    """WATER_YEAR_START=4 moves the water years, and with them the mean annual recharge."""
    october = core_gauges(gauges=gauges_with_area, area_field="area_km2")
    april = core_one_gauge("eventrecharge")
    rows = _rows(_layer(toolbox_runs["eventrecharge"]["path"], "gauges"))
    assert april.settings.water_year_start == 4
    want = april.gauge_table().set_index("gauge_id").loc[ONE_GAUGE, "recharge_mm_per_year"]
    other = october.gauge_table().set_index("gauge_id").loc[ONE_GAUGE, "recharge_mm_per_year"]
    assert float(rows[ONE_GAUGE]["recharge_mm_per_year"]) == pytest.approx(want, rel=1e-9)
    assert want != pytest.approx(other, rel=1e-6)


def test_link_check_is_the_cores(toolbox_runs):
    from recharge_atlas.algorithms import files
    from recharge_atlas.algorithms.pipeline import Settings, check_links
    from recharge_atlas.plugin.link_check import LINK_FIELDS

    layer, links = check_links(
        files.read_layer(SAMPLE / "gauges.gpkg", "gauges"),
        files.read_layer(SAMPLE / "catchments.gpkg", "catchments"),
        Settings(),
    )
    assert tuple(c for c in layer.columns if c not in ("name", "geometry")) == LINK_FIELDS
    run = toolbox_runs["linkcheck"]
    out = _layer(run["path"], "catchments")
    assert_table_is(out, layer, "catchments", fields=["name", *LINK_FIELDS])
    assert_table_is(_layer(run["path"], "links"), links, "links")
    source = QgsVectorLayer(str(SAMPLE / "catchments.gpkg"), "in", "ogr")
    assert [f.geometry().asWkt(6) for f in out.getFeatures()] == [
        f.geometry().asWkt(6) for f in source.getFeatures()
    ]
    summary = [t for t in run["log"].text("info").splitlines() if t.startswith("Summary:")]
    assert summary[-1] == (
        "Summary: 6 gauges: 6 linked, 0 not linked (0 unlinked, 0 ambiguous, 0 on several "
        "catchments); 6 of 9 catchments have a gauge; 3 gauged basins lie inside another"
    )
    assert "discharge" not in run["log"].text().lower(), "no discharge is read"


def test_report_is_written_alone(toolbox_runs):
    run = toolbox_runs["rechargereport"]
    assert set(run["results"]) == {"REPORT"}
    path = run["results"]["REPORT"]
    assert path == run["parameters"]["REPORT"]
    text = open(path, encoding="utf-8").read()
    assert text.lstrip().lower().startswith("<!doctype html")
    assert ONE_GAUGE in text and "Halford" in text
    assert [p.name for p in run["path"].parent.iterdir() if p.suffix == ".html"] == [
        "report.html"
    ], "no temporary file is left beside it"
    assert "Summary: 6 gauges: 1 computed" in run["log"].text("info")
    # Where it came from (issue 15): the version, the inputs with their SHA-256 in the log and
    # the report, and the settings under their Processing names.
    import hashlib

    from recharge_atlas.algorithms.provenance import tool_version

    sha = hashlib.sha256((SAMPLE / "gauges.gpkg").read_bytes()).hexdigest()
    log = run["log"].text("info")
    assert (
        f"Recharge Atlas {tool_version()}, QGIS Processing (recharge_atlas:rechargereport)" in log
    )
    assert sha in log and sha in text
    assert "How this run was made" in text and "BFI_MAX" in text


# --------------------------------------------------------------------------- inputs


@pytest.fixture(scope="module")
def discharge_tables(qgis_app, one_gauge_discharge, tmp_path_factory):
    """The one-gauge discharge table as a GeoPackage table and as a SpatiaLite database table,
    both with typed fields (dates as dates), opened the way QGIS opens them."""
    folder = tmp_path_factory.mktemp("discharge-tables")
    uri = f"file://{one_gauge_discharge}?delimiter=,&detectTypes=yes&geomType=none"
    csv = QgsVectorLayer(uri, "discharge", "delimitedtext")
    assert csv.isValid()
    layers = {}
    for kind, driver, suffix, options, provider in (
        ("geopackage", "GPKG", "gpkg", [], "ogr"),
        ("database", "SQLite", "sqlite", ["SPATIALITE=YES"], "spatialite"),
    ):
        path = folder / f"discharge.{suffix}"
        save = QgsVectorFileWriter.SaveVectorOptions()
        save.driverName = driver
        save.layerName = "discharge"
        save.datasourceOptions = options
        error = QgsVectorFileWriter.writeAsVectorFormatV3(
            csv, str(path), QgsCoordinateTransformContext(), save
        )
        assert error[0] == QgsVectorFileWriter.NoError, error
        if provider == "ogr":
            layer = QgsVectorLayer(f"{path}|layername=discharge", "discharge", "ogr")
        else:
            layer = QgsVectorLayer(f"dbname='{path}' table=\"discharge\"", "discharge", provider)
        assert layer.isValid(), kind
        assert layer.featureCount() == csv.featureCount(), kind
        layers[kind] = layer
    return layers


@pytest.mark.parametrize("kind", ["geopackage", "database"])
def test_discharge_from_other_tables_gives_the_same_events(
    qgis_app, discharge_tables, gauges_with_area, core_one_gauge, kind
):
    import processing

    results = processing.run(
        "recharge_atlas:eventrecharge",
        {
            "GAUGES": str(gauges_with_area),
            "AREA_FIELD": "area_km2",
            "DISCHARGE": discharge_tables[kind],
            "WATER_YEAR_START": 4,
            "EVENTS": "TEMPORARY_OUTPUT",
        },
    )
    assert set(results) == {"EVENTS"}, "the gauge points are optional"
    assert_table_is(results["EVENTS"], core_one_gauge("eventrecharge").events, "events")


def test_missing_area_field_is_named_and_nothing_is_written(
    qgis_app, gauges_with_area, one_gauge_discharge, tmp_path
):
    import processing

    with pytest.raises(QgsProcessingException, match="basin_area") as caught:
        processing.run(
            "recharge_atlas:recessionindex",
            {
                "GAUGES": str(gauges_with_area),
                "AREA_FIELD": "basin_area",
                "DISCHARGE": str(one_gauge_discharge),
                "OUTPUT": str(tmp_path / "gauges.gpkg"),
                "SEGMENTS": str(tmp_path / "segments.gpkg"),
            },
        )
    assert "(AREA_FIELD)" in str(caught.value) and "Traceback" not in str(caught.value)
    assert list(tmp_path.iterdir()) == []


def test_cancel_stops_at_the_next_gauge_and_writes_nothing(qgis_app, log_feedback, tmp_path):
    import processing

    class CancelAtSecondGauge(log_feedback):
        def setProgressText(self, text):  # noqa: N802 (QGIS API name)
            super().setProgressText(text)
            if sum(t.startswith("Gauge ") for t in self.progress_texts) >= 2:
                self.cancel()

    feedback = CancelAtSecondGauge()
    with pytest.raises(QgsProcessingException, match="cancelled"):
        processing.run(
            "recharge_atlas:baseflowseparation",
            {
                "GAUGES": str(SAMPLE / "gauges.gpkg"),
                "DISCHARGE": str(SAMPLE / "discharge.csv"),
                "OUTPUT": str(tmp_path / "gauges.gpkg"),
                "DAILY": str(tmp_path / "daily.gpkg"),
            },
            feedback=feedback,
        )
    assert sum(t.startswith("Gauge ") for t in feedback.progress_texts) == 2
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------- models


def test_recession_index_feeds_baseflow_separation_in_a_model(
    qgis_app, gauges_with_area, one_gauge_discharge, core_gauges
):
    """A model: the gauges with K from recessionindex are the gauges of baseflowseparation,
    whose Eckhardt filter takes K from their recession_index_days field. The chained baseflow
    is the core's with the K estimated in one run."""
    from qgis.core import (
        QgsProcessingModelAlgorithm,
        QgsProcessingModelChildAlgorithm,
        QgsProcessingModelChildParameterSource,
        QgsProcessingModelOutput,
    )

    static = QgsProcessingModelChildParameterSource.fromStaticValue
    model = QgsProcessingModelAlgorithm("K then baseflow", "tests")
    inputs = {
        "AREA_FIELD": "area_km2",
        "DISCHARGE": str(one_gauge_discharge),
    }
    first = QgsProcessingModelChildAlgorithm("recharge_atlas:recessionindex")
    first.setChildId("k")
    for name, value in {"GAUGES": str(gauges_with_area), **inputs}.items():
        first.addParameterSources(name, [static(value)])
    model.addChildAlgorithm(first)
    second = QgsProcessingModelChildAlgorithm("recharge_atlas:baseflowseparation")
    second.setChildId("baseflow")
    second.addParameterSources(
        "GAUGES", [QgsProcessingModelChildParameterSource.fromChildOutput("k", "OUTPUT")]
    )
    for name, value in {**inputs, "RECESSION_INDEX_FIELD": "recession_index_days"}.items():
        second.addParameterSources(name, [static(value)])
    output = QgsProcessingModelOutput("gauges", "gauges")
    output.setChildId("baseflow")
    output.setChildOutputName("OUTPUT")
    second.setModelOutputs({"gauges": output})
    model.addChildAlgorithm(second)
    model.updateDestinationParameters()

    context = QgsProcessingContext()
    results, ok = model.run(
        {"baseflow:gauges": "TEMPORARY_OUTPUT"}, context, QgsProcessingFeedback()
    )
    assert ok, results
    layer = QgsProcessingUtils.mapLayerFromString(results["baseflow:gauges"], context)
    row = _rows(layer)[ONE_GAUGE]
    core = core_gauges(
        gauges=gauges_with_area, discharge=one_gauge_discharge, area_field="area_km2"
    )
    want = core.gauge_table().set_index("gauge_id").loc[ONE_GAUGE]
    assert float(row["recession_index_days"]) == float(want["recession_index_days"])
    assert float(row["baseflow_index"]) == pytest.approx(float(want["baseflow_index"]), rel=1e-9)
    assert row["quality"] == want["quality"]


# --------------------------------------------------------------------------- styles


def _run_loaded(algorithm, parameters, output="OUTPUT"):
    """Run ``algorithm`` with ``output`` to be loaded into a project; return the layer after
    the post-processor Processing would call has styled it, and the context that owns it."""
    from qgis.core import QgsApplication

    project = QgsProject()
    context = QgsProcessingContext()
    context.setProject(project)
    feedback = QgsProcessingFeedback()
    alg = QgsApplication.processingRegistry().createAlgorithmById(algorithm)
    parameters = dict(parameters)
    parameters[output] = QgsProcessingOutputLayerDefinition("TEMPORARY_OUTPUT", project)
    results, ok = alg.run(parameters, context, feedback)
    assert ok, results
    dest = results[output]
    assert context.willLoadLayerOnCompletion(dest)
    processor = context.layerToLoadOnCompletionDetails(dest).postProcessor()
    assert processor is not None, f"{algorithm} styles {output}"
    layer = QgsProcessingUtils.mapLayerFromString(dest, context)
    processor.postProcessLayer(layer, context, feedback)
    return layer, context


def test_gauge_points_load_as_graduated_maps(qgis_app, one_gauge_discharge):
    """Without areas, event recharge is mapped in m³/yr; with the demo's six records the
    recession index in days, classes and colours from the core."""
    from recharge_atlas.algorithms.maps import class_colours, map_classes

    layer, _context = _run_loaded(
        "recharge_atlas:eventrecharge",
        {
            "GAUGES": str(SAMPLE / "gauges.gpkg"),
            "DISCHARGE": str(one_gauge_discharge),
            "EVENTS": "TEMPORARY_OUTPUT",
        },
    )
    renderer = layer.renderer()
    assert isinstance(renderer, QgsGraduatedSymbolRenderer)
    assert renderer.classAttribute() == _classified("recharge_m3_per_year", layer), (
        "no depths without areas"
    )
    assert [r.label().endswith("m³/yr") for r in _value_ranges(renderer)] == [True]

    layer, _context = _run_loaded(
        "recharge_atlas:recessionindex",
        {
            "GAUGES": str(SAMPLE / "gauges.gpkg"),
            "DISCHARGE": str(SAMPLE / "discharge.csv"),
            "CLASSES": "equal interval",
            "CLASS_COUNT": 3,
        },
    )
    renderer = layer.renderer()
    assert renderer.classAttribute() == _classified("recession_index_days", layer)
    values = [float(f["recession_index_days"]) for f in layer.getFeatures()]
    breaks = map_classes(values, "equal_interval", 3)
    ranges = _value_ranges(renderer)
    assert [r.upperValue() for r in ranges] == breaks[1:].tolist()
    assert [r.symbol().color().name() for r in ranges] == class_colours(3)
    assert all(r.label().endswith(" days") for r in ranges)


def _classified(field, layer):
    """What a style classifies: the field, or with its NULLs drawn as "no estimate" when some
    feature has none."""
    from recharge_atlas.plugin.styling import no_estimate_expression

    nulls = any(is_null(f[field]) for f in layer.getFeatures())
    return no_estimate_expression(field) if nulls else field


def _value_ranges(renderer):
    """The renderer's classes of values, the "no estimate" class (NULL) left out."""
    from recharge_atlas.plugin.styling import NO_ESTIMATE_LABEL

    return [r for r in renderer.ranges() if r.label() != NO_ESTIMATE_LABEL]


def test_link_check_draws_large_basins_first(qgis_app):
    layer, _context = _run_loaded(
        "recharge_atlas:linkcheck",
        {"GAUGES": str(SAMPLE / "gauges.gpkg"), "CATCHMENTS": str(SAMPLE / "catchments.gpkg")},
    )
    renderer = layer.renderer()
    assert renderer.orderByEnabled()
    clause = renderer.orderBy().list()[0]
    assert (clause.expression().expression(), clause.ascending()) == ("area_km2", False)


def test_nan_free_numbers(toolbox_runs):
    """No output holds NaN or infinity where QGIS expects NULL."""
    for name in ("recessionindex", "baseflowseparation", "eventrecharge"):
        layer = _layer(toolbox_runs[name]["path"], "gauges")
        for feature in layer.getFeatures():
            for value in feature.attributes():
                if isinstance(value, float):
                    assert math.isfinite(value), name
