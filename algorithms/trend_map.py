"""A map of the trend of annual recharge (Sen's slope, Mann–Kendall test) by catchment.

Colours run from brown (falling) through pale to blue-green (rising), in classes symmetric
about zero, so a falling and a rising basin of the same size look equally strong. Basins whose
trend is not significant (``no clear trend``) are hatched over their colour: the slope is
there to read, the hatching says the record cannot tell it from chance. Basins without a trend
are grey, with the reason. As on the recharge map, basins that contain other gauged basins are
drawn as outlines, their trend written beside their gauge.
"""

from __future__ import annotations

import textwrap

import numpy as np

from .choropleth_classes import _as_float, _digits, _round_significant, class_index
from .errors import InputError
from .maps import (
    EDGE_COLOUR,
    NO_ESTIMATE_COLOUR,
    _class_handles,
    _closing_handles,
    _draw_gauges,
    _finish_map,
    _hatch_reasons,
    _hatched,
    _plot_order,
    _point_layer,
    _reason_handles,
    _reason_labels,
    _require_field,
    _side_legend,
    _visible,
    containing,
    hatch_colour,
    no_estimate_reasons,
)
from .trends import ALPHA, MIN_YEARS, NO_TREND

SLOPE_FIELD = "recharge_trend_mm_per_decade"
WORD_FIELD = "recharge_trend"
#: ColorBrewer "BrBG", six classes (Brewer, colorbrewer2.org; from memory): brown for falling
#: recharge, blue-green for rising, both pale near zero; readable by most colour-blind readers.
TREND_COLOURS = ["#8c510a", "#d8b365", "#f6e8c3", "#c7eae5", "#5ab4ac", "#01665e"]
#: The hatch over basins whose trend is not significant.
NO_CLEAR_TREND_HATCH = "///"
#: Why a basin has no trend, as the legend says it, with its hatch.
NO_TREND_REASONS = {
    "no gauge": "",
    f"fewer than {MIN_YEARS} complete years": "...",
    "flagged (see quality)": "xxx",
    "no estimate": "++",
}


def trend_breaks(values):
    """Class limits symmetric about zero: ±m and its thirds, m the largest |slope| rounded up
    to 2 significant figures (six classes; one class ``[0, 0]`` when every slope is 0)."""
    v = _as_float(values)
    v = v[np.isfinite(v)]
    if not v.size:
        return np.array([], dtype=float)
    top = float(np.max(np.abs(v)))
    if top == 0:
        return np.array([0.0, 0.0])
    top = float(_round_significant(top, 2, np.ceil))
    return np.array([-top, -2 * top / 3, -top / 3, 0.0, top / 3, 2 * top / 3, top])


def trend_map(catchments, gauges=None, title=None):
    """A map of the trend of annual recharge by catchment (``recharge_trend_mm_per_decade``
    and ``recharge_trend`` of a run's catchments layer).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch

    _require_field(catchments, SLOPE_FIELD, "catchments")
    if not len(catchments):
        raise InputError("the catchments layer holds no polygons to map")
    layer = catchments.iloc[_plot_order(catchments)]
    outer = containing(layer)
    filled = ~outer
    values = _as_float(layer[SLOPE_FIELD])
    words = (
        layer[WORD_FIELD].astype(object).where(layer[WORD_FIELD].notna(), "").astype(str)
        if WORD_FIELD in layer.columns
        else np.full(len(layer), "", dtype=object)
    )
    words = np.asarray(words, dtype=object)
    breaks = trend_breaks(values[filled])
    index = class_index(values, breaks) if breaks.size else np.full(len(layer), -1)
    palette = TREND_COLOURS if breaks.size == 7 else [TREND_COLOURS[2]]
    colours = [
        "none" if not f else (palette[i] if i >= 0 else NO_ESTIMATE_COLOUR)
        for i, f in zip(index, filled)
    ]
    reasons = _reasons(layer, values)

    figure = Figure(figsize=(9, 7))
    ax = figure.add_subplot(1, 1, 1)
    layer.plot(ax=ax, color=colours, edgecolor=EDGE_COLOUR, linewidth=0.8)
    unclear = filled & np.isfinite(values) & (words == NO_TREND)
    for i in np.unique(index[unclear]):  # hatch lines that stand out on each fill
        pick = unclear & (index == i)
        _hatched(ax, _visible(layer, pick), NO_CLEAR_TREND_HATCH, hatch_colour(palette[i]))
    _hatch_reasons(ax, layer, reasons, NO_TREND_REASONS, filled)
    if outer.any():
        layer[outer].plot(ax=ax, facecolor="none", edgecolor="black", linewidth=2.2, zorder=3)
    digits = max(_digits(breaks), 1) if breaks.size else 1
    whole = {}
    if "gauge_id" in layer.columns:
        for gid, value, word in zip(layer["gauge_id"][outer], values[outer], words[outer]):
            if gid is not None and np.isfinite(value):
                whole[str(gid)] = f"whole basin {value:+,.{digits}f} mm/yr per decade ({word})"
    _draw_gauges(ax, _point_layer(gauges, catchments.crs), whole)
    _reason_labels(ax, layer, reasons)

    handles = _class_handles(palette, breaks)
    if unclear.any():
        handles.append(
            Patch(
                facecolor="white",
                edgecolor="#555555",
                hatch=NO_CLEAR_TREND_HATCH,
                label=f"no clear trend\n(p ≥ {ALPHA:g})",
            )
        )
    handles += _reason_handles(reasons, NO_TREND_REASONS, filled)
    handles += _closing_handles(outer.any(), gauges is not None and len(gauges) > 0)
    _side_legend(ax, handles, "Trend of annual recharge\n(mm/yr per decade)")
    ax.set_title(title or "Trend of annual recharge (mm/yr per decade)")
    note = (
        "Colours: Sen's slope of each whole basin's annual recharge over its complete water "
        "years (brown falling, blue-green rising); hatched: no clear trend by the Mann–Kendall "
        f"test (p ≥ {ALPHA:g}, serial correlation allowed for). A trend says what happened "
        "over the record, not what will."
    )
    if outer.any():
        note += " Thick outlines: basins with gauged basins inside, their trend by the gauge."
    note = "\n".join(textwrap.wrap(note, 120))
    _finish_map(ax, layer, catchments.crs, [note], "Classes: symmetric about zero.")
    return figure


def _reasons(layer, values):
    """Why each basin without a trend has none (keys of :data:`NO_TREND_REASONS`)."""
    reasons = no_estimate_reasons(layer, values)
    if "complete_years" in layer.columns:
        years = _as_float(layer["complete_years"])
        few = (reasons != "") & (reasons != "no gauge") & (np.nan_to_num(years) < MIN_YEARS)
        reasons[few] = f"fewer than {MIN_YEARS} complete years"
    return reasons
