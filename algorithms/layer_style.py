"""The choropleth style of an output layer, written as QGIS reads it, without QGIS.

A GeoPackage may carry styles for its layers in a ``layer_styles`` table (QGIS's convention,
which GDAL also keeps): one row per style with the style as a QGIS style document (QML, XML),
and ``useAsDefault`` set on the one QGIS applies when the layer is opened. The command line
writes the catchments layer's style there, so opening its GeoPackage in QGIS shows the map at
once: a graduated renderer on mean annual recharge with the run's classes (the limits, labels
and colours of :mod:`.maps`, those of the PNG maps and of the QGIS algorithms' outputs), the
features without a value in the maps' grey, labelled "no estimate", and larger polygons drawn
first so nested basins show.

The document is the subset of QML that QGIS 3.22 and later read for a graduated renderer of
simple fills: each symbol layer's settings are written both as ``Option`` maps (QGIS 3.20 and
later) and as the older ``prop`` elements.
"""

from __future__ import annotations

from xml.sax.saxutils import quoteattr

import numpy as np

from .maps import (
    EDGE_COLOUR,
    NO_ESTIMATE_COLOUR,
    class_colours,
    class_labels,
    legend_title,
    map_classes,
)

#: Field the catchments layer's default style classifies, and its units.
RECHARGE_FIELD = "recharge_mm_per_year"
UNITS = "mm/yr"
#: Label of the class of features without a value (the words of the maps and the plugin).
NO_ESTIMATE_LABEL = "no estimate"
#: The number a missing value stands for in the classified expression (the plugin's too).
NO_ESTIMATE_VALUE = -1e300
#: Polygons are drawn largest first by this field, so nested basins show on top.
AREA_FIELD = "area_km2"
#: Outline width of the fills (mm).
OUTLINE_MM = 0.26


def _rgba(colour) -> str:
    """``#rrggbb`` (or an RGB tuple of 0–1 floats) as QGIS's ``r,g,b,255``."""
    if isinstance(colour, str):
        text = colour.lstrip("#")
        rgb = [int(text[i : i + 2], 16) for i in (0, 2, 4)]
    else:
        rgb = [int(round(255 * float(c))) for c in tuple(colour)[:3]]
    return ",".join(str(v) for v in rgb) + ",255"


def _quoted_column(name: str) -> str:
    """A field name as a QGIS expression column reference (``"name"``, quotes doubled)."""
    return '"' + str(name).replace('"', '""') + '"'


def _fill_symbol(name: str, colour) -> str:
    settings = {
        "color": _rgba(colour),
        "outline_color": _rgba(EDGE_COLOUR),
        "outline_style": "solid",
        "outline_width": str(OUTLINE_MM),
        "outline_width_unit": "MM",
        "style": "solid",
        "joinstyle": "bevel",
    }
    options = "".join(
        f'<Option type="QString" name={quoteattr(k)} value={quoteattr(v)}/>'
        for k, v in settings.items()
    )
    props = "".join(f"<prop k={quoteattr(k)} v={quoteattr(v)}/>" for k, v in settings.items())
    return (
        f'<symbol type="fill" name={quoteattr(name)} alpha="1" clip_to_extent="1" '
        'force_rhr="0"><layer class="SimpleFill" enabled="1" locked="0" pass="0">'
        f'<Option type="Map">{options}</Option>{props}</layer></symbol>'
    )


def graduated_qml(field, breaks, has_missing=False, units=UNITS, order_field=AREA_FIELD) -> str:
    """A QGIS style document: a graduated renderer of ``field`` with the classes ``breaks``.

    Class labels are :func:`maps.class_labels` followed by ``units``; colours
    :func:`maps.class_colours`. With ``has_missing``, the renderer classifies
    ``coalesce("field", -1e300)`` and a last grey class "no estimate" holds the stand-in
    number, since a graduated renderer draws no feature whose value is NULL (the plugin's rule).
    """
    b = [float(v) for v in breaks]
    labels = class_labels(b)
    colours = class_colours(len(labels))
    suffix = f" {units}" if units else ""
    column = _quoted_column(field)
    attribute = f"coalesce({column}, {NO_ESTIMATE_VALUE!r})" if has_missing else str(field)
    ranges, symbols = [], []
    for i, (low, high, label, colour) in enumerate(zip(b[:-1], b[1:], labels, colours)):
        ranges.append(
            f'<range lower="{low!r}" upper="{high!r}" symbol="{i}" '
            f'label={quoteattr(label + suffix)} render="true"/>'
        )
        symbols.append(_fill_symbol(str(i), colour))
    if has_missing:
        i = len(labels)
        ranges.append(
            f'<range lower="{NO_ESTIMATE_VALUE!r}" upper="{NO_ESTIMATE_VALUE!r}" symbol="{i}" '
            f'label={quoteattr(NO_ESTIMATE_LABEL)} render="true"/>'
        )
        symbols.append(_fill_symbol(str(i), NO_ESTIMATE_COLOUR))
    order = (
        '<orderby><orderByClause asc="0" nullsFirst="0">'
        f"{_escape(_quoted_column(order_field))}</orderByClause></orderby>"
        if order_field
        else ""
    )
    return (
        "<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>"
        '<qgis version="3.22.0" styleCategories="Symbology">'
        f'<renderer-v2 type="graduatedSymbol" attr={quoteattr(attribute)} '
        f'graduatedMethod="GraduatedColor" symbollevels="0" '
        f'enableorderby="{1 if order_field else 0}" forceraster="0">'
        f"<ranges>{''.join(ranges)}</ranges><symbols>{''.join(symbols)}</symbols>"
        f"{order}</renderer-v2>"
        "<blendMode>0</blendMode><featureBlendMode>0</featureBlendMode>"
        "<layerOpacity>1</layerOpacity></qgis>"
    )


def _escape(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def recharge_style(layer, field=RECHARGE_FIELD, scheme="quantiles", classes=5):
    """The default style of an output layer: ``(name, title, qml)``, or None when the layer
    lacks ``field`` or no feature has a value in it. The classes are the run's (``scheme``
    and ``classes`` as for the maps); ``title`` is the legend title of the maps in one line."""
    if field not in getattr(layer, "columns", ()):
        return None
    values = np.asarray(layer[field], dtype=float)
    finite = values[np.isfinite(values)]
    if not finite.size:
        return None
    breaks = map_classes(finite, scheme, classes)
    units = UNITS if field.endswith("_mm_per_year") else ""
    order = AREA_FIELD if AREA_FIELD in layer.columns else None
    qml = graduated_qml(field, breaks, bool((~np.isfinite(values)).any()), units, order)
    title = " ".join(legend_title(field, units).split())
    return f"{title}, {scheme.replace('_', ' ')}", title, qml
