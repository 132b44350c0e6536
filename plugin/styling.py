"""Graduated (choropleth) styles for the outputs: recharge, recession index, baseflow index.

The class limits come from the core's :func:`recharge_atlas.algorithms.maps.map_classes` and
the colours from :func:`~recharge_atlas.algorithms.maps.class_colours`, the functions the
command line's PNG map and the report use, so QGIS draws the same classes in the same colours.
Features without a value are drawn in the maps' grey, in a last class labelled "no estimate".
"""

from __future__ import annotations

import math
from collections import deque

from qgis.core import (
    QgsClassificationEqualInterval,
    QgsClassificationJenks,
    QgsClassificationQuantile,
    QgsExpression,
    QgsFeatureRequest,
    QgsGradientColorRamp,
    QgsGradientStop,
    QgsGraduatedSymbolRenderer,
    QgsProcessingLayerPostProcessorInterface,
    QgsRendererRange,
    QgsSymbol,
)
from qgis.PyQt.QtGui import QColor

from . import compat

#: Field the recharge maps classify.
RECHARGE_FIELD = "recharge_mm_per_year"
#: Units shown in the class labels of the recharge maps.
UNITS = "mm/yr"
#: Units shown in the class labels of each field a style may classify ("" for a ratio).
FIELD_UNITS = {
    RECHARGE_FIELD: UNITS,
    "incremental_recharge_mm_per_year": UNITS,
    "recharge_m3_per_year": "m³/yr",
    "recession_index_days": "days",
    "baseflow_index": "",
}
CLASSES = 5
#: The core's class schemes (maps.SCHEMES), default first.
SCHEMES = ("quantiles", "equal_interval", "natural_breaks")
#: Size of the gauge markers (mm).
MARKER_SIZE = 3.0
#: Polygons are drawn largest first when the layer has this field, so nested basins show.
AREA_FIELD = "area_km2"
#: Label of the class of features without a value (NULL), the words of the core's maps.
NO_ESTIMATE_LABEL = "no estimate"
#: The number a NULL stands for in the classified expression: far below any value a field
#: holds, so that only features without a value fall in the "no estimate" class.
NO_ESTIMATE_VALUE = -1e300

#: QGIS's own classification of each scheme, kept on the renderer so that the layer
#: properties show the scheme and a user who re-classifies gets the same kind of classes
#: (QGIS's quantiles are computed slightly differently from the core's).
_QGIS_METHODS = {
    "quantiles": QgsClassificationQuantile,
    "equal_interval": QgsClassificationEqualInterval,
    "natural_breaks": QgsClassificationJenks,
}


def finite_values(layer, field_name: str) -> list:
    """The field's values that are numbers, NULL and NaN left out."""
    return _read_values(layer, field_name)[0]


def _read_values(layer, field_name: str):
    """The field's values that are numbers (NULL and NaN left out), and how many features
    hold NULL."""
    index = layer.fields().lookupField(field_name)
    request = (
        QgsFeatureRequest().setFlags(compat.REQUEST_NO_GEOMETRY).setSubsetOfAttributes([index])
    )
    values = []
    nulls = 0
    for feature in layer.getFeatures(request):
        value = feature.attributes()[index]
        if compat.is_null(value):
            nulls += 1
            continue
        try:
            number = float(value)
        except (TypeError, ValueError):
            continue
        if math.isfinite(number):
            values.append(number)
    return values, nulls


def no_estimate_expression(field_name: str) -> str:
    """What a graduated style classifies when some features have no value in ``field_name``:
    the field, its NULLs read as :data:`NO_ESTIMATE_VALUE`."""
    return f"coalesce({QgsExpression.quotedColumnRef(field_name)}, {NO_ESTIMATE_VALUE!r})"


def no_estimate_colour() -> QColor:
    """The core maps' grey for features without a value."""
    from ..algorithms.maps import NO_ESTIMATE_COLOUR

    return QColor(NO_ESTIMATE_COLOUR)


def class_colours(n: int) -> list:
    """The core's ``n`` class colours (light to dark) as QColor."""
    from ..algorithms.maps import class_colours as core_colours

    return [QColor(c) for c in core_colours(n)]


def colour_ramp(colours) -> QgsGradientColorRamp:
    """A colour ramp through ``colours`` (QColor), so that a user who re-classifies the layer
    in QGIS gets the same colours."""
    first, last = colours[0], colours[-1]
    stops = [
        QgsGradientStop(i / (len(colours) - 1), colour)
        for i, colour in enumerate(colours[1:-1], start=1)
    ]
    return QgsGradientColorRamp(first, last, False, stops)


def order_by_area(renderer, layer) -> None:
    """Draw larger polygons first, so nested basins show on top of the basins around them."""
    if renderer is None or layer.fields().lookupField(AREA_FIELD) < 0:
        return
    order = QgsFeatureRequest.OrderBy([QgsFeatureRequest.OrderByClause(AREA_FIELD, False)])
    renderer.setOrderBy(order)
    renderer.setOrderByEnabled(True)


def apply_graduated_style(
    layer, field_name: str, classes: int = CLASSES, scheme: str = "quantiles", units=None
):
    """Give ``layer`` a graduated renderer on ``field_name`` and return the renderer.

    Classes of the features that have a value by ``scheme`` (``quantiles``,
    ``equal_interval`` or ``natural_breaks``; fewer classes when there are fewer distinct
    values), the limits and labels of the core's ``maps.map_classes`` and ``class_labels``
    followed by the units (``120 – 180 mm/yr``; ``units`` defaults to
    :data:`FIELD_UNITS`), the core's ``maps.class_colours`` (those of the PNG maps), and
    larger polygons drawn first so nested catchments show on top of the basins that contain
    them. When some features have no value (NULL), a last class labelled "no estimate" draws
    them in the core maps' grey (``maps.NO_ESTIMATE_COLOUR``), as the PNG maps do. Returns
    None, leaving the layer as it was, when the layer lacks the field or no feature has a
    value in it.

    Notes
    -----
    The classes are computed here, not with ``updateClasses``: QGIS 3.22 reads NULL numbers
    as 0 when classifying a layer, which would open a false 0 class. A value on a limit
    belongs to the lower class, as in the core.

    A graduated renderer draws no feature whose value is NULL. When the layer has such
    features, the renderer classifies ``coalesce("field", -1e300)`` instead of the field
    (:data:`NO_ESTIMATE_VALUE`, far below any real value) and the "no estimate" class holds
    that one number. A user who re-classifies the layer in QGIS should set the value back to
    the field first, or the stand-in number joins the classes.
    """
    if layer is None or layer.fields().lookupField(field_name) < 0:
        return None
    values, nulls = _read_values(layer, field_name)
    if not values:
        return None
    from ..algorithms.maps import class_labels, map_classes

    units = FIELD_UNITS.get(field_name, "") if units is None else units
    suffix = f" {units}" if units else ""
    breaks = map_classes(values, scheme, classes)
    method = _QGIS_METHODS[scheme]()
    method.setLabelFormat(f"%1 – %2{suffix}")
    method.setLabelPrecision(0 if units else 2)
    method.setLabelTrimTrailingZeroes(True)

    attribute = no_estimate_expression(field_name) if nulls else field_name
    renderer = QgsGraduatedSymbolRenderer(attribute)
    renderer.setClassificationMethod(method)
    symbol = QgsSymbol.defaultSymbol(layer.geometryType())
    if hasattr(symbol, "setSize"):  # gauge points: markers large enough to see the colour
        symbol.setSize(MARKER_SIZE)
    renderer.setSourceSymbol(symbol.clone())
    labels = class_labels(breaks)
    colours = class_colours(len(labels))
    for low, high, label, colour in zip(breaks[:-1], breaks[1:], labels, colours):
        one = symbol.clone()
        one.setColor(colour)
        renderer.addClassRange(QgsRendererRange(float(low), float(high), one, f"{label}{suffix}"))
    if nulls:
        grey = symbol.clone()
        grey.setColor(no_estimate_colour())
        renderer.addClassRange(
            QgsRendererRange(NO_ESTIMATE_VALUE, NO_ESTIMATE_VALUE, grey, NO_ESTIMATE_LABEL)
        )
    renderer.setSourceColorRamp(colour_ramp(colours))
    order_by_area(renderer, layer)
    layer.setRenderer(renderer)
    layer.triggerRepaint()
    return renderer


def apply_recharge_style(
    layer, field_name: str = RECHARGE_FIELD, classes: int = CLASSES, scheme: str = "quantiles"
):
    """A graduated map of mean annual recharge (see :func:`apply_graduated_style`)."""
    return apply_graduated_style(layer, field_name, classes, scheme)


def apply_style(layer, fields, classes: int = CLASSES, scheme: str = "quantiles"):
    """A graduated style on the first of ``fields`` that has a value, and return its renderer;
    when none has, larger polygons are drawn first (nested basins on top) and None is
    returned."""
    for field_name in fields:
        renderer = apply_graduated_style(layer, field_name, classes, scheme)
        if renderer is not None:
            return renderer
    renderer = layer.renderer() if layer is not None else None
    if renderer is not None and layer.fields().lookupField(AREA_FIELD) >= 0:
        renderer = renderer.clone()
        order_by_area(renderer, layer)
        layer.setRenderer(renderer)
        layer.triggerRepaint()
    return None


class StylePostProcessor(QgsProcessingLayerPostProcessorInterface):
    """Styles an output on the first of ``fields`` with a value, with ``classes`` classes by
    ``scheme``, when Processing loads it (see :func:`apply_style`)."""

    def __init__(self, fields=(RECHARGE_FIELD,), scheme: str = "quantiles", classes: int = CLASSES):
        super().__init__()
        self.fields = tuple(fields)
        self.scheme = scheme
        self.classes = classes

    def postProcessLayer(self, layer, context, feedback):  # noqa: N802 (QGIS API name)
        apply_style(layer, self.fields, classes=self.classes, scheme=self.scheme)


# Processing takes ownership of a post-processor and deletes it with the context of the run
# (QgsProcessingContext::LayerDetails::setPostProcessor transfers it), so an instance must never
# serve two outputs or two runs: each output gets a new one. The latest few are also kept
# referenced here, so that Python cannot collect one before Processing has taken it.
_RECENT = deque(maxlen=16)


def style_post_processor(
    fields, scheme: str = "quantiles", classes: int = CLASSES
) -> StylePostProcessor:
    """A new style post-processor for one output of one run: the first of ``fields`` with a
    value, ``classes`` classes by ``scheme``."""
    if scheme not in _QGIS_METHODS:
        raise ValueError(f"scheme was {scheme!r}; expected one of {list(SCHEMES)}")
    processor = StylePostProcessor(fields, scheme, classes)
    _RECENT.append(processor)
    return processor


def recharge_post_processor(
    scheme: str = "quantiles", classes: int = CLASSES
) -> StylePostProcessor:
    """A new post-processor styling mean annual recharge (see :func:`style_post_processor`)."""
    return style_post_processor((RECHARGE_FIELD,), scheme, classes)
