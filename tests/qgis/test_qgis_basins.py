"""catchmentrecharge and the basins inside real QGIS (issue 4): linking by location, areas in a
geographic CRS, repaired polygons, reported areas and the links table, each with the core's
numbers for the same inputs and Settings.

Runs that test the geometry rather than the hydrology use the one-gauge discharge table, so
they take a fraction of a full run: areas, links and nesting do not depend on the discharge.
"""

from __future__ import annotations

import hashlib
import math
import re

import pytest

pytest.importorskip("qgis.core")

from qgis.core import (  # noqa: E402
    QgsGeometry,
    QgsPointXY,
    QgsProcessingContext,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsVectorLayer,
    QgsWkbTypes,
)
from support_qgis import (  # noqa: E402
    ONE_GAUGE,
    SAMPLE,
    assert_catchments_are,
    assert_table_is,
    gpkg_layer,
    is_null,
    sample_parameters,
    write_gauges_copy,
    write_layer_copy,
)

ALGORITHM = "recharge_atlas:catchmentrecharge"
#: Row of the catchment of ONE_GAUGE in the demo catchments.
ONE_GAUGE_ROW = 4


def _layer(path, table):
    layer = QgsVectorLayer(f"{path}|layername={table}", table, "ogr")
    assert layer.isValid(), f"{table} missing from {path}"
    return layer


def _rows(layer):
    names = layer.fields().names()
    return [dict(zip(names, feature.attributes())) for feature in layer.getFeatures()]


def _digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _run(folder, **changes):
    """processing.run of catchmentrecharge into ``folder/out.gpkg`` (catchments and links)."""
    import processing

    out = folder / "out.gpkg"
    parameters = sample_parameters(
        OUTPUT=gpkg_layer(out, "catchments", geometry=True), LINKS=gpkg_layer(out, "links")
    )
    parameters.update(changes)
    results = processing.run(ALGORITHM, parameters, feedback=QgsProcessingFeedback())
    return out, results


@pytest.fixture(scope="module")
def catchments_without_ids(qgis_app, tmp_path_factory):
    """The demo catchments without their gauge id field (only the name is left)."""
    path = tmp_path_factory.mktemp("no-ids") / "catchments.gpkg"
    return write_layer_copy(path, SAMPLE / "catchments.gpkg", "catchments", drop=["gauge_id"])


@pytest.fixture(scope="module")
def spatial_run(qgis_app, tmp_path_factory, catchments_without_ids):
    """The demo region with catchments that carry no gauge id: linked by location."""
    out, results = _run(tmp_path_factory.mktemp("spatial"), CATCHMENTS=str(catchments_without_ids))
    return out


# --------------------------------------------------------------------------- linking


def test_without_the_id_field_gauges_link_by_location_with_the_same_numbers(
    spatial_run, core_result
):
    """Linking by location gives exactly what linking by id gives (issue 4: the same results
    with the id field removed)."""
    assert_catchments_are(_layer(spatial_run, "catchments"), core_result)
    names = [r["name"] for r in _rows(_layer(spatial_run, "catchments"))]
    assert names == core_result.catchments["name"].tolist(), "the input's own fields are kept"


def test_links_by_location_are_the_cores(
    spatial_run, core_run, catchments_without_ids, one_gauge_discharge
):
    """The links table of the run equals the core's (links do not depend on the discharge)."""
    core = core_run(catchments=catchments_without_ids, discharge=one_gauge_discharge)
    links = _layer(spatial_run, "links")
    assert_table_is(links, core.links, "links")
    rows = _rows(links)
    assert {r["method"] for r in rows} == {"spatial"}
    assert {r["link"] for r in rows} == {"linked"}
    assert all(0 <= float(r["distance_m"]) <= 100 for r in rows)


def test_links_by_id_are_the_cores(processing_run, core_result):
    links = _layer(processing_run["path"], "links")
    assert_table_is(links, core_result.links, "links")
    assert {f["method"] for f in links.getFeatures()} == {"id"}


def test_linking_by_id_needs_the_field(qgis_app, tmp_path, catchments_without_ids):
    """LINK by gauge id with catchments that lack the field: a short error naming it."""
    with pytest.raises(QgsProcessingException, match="'gauge_id'") as caught:
        _run(tmp_path, CATCHMENTS=str(catchments_without_ids), LINK="by gauge id")
    assert "CATCHMENT_GAUGE_FIELD" in str(caught.value)
    assert "Traceback" not in str(caught.value)
    assert list(tmp_path.iterdir()) == []


@pytest.fixture(scope="module")
def geographic_layers(qgis_app, tmp_path_factory):
    """The demo gauges and catchments (without ids) reprojected to EPSG:4326."""
    folder = tmp_path_factory.mktemp("geographic")
    gauges = write_layer_copy(
        folder / "gauges.gpkg", SAMPLE / "gauges.gpkg", "gauges", crs="EPSG:4326"
    )
    catchments = write_layer_copy(
        folder / "catchments.gpkg",
        SAMPLE / "catchments.gpkg",
        "catchments",
        crs="EPSG:4326",
        drop=["gauge_id"],
    )
    return gauges, catchments


def test_geographic_layers_give_the_same_areas(
    geographic_layers, core_result, core_run, one_gauge_discharge, tmp_path
):
    """Layers in EPSG:4326 link by location to the same catchments and give the projected
    run's areas within 0.5 % (issue 4), and exactly the core's numbers for the same files."""
    gauges, catchments = geographic_layers
    out, _results = _run(
        tmp_path, GAUGES=str(gauges), CATCHMENTS=str(catchments), DISCHARGE=str(one_gauge_discharge)
    )
    layer = _layer(out, "catchments")
    assert layer.crs().authid() == "EPSG:4326"
    core = core_run(gauges=gauges, catchments=catchments, discharge=one_gauge_discharge)
    assert_catchments_are(layer, core)
    projected = core_result.catchments
    rows = _rows(layer)
    for row, (_i, want) in zip(rows, projected.iterrows()):
        assert row["name"] == want["name"]
        assert float(row["area_km2"]) == pytest.approx(want["area_km2"], rel=0.005)
        if is_null(row["gauge_id"]):
            assert want["gauge_id"] is None or want["gauge_id"] != want["gauge_id"]
            continue
        assert row["gauge_id"] == want["gauge_id"]
        assert float(row["incremental_area_km2"]) == pytest.approx(
            want["incremental_area_km2"], rel=0.005
        )
        assert (None if is_null(row["downstream_gauge"]) else row["downstream_gauge"]) == (
            want["downstream_gauge"]
        )
        assert row["upstream_gauges"] == want["upstream_gauges"]


# --------------------------------------------------------------------------- repair


def _cross_itself(row, geometry):
    """Swap two neighbouring vertices of the ONE_GAUGE catchment so its ring crosses itself."""
    if row != ONE_GAUGE_ROW:
        return geometry
    rings = geometry.asPolygon()
    ring = [QgsPointXY(p) for p in rings[0]]
    ring[5], ring[6] = ring[6], ring[5]
    return QgsGeometry.fromPolygonXY([ring, *rings[1:]])


@pytest.fixture(scope="module")
def crossed_catchments(qgis_app, tmp_path_factory):
    path = tmp_path_factory.mktemp("crossed") / "catchments.gpkg"
    write_layer_copy(path, SAMPLE / "catchments.gpkg", "catchments", edit=_cross_itself)
    layer = QgsVectorLayer(str(path), "crossed", "ogr")
    geometries = [f.geometry() for f in layer.getFeatures()]
    assert not geometries[ONE_GAUGE_ROW].isGeosValid()
    assert all(g.isGeosValid() for i, g in enumerate(geometries) if i != ONE_GAUGE_ROW)
    return path


def test_invalid_polygon_is_repaired_said_so_and_written_valid(
    crossed_catchments, core_run, one_gauge_discharge, tmp_path
):
    from shapely import wkb

    before = _digest(crossed_catchments)
    out, _results = _run(
        tmp_path, CATCHMENTS=str(crossed_catchments), DISCHARGE=str(one_gauge_discharge)
    )
    assert _digest(crossed_catchments) == before, "the input is never changed"
    layer = _layer(out, "catchments")
    core = core_run(catchments=crossed_catchments, discharge=one_gauge_discharge)
    assert_catchments_are(layer, core)
    rows = _rows(layer)
    assert "repaired" in rows[ONE_GAUGE_ROW]["quality"]
    assert "Self-intersection" in rows[ONE_GAUGE_ROW]["quality"]
    assert math.isfinite(float(rows[ONE_GAUGE_ROW]["recharge_mm_per_year"]))
    # The repaired polygon has two parts, so the layer holds multipolygons (one type per layer).
    assert QgsWkbTypes.isMultiType(layer.wkbType())
    geometries = [f.geometry() for f in layer.getFeatures()]
    assert all(g.isGeosValid() for g in geometries)
    repaired = wkb.loads(bytes(geometries[ONE_GAUGE_ROW].asWkb()))
    assert repaired.equals(core.catchments.geometry.iloc[ONE_GAUGE_ROW])
    source = QgsVectorLayer(str(SAMPLE / "catchments.gpkg"), "in", "ogr")
    for i, (got, want) in enumerate(zip(geometries, source.getFeatures())):
        if i != ONE_GAUGE_ROW:
            assert got.equals(QgsGeometry(want.geometry()).coerceToType(layer.wkbType())[0]), i


# --------------------------------------------------------------------------- reported areas


@pytest.fixture(scope="module")
def reported_area_run(qgis_app, tmp_path_factory, one_gauge_discharge):
    """Gauges with a reported area field (QM02's wrong), and the HTML report asked for."""
    folder = tmp_path_factory.mktemp("reported")
    gauges = write_gauges_copy(
        folder / "gauges.gpkg", "reported_km2", {"QM01": 794.0, "QM02": 400.0}
    )
    out = folder / "out"
    out.mkdir()
    path, results = _run(
        out,
        GAUGES=str(gauges),
        DISCHARGE=str(one_gauge_discharge),
        REPORTED_AREA_FIELD="reported_km2",
        REPORT=str(out / "report.html"),
    )
    return {"path": path, "results": results, "gauges": gauges, "report": out / "report.html"}


def test_reported_area_mismatch_is_flagged_as_the_core_does(
    reported_area_run, core_run, one_gauge_discharge
):
    core = core_run(
        gauges=reported_area_run["gauges"],
        discharge=one_gauge_discharge,
        reported_area_field="reported_km2",
    )
    layer = _layer(reported_area_run["path"], "catchments")
    assert_catchments_are(layer, core)
    quality = {r["gauge_id"]: r["quality"] for r in _rows(layer)}
    assert "differs from the reported 400.0 km²" in quality["QM02"]
    assert "reported" not in quality["QM01"]


def test_report_is_one_self_contained_page(reported_area_run):
    """REPORT writes the core's page: pictures embedded, nothing fetched from elsewhere, the
    cautions and every gauge in it."""
    report = reported_area_run["report"]
    assert reported_area_run["results"]["REPORT"] == str(report)
    text = report.read_text(encoding="utf-8")
    assert text.lstrip().lower().startswith("<!doctype html")
    references = re.findall(r"""(?:src|href)\s*=\s*["']([^"']*)""", text, flags=re.I)
    outside = [r for r in references if not r.startswith(("data:", "#"))]
    assert not outside, f"the report refers to {outside[:3]}"
    assert not re.search(r"@import|url\(\s*['\"]?(?!data:)", text), "no outside style sheets"
    assert re.search(r'<img[^>]+src="data:image/png;base64,', text)
    for words in ("homogeneous aquifer", "qualified hydrogeologists", "QM01", ONE_GAUGE):
        assert words in text, words
    left = {p.name for p in report.parent.iterdir()}
    assert left == {"out.gpkg", "report.html"}, "no temporary file left beside it"


class CancelWhileDrawing(QgsProcessingFeedback):
    """Presses cancel when the report starts drawing its second gauge."""

    def __init__(self):
        super().__init__()
        self.drawn = []

    def setProgressText(self, text):  # noqa: N802 (QGIS API name)
        super().setProgressText(text)
        if text.startswith("Drawing the report"):
            self.drawn.append(text)
            if len(self.drawn) >= 2:
                self.cancel()


def test_cancel_while_the_report_draws_leaves_nothing(qgis_app, one_gauge_discharge, tmp_path):
    import processing

    feedback = CancelWhileDrawing()
    parameters = sample_parameters(
        DISCHARGE=str(one_gauge_discharge),
        OUTPUT=str(tmp_path / "out.gpkg"),
        ANNUAL=str(tmp_path / "annual.gpkg"),
        REPORT=str(tmp_path / "report.html"),
    )
    with pytest.raises(QgsProcessingException, match="cancelled"):
        processing.run(ALGORITHM, parameters, feedback=feedback)
    assert len(feedback.drawn) == 2, feedback.drawn
    assert list(tmp_path.iterdir()) == []


def test_missing_reported_area_field_is_named(qgis_app, tmp_path):
    with pytest.raises(QgsProcessingException, match="'drainage_km2'") as caught:
        _run(tmp_path, REPORTED_AREA_FIELD="drainage_km2")
    assert "REPORTED_AREA_FIELD" in str(caught.value)
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------- parameters

CHECKS = [
    # (what, changes, accepted, words the message must contain)
    ("link by core id", {"LINK": "spatial"}, True, []),
    ("link by label", {"LINK": "by location (gauge at the outlet)"}, True, []),
    ("link by index", {"LINK": 1}, True, []),
    ("link by index as text", {"LINK": "2"}, True, []),
    ("unknown link", {"LINK": "nearest"}, False, ["'nearest'", "by gauge id", "(LINK)"]),
    ("zero tolerance", {"LINK_TOLERANCE": 0}, True, []),
    ("negative tolerance", {"LINK_TOLERANCE": -5}, False, ["-5", "(LINK_TOLERANCE)"]),
    ("tolerance as text", {"LINK_TOLERANCE": "far"}, False, ["'far'", "(LINK_TOLERANCE)"]),
    ("overlap of a half", {"OVERLAP_TOLERANCE": 0.5}, False, ["0.5", "(OVERLAP_TOLERANCE)"]),
    ("classes by core id", {"CLASSES": "natural_breaks"}, True, []),
    ("classes by label", {"CLASSES": "Equal interval"}, True, []),
    ("unknown classes", {"CLASSES": "jenks"}, False, ["'jenks'", "natural breaks", "(CLASSES)"]),
    ("three classes", {"CLASS_COUNT": 3}, True, []),
    ("thirteen classes", {"CLASS_COUNT": 13}, False, ["13", "(CLASS_COUNT)"]),
    ("half a class", {"CLASS_COUNT": 2.5}, False, ["2.5", "(CLASS_COUNT)"]),
    ("report as HTML", {"REPORT": "/tmp/run.html"}, True, []),
    ("report not HTML", {"REPORT": "/tmp/run.pdf"}, False, ["run.pdf", "(REPORT)"]),
]


@pytest.mark.parametrize("what, changes, accepted, words", CHECKS, ids=[c[0] for c in CHECKS])
def test_check_parameter_values(algorithm, what, changes, accepted, words):
    parameters = sample_parameters(OUTPUT="TEMPORARY_OUTPUT", **changes)
    ok, message = algorithm.checkParameterValues(parameters, QgsProcessingContext())
    assert ok is accepted, message
    for word in words:
        assert word in message
