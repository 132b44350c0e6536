"""A graduated (choropleth) style on mean annual recharge for the catchments output."""

from __future__ import annotations

import math

from qgis.core import (
    QgsClassificationQuantile,
    QgsColorBrewerColorRamp,
    QgsFeatureRequest,
    QgsGraduatedSymbolRenderer,
    QgsProcessingLayerPostProcessorInterface,
    QgsRendererRange,
    QgsSymbol,
)

from . import compat

#: Field the map classifies.
RECHARGE_FIELD = "recharge_mm_per_year"
#: Units shown in the class labels.
UNITS = "mm/yr"
CLASSES = 5
#: ColorBrewer scheme (Brewer, colorbrewer2.org): light blue for little recharge, dark for much.
RAMP = "Blues"


def finite_values(layer, field_name: str) -> list:
    """The field's values that are numbers, NULL and NaN left out."""
    index = layer.fields().lookupField(field_name)
    request = (
        QgsFeatureRequest().setFlags(compat.REQUEST_NO_GEOMETRY).setSubsetOfAttributes([index])
    )
    values = []
    for feature in layer.getFeatures(request):
        value = feature.attributes()[index]
        if compat.is_null(value):
            continue
        try:
            number = float(value)
        except (TypeError, ValueError):
            continue
        if math.isfinite(number):
            values.append(number)
    return values


def apply_recharge_style(layer, field_name: str = RECHARGE_FIELD, classes: int = CLASSES):
    """Give ``layer`` a graduated renderer on ``field_name`` and return the renderer.

    Quantile classes of the catchments that have an estimate (fewer classes when there are
    fewer distinct values), the ColorBrewer Blues ramp, class labels such as
    ``120 – 180 mm/yr``, and larger catchments drawn first so nested ones show on top of the
    basins that contain them. Catchments without an estimate (NULL) are left unfilled.
    Returns None when the layer lacks the field.

    Notes
    -----
    The classes are computed from the values here, not with ``updateClasses``: QGIS 3.22 reads
    NULL numbers as 0 when classifying a layer, which would open a false 0 class.
    """
    if layer is None or layer.fields().lookupField(field_name) < 0:
        return None
    values = finite_values(layer, field_name)
    method = QgsClassificationQuantile()
    method.setLabelFormat(f"%1 – %2 {UNITS}")
    method.setLabelPrecision(0)
    method.setLabelTrimTrailingZeroes(True)

    renderer = QgsGraduatedSymbolRenderer(field_name)
    renderer.setClassificationMethod(method)
    symbol = QgsSymbol.defaultSymbol(layer.geometryType())
    renderer.setSourceSymbol(symbol.clone())
    count = min(int(classes), len(set(values)))
    if count >= 1:
        for interval in method.classes(values, count):
            renderer.addClassRange(QgsRendererRange(interval, symbol.clone()))
    ramp = QgsColorBrewerColorRamp(RAMP, max(count, 3))
    renderer.setSourceColorRamp(ramp.clone())
    renderer.updateColorRamp(ramp.clone())

    if layer.fields().lookupField("area_km2") >= 0:
        order = QgsFeatureRequest.OrderBy([QgsFeatureRequest.OrderByClause("area_km2", False)])
        renderer.setOrderBy(order)
        renderer.setOrderByEnabled(True)
    layer.setRenderer(renderer)
    layer.triggerRepaint()
    return renderer


class RechargeStylePostProcessor(QgsProcessingLayerPostProcessorInterface):
    """Styles the catchments output when Processing loads it into the project."""

    def postProcessLayer(self, layer, context, feedback):  # noqa: N802 (QGIS API name)
        apply_recharge_style(layer)


# Processing keeps only a C++ pointer to the post-processor: a Python reference must outlive
# the algorithm, or the object is collected before the layer loads. It holds no state, so one
# instance, kept here for the life of the session, serves every run.
_POST_PROCESSOR = None


def recharge_post_processor() -> RechargeStylePostProcessor:
    """The session's one style post-processor (created on first use, never collected)."""
    global _POST_PROCESSOR
    if _POST_PROCESSOR is None:
        _POST_PROCESSOR = RechargeStylePostProcessor()
    return _POST_PROCESSOR
