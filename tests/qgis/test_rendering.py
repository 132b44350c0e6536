"""The styled recharge map as QGIS draws it: the catchments of a catchmentrecharge run, styled
by the post-processor that runs when the output loads, rendered offscreen to a PNG. Each
gauged catchment shows its class's colour (the core's colours, those of the PNG maps) where it
is not covered by a nested basin, the classes come out in distinct colours, and catchments
without an estimate are left unfilled."""

from __future__ import annotations

import pytest

pytest.importorskip("qgis.core")

from qgis.core import (  # noqa: E402
    QgsMapRendererSequentialJob,
    QgsMapSettings,
    QgsProcessingContext,
    QgsProcessingFeedback,
    QgsRectangle,
    QgsVectorLayer,
)
from qgis.PyQt.QtCore import QSize  # noqa: E402
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


def test_recharge_classes_are_drawn_in_distinct_colours(processing_run, tmp_path):
    from recharge_atlas.algorithms.maps import class_colours
    from recharge_atlas.plugin.styling import recharge_post_processor

    path = processing_run["path"]
    layer = QgsVectorLayer(f"{path}|layername=catchments", "recharge", "ogr")
    assert layer.isValid()
    recharge_post_processor().postProcessLayer(
        layer, QgsProcessingContext(), QgsProcessingFeedback()
    )
    ranges = layer.renderer().ranges()
    assert len(ranges) == 5
    wanted = [QColor(c) for c in class_colours(len(ranges))]
    assert [r.symbol().color().name() for r in ranges] == [c.name() for c in wanted]

    image, settings = _render(layer, tmp_path / "recharge.png")
    to_pixel = settings.mapToPixel()
    seen = {}
    for feature, part in _own_parts(layer):
        inside, _distance = part.poleOfInaccessibility(1.0)
        point = to_pixel.transform(inside.asPoint())
        pixel = QColor(image.pixel(round(point.x()), round(point.y())))
        value = feature["recharge_mm_per_year"]
        if value is None or not isinstance(value, float):
            assert _same(pixel, WHITE), f"{feature['name']} has no estimate: left unfilled"
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
