"""A graduated (choropleth) style on mean annual recharge for the catchments output."""

from __future__ import annotations

from qgis.core import (
    QgsClassificationQuantile,
    QgsColorBrewerColorRamp,
    QgsFeatureRequest,
    QgsGraduatedSymbolRenderer,
    QgsProcessingLayerPostProcessorInterface,
    QgsSymbol,
)

#: Field the map classifies.
RECHARGE_FIELD = "recharge_mm_per_year"
#: Units shown in the class labels.
UNITS = "mm/yr"
CLASSES = 5
#: ColorBrewer scheme (Brewer, colorbrewer2.org): light blue for little recharge, dark for much.
RAMP = "Blues"


def apply_recharge_style(layer, field_name: str = RECHARGE_FIELD, classes: int = CLASSES):
    """Give ``layer`` a graduated renderer on ``field_name`` and return the renderer.

    Quantile classes (fewer when there are fewer distinct values), the ColorBrewer Blues ramp,
    class labels such as ``120 – 180 mm/yr``, and larger catchments drawn first so nested ones
    show on top of the basins that contain them. Catchments without an estimate (NULL) are not
    filled. Returns None when the layer lacks the field.
    """
    if layer is None or layer.fields().lookupField(field_name) < 0:
        return None
    method = QgsClassificationQuantile()
    method.setLabelFormat(f"%1 – %2 {UNITS}")
    method.setLabelPrecision(0)
    method.setLabelTrimTrailingZeroes(True)

    renderer = QgsGraduatedSymbolRenderer(field_name)
    renderer.setClassificationMethod(method)
    renderer.setSourceSymbol(QgsSymbol.defaultSymbol(layer.geometryType()))
    ramp = QgsColorBrewerColorRamp(RAMP, classes)
    renderer.setSourceColorRamp(ramp.clone())
    renderer.updateClasses(layer, classes)
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
