"""A graduated (choropleth) style on mean annual recharge for the basin outputs.

The class limits come from the core's :func:`recharge_atlas.algorithms.maps.class_breaks`, the
function the command line's PNG map and the report use, so QGIS draws the same classes.
"""

from __future__ import annotations

import math
from collections import deque

from qgis.core import (
    QgsClassificationEqualInterval,
    QgsClassificationJenks,
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
#: The core's class schemes (maps.SCHEMES), default first.
SCHEMES = ("quantiles", "equal_interval", "natural_breaks")
#: ColorBrewer scheme (Brewer, colorbrewer2.org): light blue for little recharge, dark for much.
RAMP = "Blues"

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


def apply_recharge_style(
    layer, field_name: str = RECHARGE_FIELD, classes: int = CLASSES, scheme: str = "quantiles"
):
    """Give ``layer`` a graduated renderer on ``field_name`` and return the renderer.

    Classes of the features that have an estimate by ``scheme`` (``quantiles``,
    ``equal_interval`` or ``natural_breaks``; fewer classes when there are fewer distinct
    values), the limits and labels of the core's ``maps.class_breaks`` and ``class_labels``
    followed by the units (``120 – 180 mm/yr``), the ColorBrewer Blues ramp, and larger
    polygons drawn first so nested catchments show on top of the basins that contain them.
    Features without an estimate (NULL) are left unfilled. Returns None when the layer lacks
    the field.

    Notes
    -----
    The classes are computed here, not with ``updateClasses``: QGIS 3.22 reads NULL numbers
    as 0 when classifying a layer, which would open a false 0 class. A value on a limit
    belongs to the lower class, as in the core.
    """
    if layer is None or layer.fields().lookupField(field_name) < 0:
        return None
    from ..algorithms.maps import class_breaks, class_labels

    breaks = class_breaks(finite_values(layer, field_name), scheme, classes)
    method = _QGIS_METHODS[scheme]()
    method.setLabelFormat(f"%1 – %2 {UNITS}")
    method.setLabelPrecision(0)
    method.setLabelTrimTrailingZeroes(True)

    renderer = QgsGraduatedSymbolRenderer(field_name)
    renderer.setClassificationMethod(method)
    symbol = QgsSymbol.defaultSymbol(layer.geometryType())
    renderer.setSourceSymbol(symbol.clone())
    labels = class_labels(breaks) if len(breaks) else []
    for low, high, label in zip(breaks[:-1], breaks[1:], labels):
        renderer.addClassRange(
            QgsRendererRange(float(low), float(high), symbol.clone(), f"{label} {UNITS}")
        )
    ramp = QgsColorBrewerColorRamp(RAMP, max(len(labels), 3))
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
    """Styles a basin output with ``classes`` classes by ``scheme`` when Processing loads it."""

    def __init__(self, scheme: str = "quantiles", classes: int = CLASSES):
        super().__init__()
        self.scheme = scheme
        self.classes = classes

    def postProcessLayer(self, layer, context, feedback):  # noqa: N802 (QGIS API name)
        apply_recharge_style(layer, classes=self.classes, scheme=self.scheme)


# Processing takes ownership of a post-processor and deletes it with the context of the run
# (QgsProcessingContext::LayerDetails::setPostProcessor transfers it), so an instance must never
# serve two outputs or two runs: each output gets a new one. The latest few are also kept
# referenced here, so that Python cannot collect one before Processing has taken it.
_RECENT = deque(maxlen=16)


def recharge_post_processor(
    scheme: str = "quantiles", classes: int = CLASSES
) -> RechargeStylePostProcessor:
    """A new style post-processor (``classes`` classes by ``scheme``) for one output of one
    run."""
    if scheme not in _QGIS_METHODS:
        raise ValueError(f"scheme was {scheme!r}; expected one of {list(SCHEMES)}")
    processor = RechargeStylePostProcessor(scheme, classes)
    _RECENT.append(processor)
    return processor
