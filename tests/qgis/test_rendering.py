"""The styled recharge map as QGIS draws it: the catchments of a catchmentrecharge run, styled
by the post-processor that runs when the output loads, rendered offscreen to a PNG. Each
gauged catchment shows its class's colour (the core's colours, those of the PNG maps) where it
is not covered by a nested basin, the classes come out in distinct colours, and catchments
without an estimate (NULL) are drawn in the maps' grey, in a class labelled "no estimate" that
the legend shows beside the class labels with their units."""

from __future__ import annotations

import pytest

pytest.importorskip("qgis.core")

from qgis.core import (  # noqa: E402
    QgsFeature,
    QgsGeometry,
    QgsLayerTreeLayer,
    QgsMapRendererSequentialJob,
    QgsMapSettings,
    QgsProcessingContext,
    QgsProcessingFeedback,
    QgsRectangle,
    QgsVectorLayer,
)
from qgis.PyQt.QtCore import QSize, Qt  # noqa: E402
from qgis.PyQt.QtGui import QColor  # noqa: E402

#: Size of the rendered map (pixels) and the largest colour difference taken as "the same"
#: (per channel, 0-255; interior pixels are not antialiased).
SIZE = 600
TOLERANCE = 2
WHITE = QColor(255, 255, 255)


def _render(layer, path):
    settings = QgsMapSettings()
    settings.setLayers([layer])
    settings.setDestinationCrs(layer.crs())
    extent = QgsRectangle(layer.extent())
    extent.scale(1.05)
    settings.setExtent(extent)
    settings.setOutputSize(QSize(SIZE, SIZE))
    settings.setBackgroundColor(WHITE)
    job = QgsMapRendererSequentialJob(settings)
    job.start()
    job.waitForFinished()
    image = job.renderedImage()
    assert image.save(str(path), "PNG")
    return image, settings


def _own_parts(layer):
    """Each catchment's part not covered by a smaller catchment (drawn later, on top), with
    its feature: the place where its own colour shows."""
    features = sorted(layer.getFeatures(), key=lambda f: f["area_km2"])
    parts = []
    for i, feature in enumerate(features):
        part = feature.geometry()
        for smaller in features[:i]:
            part = part.difference(smaller.geometry())
        if not part.isEmpty():
            parts.append((feature, part))
    return parts


def _same(a, b):
    return max(abs(a.red() - b.red()), abs(a.green() - b.green()), abs(a.blue() - b.blue())) <= (
        TOLERANCE
    )


def _check_drawn(layer, ranges, wanted, path):
    """Render ``layer`` and check each catchment's own part shows its class's colour (grey
    without an estimate), every class drawn in its own colour."""
    from recharge_atlas.algorithms.maps import NO_ESTIMATE_COLOUR

    image, settings = _render(layer, path)
    to_pixel = settings.mapToPixel()
    seen = {}
    grey = QColor(NO_ESTIMATE_COLOUR)
    without = 0
    for feature, part in _own_parts(layer):
        inside, _distance = part.poleOfInaccessibility(1.0)
        point = to_pixel.transform(inside.asPoint())
        pixel = QColor(image.pixel(round(point.x()), round(point.y())))
        value = feature["recharge_mm_per_year"]
        if value is None or not isinstance(value, float):
            assert _same(pixel, grey), (feature["name"], "has no estimate: grey", pixel.name())
            without += 1
            continue
        index = next(
            i
            for i, r in enumerate(ranges)
            if r.lowerValue() <= value <= r.upperValue() and (i == 0 or value > r.lowerValue())
        )
        assert _same(pixel, wanted[index]), (feature["name"], pixel.name(), wanted[index].name())
        seen[index] = pixel.name()
    assert sorted(seen) == list(range(len(ranges))), "every class is drawn"
    assert len(set(seen.values())) == len(ranges), "each class in its own colour"
    assert without, "the demo region has catchments without an estimate"


def test_recharge_classes_are_drawn_in_distinct_colours(processing_run, tmp_path):
    from recharge_atlas.algorithms.maps import class_colours
    from recharge_atlas.plugin.styling import NO_ESTIMATE_LABEL, recharge_post_processor

    path = processing_run["path"]
    layer = QgsVectorLayer(f"{path}|layername=catchments", "recharge", "ogr")
    assert layer.isValid()
    recharge_post_processor().postProcessLayer(
        layer, QgsProcessingContext(), QgsProcessingFeedback()
    )
    ranges = [r for r in layer.renderer().ranges() if r.label() != NO_ESTIMATE_LABEL]
    assert len(ranges) == 5
    wanted = [QColor(c) for c in class_colours(len(ranges))]
    assert [r.symbol().color().name() for r in ranges] == [c.name() for c in wanted]

    _check_drawn(layer, ranges, wanted, tmp_path / "recharge.png")


def _memory_catchments(values):
    """Side-by-side 1° squares in EPSG:4326 with ``recharge_mm_per_year`` from ``values``
    (None: NULL, no estimate) and ``area_km2`` (equal, so the drawing order changes
    nothing)."""
    layer = QgsVectorLayer(
        "Polygon?crs=EPSG:4326&field=name:string&field=recharge_mm_per_year:double"
        "&field=area_km2:double",
        "catchments",
        "memory",
    )
    features = []
    for i, value in enumerate(values):
        feature = QgsFeature(layer.fields())
        feature.setGeometry(
            QgsGeometry.fromWkt(f"POLYGON(({i} 0,{i + 1} 0,{i + 1} 1,{i} 1,{i} 0))")
        )
        feature.setAttributes([f"C{i}", value, 100.0])
        features.append(feature)
    assert layer.dataProvider().addFeatures(features)
    layer.updateExtents()
    return layer


def _legend_labels(layer):
    """The labels of the layer's legend entries as the Layers panel shows them."""
    nodes = layer.legend().createLayerTreeModelLegendNodes(QgsLayerTreeLayer(layer))
    return [node.data(Qt.ItemDataRole.DisplayRole) for node in nodes]


def test_a_catchment_without_an_estimate_is_drawn_grey_and_labelled(qgis_app, tmp_path):
    """A NULL recharge is drawn in the core maps' grey (``maps.NO_ESTIMATE_COLOUR``, the PNG
    map's), in a last class labelled "no estimate"; the other classes keep the core's limits,
    colours and labels with units."""
    from recharge_atlas.algorithms.maps import (
        NO_ESTIMATE_COLOUR,
        class_colours,
        class_labels,
        map_classes,
    )
    from recharge_atlas.plugin.styling import NO_ESTIMATE_LABEL, apply_recharge_style

    values = [40.0, 90.0, None, 150.0, 260.0]
    layer = _memory_catchments(values)
    renderer = apply_recharge_style(layer, classes=3, scheme="equal_interval")
    assert renderer is layer.renderer()
    breaks = map_classes([v for v in values if v is not None], "equal_interval", 3)
    labels = [f"{t} mm/yr" for t in class_labels(breaks)]
    ranges = renderer.ranges()
    assert [r.label() for r in ranges] == [*labels, NO_ESTIMATE_LABEL]
    assert [r.upperValue() for r in ranges[:-1]] == breaks[1:].tolist()
    assert ranges[-1].symbol().color().name() == QColor(NO_ESTIMATE_COLOUR).name()
    assert _legend_labels(layer) == [*labels, NO_ESTIMATE_LABEL], "the legend shows it"

    image, settings = _render(layer, tmp_path / "no-estimate.png")
    to_pixel = settings.mapToPixel()
    wanted = [QColor(c) for c in class_colours(3)]
    for feature in layer.getFeatures():
        inside, _distance = feature.geometry().poleOfInaccessibility(0.01)
        point = to_pixel.transform(inside.asPoint())
        pixel = QColor(image.pixel(round(point.x()), round(point.y())))
        value = feature["recharge_mm_per_year"]
        if feature["name"] == "C2":
            assert _same(pixel, QColor(NO_ESTIMATE_COLOUR)), pixel.name()
        else:
            index = next(i for i in range(3) if value <= breaks[i + 1])
            assert _same(pixel, wanted[index]), (feature["name"], pixel.name())


def test_no_grey_class_when_every_catchment_has_an_estimate(qgis_app):
    """As on the PNG maps, "no estimate" appears only when some feature has no value."""
    from recharge_atlas.plugin.styling import NO_ESTIMATE_LABEL, apply_recharge_style

    layer = _memory_catchments([40.0, 90.0, 150.0])
    renderer = apply_recharge_style(layer, classes=3)
    assert renderer.classAttribute() == "recharge_mm_per_year"
    labels = _legend_labels(layer)
    assert NO_ESTIMATE_LABEL not in labels
    assert all(label.endswith(" mm/yr") for label in labels), labels


def test_command_line_geopackage_opens_styled(processing_run, tmp_path):
    # The CLI writes the choropleth into the GeoPackage's layer_styles table (QGIS's
    # convention): QGIS applies it when the layer is opened, with the same classes, labels and
    # colours as the plugin gives its own outputs, and draws the same picture.
    from support_qgis import SAMPLE

    from recharge_atlas.algorithms.maps import class_colours
    from recharge_atlas.cli import main
    from recharge_atlas.plugin.styling import NO_ESTIMATE_LABEL, recharge_post_processor

    out = tmp_path / "recharge.gpkg"
    args = ["run", "--gauges", str(SAMPLE / "gauges.gpkg"), "--catchments",
            str(SAMPLE / "catchments.gpkg"), "--discharge", str(SAMPLE / "discharge.csv"),
            "--out", str(out)]  # fmt: skip
    assert main(args) == 0
    layer = QgsVectorLayer(f"{out}|layername=catchments", "recharge", "ogr")
    assert layer.isValid()
    renderer = layer.renderer()
    assert renderer.type() == "graduatedSymbol"
    assert renderer.orderByEnabled()
    ours = [(r.lowerValue(), r.upperValue(), r.label(), r.symbol().color().name())
            for r in renderer.ranges()]  # fmt: skip
    plugin = QgsVectorLayer(f"{out}|layername=catchments", "plugin", "ogr")
    recharge_post_processor().postProcessLayer(
        plugin, QgsProcessingContext(), QgsProcessingFeedback()
    )
    theirs = [(r.lowerValue(), r.upperValue(), r.label(), r.symbol().color().name())
              for r in plugin.renderer().ranges()]  # fmt: skip
    assert len(ours) == len(theirs) == 6  # five classes and "no estimate"
    for a, b in zip(ours, theirs):
        assert a[0] == pytest.approx(b[0]) and a[1] == pytest.approx(b[1]), (a, b)
        assert a[2:] == b[2:]
    ranges = [r for r in renderer.ranges() if r.label() != NO_ESTIMATE_LABEL]
    wanted = [QColor(c) for c in class_colours(len(ranges))]
    _check_drawn(layer, ranges, wanted, tmp_path / "styled.png")
