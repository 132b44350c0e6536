"""Choropleth maps of recharge (matplotlib, no display needed): the drawing.

:func:`recharge_map` draws one field over the catchments (nested basins as the area between
gauges or as outlines, grey basins with the reason), :func:`year_maps` one panel per water
year with one set of classes; the helpers below them (gauges, reason labels, hatching, the
notes under a map, the legend entries) serve :mod:`trend_map` too. Functions here return
matplotlib figures; :func:`files.save_figure` writes them.

The class limits, colours and labels are in :mod:`choropleth_classes`, the scale bar and the
north arrow in :mod:`map_furniture`; their names stay importable from here.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd

from .choropleth_classes import (  # noqa: F401  (the classes' names stay importable from here)
    CLASS_COLOURS,
    FIELD_LABELS,
    MAX_CLASSES,
    NATURAL_BREAKS_MAX_VALUES,
    SCHEMES,
    _as_float,
    _digits,
    class_breaks,
    class_colours,
    class_index,
    class_labels,
    legend_title,
    map_classes,
    round_breaks,
    within_class_squares,
)
from .errors import InputError
from .map_furniture import (  # noqa: F401  (the furniture's names stay importable from here)
    _draw_furniture,
    ground_scale,
    map_aspect,
    north_angle,
    scale_bar,
)

# Colours of what is drawn besides the classes: basins without an estimate, outlines, gauges.
NO_ESTIMATE_COLOUR = "#d9d9d9"
EDGE_COLOUR = "#333333"
GAUGE_COLOUR = "#b2182b"


# --------------------------------------------------------------------------- drawing helpers


def _colours(values, breaks):
    idx = class_index(values, breaks)
    palette = class_colours(max(np.asarray(breaks).size - 1, 1))
    return [palette[i] if i >= 0 else NO_ESTIMATE_COLOUR for i in idx], palette


def _plot_order(layer):
    """Rows of ``layer`` from the largest polygon to the smallest (nested ones end on top)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # a geographic CRS only makes the areas approximate
        area = layer.geometry.area.to_numpy(dtype=float)
    return np.argsort(-np.nan_to_num(area, nan=0.0), kind="stable")


def _point_layer(gauges, crs):
    """The gauges as points in ``crs``, or None when they cannot be drawn."""
    import geopandas as gpd

    if not isinstance(gauges, gpd.GeoDataFrame) or not len(gauges):
        return None
    try:
        points = gauges
        if crs is not None and gauges.crs is not None and gauges.crs != crs:
            points = gauges.to_crs(crs)
    except Exception as exc:
        raise InputError(f"the gauges could not be drawn in the catchments' CRS: {exc}") from None
    keep = points.geometry.notna() & ~points.geometry.is_empty
    keep &= np.asarray(points.geometry.geom_type == "Point")
    return points[keep]


def _label_halo():
    from matplotlib import patheffects

    return [patheffects.withStroke(linewidth=2.5, foreground="white")]


def _blank_axes(ax):
    ax.set_aspect("equal")
    ax.set_xticks([])
    ax.set_yticks([])
    ax.set_xlabel("")
    ax.set_ylabel("")


def _require_field(frame, field, what):
    if field not in frame.columns:
        raise InputError(f"the {what} have no field {field!r}", field=field)


# --------------------------------------------------------------------------- maps


#: Whole-basin fields and the field holding the same quantity for the area between gauges.
INTERVENING_FIELDS = {"recharge_mm_per_year": "incremental_recharge_mm_per_year"}
#: Ways to show basins that contain other basins (see :func:`recharge_map`).
NESTED_STYLES = ("auto", "intervening", "outline")
#: Why a basin is grey, as the legend says it, with the hatch that tells them apart.
NO_ESTIMATE_REASONS = {
    "no gauge": "",
    "flagged (see quality)": "xxx",
    "no estimate": "...",
}


def containing(layer, share=0.9):
    """Which polygons contain another polygon of ``layer`` (nested basins inside them).

    Polygon *i* contains *j* when *j* is the smaller and at least ``share`` of *j*'s area lies
    inside *i* (a tolerance for digitised boundaries that do not match exactly).

    Returns
    -------
    numpy.ndarray of bool
    """
    geoms = layer.geometry.to_numpy()
    out = np.zeros(len(geoms), dtype=bool)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # a geographic CRS only makes the areas approximate
        area = np.nan_to_num(layer.geometry.area.to_numpy(dtype=float), nan=0.0)
        # Candidate pairs by bounding box (numpy; works with shapely 1.8 and 2).
        box = layer.geometry.bounds.to_numpy(dtype=float)
        with np.errstate(invalid="ignore"):
            overlap = (box[:, None, 0] <= box[None, :, 2]) & (box[None, :, 0] <= box[:, None, 2])
            overlap &= (box[:, None, 1] <= box[None, :, 3]) & (box[None, :, 1] <= box[:, None, 3])
        left, right = np.nonzero(overlap)
        for i, j in zip(left, right):
            if i == j or out[i] or not area[j] < area[i] or area[j] <= 0:
                continue
            if geoms[i].intersection(geoms[j]).area >= share * area[j]:
                out[i] = True
    return out


def no_estimate_reasons(layer, values, gauge_field="gauge_id", quality_field="quality"):
    """Why each basin without a value has none (keys of :data:`NO_ESTIMATE_REASONS`).

    ``no gauge`` when the basin has no gauge id (or its quality says so), ``flagged (see
    quality)`` when its quality is not ``ok``, else ``no estimate``; "" where a value exists.
    """
    v = _as_float(values)
    n = len(layer)
    gauge = (
        layer[gauge_field].notna().to_numpy() if gauge_field in layer.columns else np.ones(n, bool)
    )
    quality = (
        layer[quality_field].astype(object).where(layer[quality_field].notna(), "").astype(str)
        if quality_field in layer.columns
        else pd.Series([""] * n)
    ).to_numpy()
    out = []
    for value, has_gauge, q in zip(v, gauge, quality):
        if np.isfinite(value):
            out.append("")
        elif not has_gauge or q.startswith("no gauge"):
            out.append("no gauge")
        elif q and q != "ok":
            out.append("flagged (see quality)")
        else:
            out.append("no estimate")
    return np.array(out, dtype=object)


def recharge_map(
    catchments,
    gauges=None,
    field="recharge_mm_per_year",
    scheme="quantiles",
    classes=5,
    title=None,
    units="mm/yr",
    nested="auto",
):
    """A choropleth map of ``field`` over the catchment polygons.

    Catchments without an estimate are grey, with the reason in the legend and on the map
    (no gauge, flagged). Gauges, when given, are red triangles labelled with their
    ``gauge_id``. A scale bar and a north arrow (true north at the centre) are drawn when the
    layer has a CRS; the map's own text says what the colours mean.

    Parameters
    ----------
    catchments : geopandas.GeoDataFrame
        Polygons with the field to map (e.g. the ``catchments`` layer of a run).
    gauges : geopandas.GeoDataFrame, optional
        Gauge points (any CRS; drawn in the catchments' CRS).
    field : str
        Numeric field to map, e.g. ``recharge_mm_per_year`` or
        ``incremental_recharge_mm_per_year``.
    scheme, classes
        How to draw the class limits (see :func:`map_classes`).
    title : str, optional
        Map title; by default the field's label and units.
    units : str
        Units shown in the legend title and the default title ("" for none).
    nested : {"auto", "intervening", "outline"}
        How to show basins that contain other basins (:func:`containing`). Drawn filled, a
        containing basin's whole-basin value would show only on the part outside the basins
        inside it, and read as the value of that part. ``intervening``: colour every area by
        the recharge of the area between gauges (the basin minus the gauged basins inside
        it; ``recharge_mm_per_year`` is then mapped from
        ``incremental_recharge_mm_per_year``), and outline the containing basins.
        ``outline``: keep the whole-basin field, draw containing basins as outlines only and
        write their value beside their gauge. ``auto`` (default): ``intervening`` where the
        layer has the field for it, else ``outline``; nothing changes when no basin nests.

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> figure = recharge_map(result.catchments, gauges, scheme="natural_breaks")  # doctest: +SKIP
    """
    from matplotlib.figure import Figure

    _require_field(catchments, field, "catchments")
    if nested not in NESTED_STYLES:
        raise InputError(f"nested was {nested!r}; expected one of {list(NESTED_STYLES)}")
    if not len(catchments):
        raise InputError("the catchments layer holds no polygons to map")
    order = _plot_order(catchments)
    layer = catchments.iloc[order]
    outer = containing(layer)
    mode = "plain"
    if outer.any():
        mode = nested
        if mode == "auto":
            between = field in INTERVENING_FIELDS.values()  # already the area between gauges
            between |= INTERVENING_FIELDS.get(field) in layer.columns
            mode = "intervening" if between else "outline"
        if mode == "intervening" and field in INTERVENING_FIELDS:
            if INTERVENING_FIELDS[field] not in layer.columns:
                raise InputError(
                    f"the catchments have no field {INTERVENING_FIELDS[field]!r} to map the "
                    "areas between gauges; use nested='outline'",
                    field=INTERVENING_FIELDS[field],
                )
            field = INTERVENING_FIELDS[field]
    values = _as_float(layer[field])
    filled = ~outer if mode == "outline" else np.ones(len(layer), bool)
    breaks = map_classes(values[filled], scheme, classes)
    colours, palette = _colours(values, breaks)
    reasons = no_estimate_reasons(layer, values)

    figure = Figure(figsize=(9, 7))
    ax = figure.add_subplot(1, 1, 1)
    colours = [c if f else "none" for c, f in zip(colours, filled)]
    layer.plot(ax=ax, color=colours, edgecolor=EDGE_COLOUR, linewidth=0.8)
    _hatch_reasons(ax, layer, reasons, NO_ESTIMATE_REASONS, filled)
    if mode != "plain":
        layer[outer].plot(ax=ax, facecolor="none", edgecolor="black", linewidth=2.2, zorder=3)
    points = _point_layer(gauges, catchments.crs)
    whole = {}
    if mode == "outline" and "gauge_id" in layer.columns:
        digits = _digits(breaks)
        for gid, value in zip(layer["gauge_id"][outer], values[outer]):
            if gid is not None and np.isfinite(value):
                whole[str(gid)] = f"{value:,.{digits}f} {units}".strip()
    _draw_gauges(ax, points, {gid: f"whole basin {text}" for gid, text in whole.items()})
    _reason_labels(ax, layer, reasons)
    handles = _class_handles(palette, breaks)
    handles += _reason_handles(reasons, NO_ESTIMATE_REASONS, filled)
    handles += _closing_handles(mode != "plain", points is not None and len(points) > 0)
    if handles:
        _side_legend(ax, handles, legend_title(field, units))
    ax.set_title(title or _default_title(field, units, mode))
    _finish_map(
        ax,
        layer,
        catchments.crs,
        [_colour_note(field, mode, "estimate_source" in layer.columns)],
        f"Classes: {scheme.replace('_', ' ')}, limits rounded to 2 significant figures.",
    )
    return figure


def _draw_gauges(ax, points, extra=None):
    """Gauges as red triangles labelled with their id (and ``extra[id]`` on a second line)."""
    if points is None or not len(points):
        return
    points.plot(ax=ax, color=GAUGE_COLOUR, marker="^", markersize=40, zorder=5)
    if "gauge_id" not in points.columns:
        return
    halo = _label_halo()
    for geom, label in zip(points.geometry, points["gauge_id"]):
        text = str(label)
        if extra and text in extra:
            text += f"\n{extra[text]}"
        ax.annotate(
            text,
            (geom.x, geom.y),
            xytext=(4, 4),
            textcoords="offset points",
            fontsize=8,
            zorder=6,
            path_effects=halo,
        )


def _reason_labels(ax, layer, reasons, most=40):
    """Short labels on grey basins saying why (up to ``most`` basins; the legend says it too)."""
    if len(layer) > most:
        return
    halo = _label_halo()
    for geom, reason in zip(layer.geometry, reasons):
        if reason and geom is not None and not geom.is_empty:
            spot = geom.representative_point()
            ax.text(
                spot.x,
                spot.y,
                reason.split(" (")[0],
                ha="center",
                va="center",
                fontsize=7,
                color="#333333",
                zorder=6,
                path_effects=halo,
            )


def _finish_map(ax, layer, crs, notes, classes_note):
    """Blank axes, the extent, scale bar and north arrow, and the notes under the map: what
    the colours mean (``notes``), the furniture, the method, ``classes_note`` and the CRS."""
    _blank_axes(ax)
    notes = list(notes)
    if crs is not None:
        xmin, ymin, xmax, ymax = layer.total_bounds
        pad_x, pad_y = 0.03 * (xmax - xmin), 0.03 * (ymax - ymin)
        bounds = (xmin - pad_x, ymin - 3 * pad_y, xmax + pad_x, ymax + pad_y)
        ax.set_xlim(bounds[0], bounds[2])
        ax.set_ylim(bounds[1], bounds[3])
        try:
            ax.set_aspect(map_aspect(crs, bounds))
            _draw_furniture(ax, crs, bounds)
            if crs.is_geographic:
                notes.append("Scale bar true at the map's centre latitude.")
            notes.append("North arrow: true north at the map's centre.")
        except Exception:  # a CRS pyproj cannot take to longitude/latitude
            notes.append("No scale bar or north arrow: the CRS cannot be located on Earth.")
        crs_name = crs.name
    else:
        notes.append("No scale bar or north arrow: the layer has no CRS.")
        crs_name = "unknown CRS"
    notes.append(f"Recession-curve displacement (Rorabaugh 1964). {classes_note} CRS: {crs_name}.")
    ax.text(
        0.0,
        -0.02,
        "\n".join(notes),
        transform=ax.transAxes,
        va="top",
        fontsize=7,
        color="#333333",
        gid="map-note",
    )


def _colour_note(field, mode, subbasins=False):
    """The line that says what the colours mean (printed under the map)."""
    label = FIELD_LABELS.get(field, str(field).replace("_", " ")).lower()
    if subbasins and mode == "plain":
        return (
            f"Colours: {label} of each subbasin, that of the area between its gauge downstream "
            "and the gauges upstream of that\n(the field estimate_source says where a value "
            "was borrowed from another gauge)."
        )
    if mode == "intervening":
        return (
            "Colours: recharge of the area between gauges (a basin minus the gauged basins "
            "inside it). Thick outlines: basins that contain other gauged basins;\n"
            "their whole-basin value is the field recharge_mm_per_year, not shown here."
        )
    if mode == "outline":
        return (
            f"Colours: {label} of the whole basin upstream of each gauge. Basins that contain "
            "other gauged basins are drawn as thick outlines only;\ntheir whole-basin value is "
            "written beside their gauge."
        )
    if field in INTERVENING_FIELDS.values():
        return "Colours: recharge of the area between gauges (a basin minus the gauged basins inside it)."
    return f"Colours: {label} of the whole basin upstream of each gauge (no basin lies inside another)."


HATCH_DARK = "#222222"
HATCH_LIGHT = "#ffffff"


def relative_luminance(colour):
    """Relative luminance of a colour (W3C WCAG 2.1, definition "relative luminance").

    L = 0.2126 R + 0.7152 G + 0.0722 B, each channel c (0–1) linearised as c/12.92 when
    c <= 0.04045, else ((c + 0.055)/1.055)^2.4.
    """
    from matplotlib.colors import to_rgb

    c = np.asarray(to_rgb(colour), dtype=float)
    linear = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    return float(linear @ np.array([0.2126, 0.7152, 0.0722]))


def contrast_ratio(first, second):
    """WCAG 2.1 contrast ratio (L1 + 0.05) / (L2 + 0.05), L1 the lighter: 1 to 21."""
    a, b = sorted((relative_luminance(first), relative_luminance(second)), reverse=True)
    return (a + 0.05) / (b + 0.05)


def hatch_colour(fill):
    """Black-ish or white hatching, whichever contrasts more with ``fill`` (WCAG 2.1)."""
    if contrast_ratio(fill, HATCH_DARK) >= contrast_ratio(fill, HATCH_LIGHT):
        return HATCH_DARK
    return HATCH_LIGHT


def _visible(layer, pick):
    """The picked rows of ``layer`` (drawn in its order) minus the polygons drawn after them."""
    geoms = layer.geometry.to_numpy()
    out = layer[pick].copy()
    shown = []
    for i in np.flatnonzero(pick):
        geom = geoms[i]
        later = [g for g in geoms[i + 1 :] if g is not None and g.intersects(geom)]
        if geom is not None and later:
            from shapely.ops import unary_union

            geom = geom.difference(unary_union(later))
        shown.append(geom)
    if len(shown):
        import geopandas as gpd

        out = out.set_geometry(gpd.GeoSeries(shown, index=out.index, crs=layer.crs))
    return out


def _hatched(ax, layer, hatch, colour):
    """Draw ``layer`` hatched in ``colour`` with no fill and no outline (any matplotlib)."""
    import matplotlib

    with matplotlib.rc_context({"hatch.color": colour}):
        layer.plot(ax=ax, facecolor="none", edgecolor=colour, hatch=hatch, linewidth=0.0, zorder=2)
    collection = ax.collections[-1]
    if hasattr(collection, "set_hatchcolor"):  # matplotlib 3.10 and later
        collection.set_hatchcolor(colour)
    return collection


def _hatch_reasons(ax, layer, reasons, hatches, filled):
    """Hatch the filled grey basins by why they have no value (``hatches``: reason -> hatch;
    a reason with no hatch stays plain grey)."""
    for reason, hatch in hatches.items():
        pick = (reasons == reason) & filled
        if hatch and pick.any():
            _hatched(ax, _visible(layer, pick), hatch, "#707070")


# --------------------------------------------------------------------------- legend entries

#: Legend label of the thick outline of a basin that contains other gauged basins.
NESTED_LABEL = "basin with gauged\nbasins inside it"


def _class_handles(palette, breaks):
    """Legend entries of the classes: a patch of each class colour labelled with its limits."""
    from matplotlib.patches import Patch

    return [
        Patch(facecolor=palette[i], edgecolor=EDGE_COLOUR, label=label)
        for i, label in enumerate(class_labels(breaks) if breaks.size >= 2 else [])
    ]


def _reason_handles(reasons, hatches, filled):
    """Legend entries of the grey basins: one for each reason in ``hatches`` (reason -> hatch)
    that a filled basin has, in the order of ``hatches``."""
    from matplotlib.patches import Patch

    return [
        Patch(facecolor=NO_ESTIMATE_COLOUR, edgecolor="#707070", hatch=hatch, label=reason)
        for reason, hatch in hatches.items()
        if np.any((reasons == reason) & filled)
    ]


def _closing_handles(nested, gauges, linewidth=2.2, label=NESTED_LABEL):
    """The last legend entries: the thick outline of a basin with gauged basins inside it
    (when ``nested``), drawn ``linewidth`` wide, and the gauge triangle (when ``gauges``)."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    handles = []
    if nested:
        handles.append(Patch(facecolor="none", edgecolor="black", linewidth=linewidth, label=label))
    if gauges:
        handles.append(
            Line2D([], [], color=GAUGE_COLOUR, marker="^", linestyle="none", label="gauge")
        )
    return handles


def _side_legend(ax, handles, title):
    """The legend of a single map, to the right of it."""
    ax.legend(
        handles=handles,
        title=title,
        loc="upper left",
        bbox_to_anchor=(1.01, 1.0),
        fontsize=8,
        title_fontsize=9,
        frameon=False,
    )


def _default_title(field, units, mode="plain"):
    if field == "recharge_mm_per_year" and mode == "outline":
        return f"Mean annual groundwater recharge of whole basins ({units}), complete years"
    if field == "recharge_mm_per_year":
        return f"Mean annual groundwater recharge ({units}), years with a complete record"
    if field == "incremental_recharge_mm_per_year" and mode == "intervening":
        return (
            f"Mean annual groundwater recharge between gauges ({units}), "
            "years with a complete record"
        )
    label = FIELD_LABELS.get(field, str(field).replace("_", " ").capitalize())
    return f"{label} ({units})" if units else label


def year_maps(
    catchments_layer,
    annual_table,
    gauges=None,
    scheme="quantiles",
    classes=5,
    units="mm/yr",
    field="recharge_mm",
    gauge_field="gauge_id",
    years=None,
    title=None,
):
    """Small multiples: one map panel per water year, with one set of classes for all.

    Each catchment takes the year's value of its gauge from the annual table (joined on
    ``gauge_id``). Incomplete water years are hatched; catchments with no value that year
    are grey. One legend serves every panel.

    Parameters
    ----------
    catchments_layer : geopandas.GeoDataFrame
        Polygons with a ``gauge_field`` (e.g. the ``catchments`` layer of a run).
    annual_table : pandas.DataFrame
        One row per gauge and water year with ``gauge_id``, ``water_year``, ``field`` and
        ``complete`` (e.g. the ``annual`` table of a run).
    gauges : geopandas.GeoDataFrame, optional
        Gauge points, drawn as small triangles (unlabelled: the panels are small).
    scheme, classes
        How to draw the class limits (see :func:`class_breaks`); the limits come from the
        values of all years together, so colours mean the same in every panel.
    units : str
        Units in the legend title.
    field : str
        Field of the annual table to map (``recharge_mm`` by default).
    gauge_field : str
        Gauge id field of the catchments layer.
    years : sequence of int, optional
        Water years to draw (default: every year in the table, in order).
    title : str, optional
        Figure title.

    Returns
    -------
    matplotlib.figure.Figure
        One axis per water year, laid out in a grid, and one figure legend.
    """
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch

    _require_field(catchments_layer, gauge_field, "catchments")
    if not len(catchments_layer):
        raise InputError("the catchments layer holds no polygons to map")
    for name in ("gauge_id", "water_year", field):
        _require_field(annual_table, name, "annual table")
    table = pd.DataFrame(
        {
            "gauge_id": annual_table["gauge_id"].astype(str).to_numpy(),
            "water_year": pd.to_numeric(annual_table["water_year"], errors="coerce").to_numpy(),
            "value": _as_float(annual_table[field]),
            "complete": (
                annual_table["complete"].fillna(False).astype(bool).to_numpy()
                if "complete" in annual_table.columns
                else np.ones(len(annual_table), bool)
            ),
        }
    )
    table = table[np.isfinite(table["water_year"].to_numpy(dtype=float))]
    table["water_year"] = table["water_year"].astype(int)
    if years is None:
        years = sorted(table["water_year"].unique().tolist())
    else:
        years = [int(y) for y in years]
    if not years:
        raise InputError("the annual table holds no water years to map")

    shown = table[table["water_year"].isin(years)]
    breaks = map_classes(shown["value"], scheme, classes)
    order = _plot_order(catchments_layer)
    layer = catchments_layer.iloc[order]
    ids = pd.Series(layer[gauge_field].to_numpy(), dtype=object)
    ids = ids.where(ids.notna(), None).map(lambda g: None if g is None else str(g))
    by_year = {y: part.set_index("gauge_id") for y, part in shown.groupby("water_year")}
    points = _point_layer(gauges, catchments_layer.crs)

    n = len(years)
    xmin, ymin, xmax, ymax = layer.total_bounds
    aspect = (ymax - ymin) / (xmax - xmin) if xmax > xmin and ymax > ymin else 1.0
    aspect = float(np.clip(aspect, 0.25, 4.0))
    ncols = int(min(n, max(1, math.ceil(math.sqrt(2.2 * n * aspect)))))
    nrows = math.ceil(n / ncols)
    width = 12.0
    panel_w = width / ncols
    panel_h = panel_w * aspect + 0.3
    top_in, bottom_in = 0.6, 1.1
    height = nrows * panel_h + top_in + bottom_in
    figure = Figure(figsize=(width, height))
    figure.subplots_adjust(
        left=0.01,
        right=0.99,
        top=1 - top_in / height,
        bottom=bottom_in / height,
        wspace=0.04,
        hspace=0.3 / panel_h,
    )
    palette = class_colours(max(breaks.size - 1, 1))
    no_gauge = layer[gauge_field].isna().to_numpy()
    outer = containing(layer)
    try:
        aspect = map_aspect(layer.crs, layer.total_bounds) if layer.crs is not None else 1.0
    except Exception:  # a CRS pyproj cannot take to longitude/latitude
        aspect = 1.0
    any_missing = any_incomplete = False
    for number, year in enumerate(years):
        ax = figure.add_subplot(nrows, ncols, number + 1)
        rows = by_year.get(year)
        if rows is not None:
            rows = rows[~rows.index.duplicated()]
        values = np.array(
            [
                rows["value"].get(g, np.nan) if rows is not None and g is not None else np.nan
                for g in ids
            ],
            dtype=float,
        )
        incomplete = np.array(
            [
                bool(rows is not None and g is not None and g in rows.index)
                and not bool(rows["complete"].get(g))
                for g in ids
            ]
        )
        missing = ~np.isfinite(values) & ~no_gauge
        any_missing |= bool(np.any(missing))
        any_incomplete |= bool(np.any(incomplete & np.isfinite(values)))
        colours, _ = _colours(values, breaks)
        layer.plot(ax=ax, color=colours, edgecolor=EDGE_COLOUR, linewidth=0.4)
        if np.any(missing):
            _hatched(ax, _visible(layer, missing), "...", "#707070")
        # Hatching in black on light fills and in white on dark ones, so it shows on every
        # class (contrast by the WCAG 2.1 relative luminance, see hatch_colour).
        for colour in (HATCH_DARK, HATCH_LIGHT):
            pick = incomplete & np.array([hatch_colour(c) == colour for c in colours])
            if np.any(pick):
                _hatched(ax, _visible(layer, pick), "////", colour)
        if np.any(incomplete):
            layer[incomplete].plot(ax=ax, facecolor="none", edgecolor=EDGE_COLOUR, linewidth=0.4)
        if np.any(outer):
            layer[outer].plot(ax=ax, facecolor="none", edgecolor="black", linewidth=1.2)
        if points is not None and len(points):
            points.plot(ax=ax, color=GAUGE_COLOUR, marker="^", markersize=8, zorder=5)
        ax.set_title(str(year), fontsize=9, pad=2)
        ax.set_xlim(xmin, xmax)
        ax.set_ylim(ymin, ymax)
        _blank_axes(ax)
        ax.set_aspect(aspect)
        for spine in ax.spines.values():
            spine.set_edgecolor("#bbbbbb")

    handles = _class_handles(palette, breaks)
    if np.any(no_gauge):
        handles.append(Patch(facecolor=NO_ESTIMATE_COLOUR, edgecolor=EDGE_COLOUR, label="no gauge"))
    if any_missing or breaks.size < 2:
        handles.append(
            Patch(
                facecolor=NO_ESTIMATE_COLOUR,
                edgecolor="#707070",
                hatch="...",
                label="no estimate that year",
            )
        )
    if any_incomplete:
        handles.append(
            Patch(facecolor="white", edgecolor="#555555", hatch="////", label="incomplete year")
        )
    handles += _closing_handles(
        np.any(outer),
        points is not None and len(points) > 0,
        linewidth=1.2,
        label="basin with gauged basins inside it\n(its colour shows only outside them)",
    )
    figure.legend(
        handles=handles,
        title=legend_title(field, units).replace("\n", " "),
        loc="lower center",
        bbox_to_anchor=(0.5, 0.0),
        ncol=len(handles) if len(handles) <= 7 else math.ceil(len(handles) / 2),
        fontsize=9,
        title_fontsize=10,
        frameon=False,
    )
    figure.suptitle(
        title or f"Groundwater recharge by water year ({units}), one set of classes for all years",
        fontsize=12,
        y=1 - 0.2 / height,
        va="top",
    )
    return figure
