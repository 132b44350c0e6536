"""Choropleth maps of recharge (matplotlib, no display needed).

Functions here return matplotlib figures; :func:`files.save_figure` writes them. The class
limits come from :func:`class_breaks` (quantiles, equal intervals or natural breaks), computed
here without any classification package, so the QGIS style, the PNG map and the report can
all use the same classes.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd

from .errors import InputError

#: Colours for up to five recharge classes, light (little recharge) to dark blue (much):
#: ColorBrewer "Blues" (Brewer, colorbrewer2.org), six classes without the near-white first,
#: so the lowest class still reads as a colour on white paper.
CLASS_COLOURS = ["#c6dbef", "#9ecae1", "#6baed6", "#3182bd", "#08519c"]
NO_ESTIMATE_COLOUR = "#d9d9d9"
EDGE_COLOUR = "#333333"
GAUGE_COLOUR = "#b2182b"

#: Ways to draw class limits (see :func:`class_breaks`).
SCHEMES = ("quantiles", "equal_interval", "natural_breaks")
#: Most classes a map may have (a legend with more cannot be told apart by eye).
MAX_CLASSES = 12
#: Natural breaks use at most this many distinct values; above it, an evenly spaced sample
#: of the sorted values (smallest and largest always kept).
NATURAL_BREAKS_MAX_VALUES = 3000

#: Plain labels for fields a user is likely to map (legend and title).
FIELD_LABELS = {
    "recharge_mm_per_year": "Mean annual recharge",
    "recharge_mm_per_year_low": "Mean annual recharge, low end",
    "recharge_mm_per_year_high": "Mean annual recharge, high end",
    "incremental_recharge_mm_per_year": "Mean annual recharge of the area between gauges",
    "baseflow_mm_per_year": "Mean annual baseflow",
    "seasonal_recharge_mm_per_year": "Mean annual recharge by seasonal recession",
    "baseflow_index": "Baseflow index",
    "recession_index_days": "Recession index",
    "critical_time_days": "Critical time",
    "recharge_mm": "Recharge",
}


# --------------------------------------------------------------------------- classes


def class_breaks(values, scheme="quantiles", classes=5):
    """Class limits of the finite values for a choropleth map.

    Parameters
    ----------
    values : array_like
        Numbers to classify; NaN, None and infinite values are left out.
    scheme : {"quantiles", "equal_interval", "natural_breaks"}
        ``quantiles``: about the same number of values in each class. ``equal_interval``:
        classes of equal width between the smallest and largest value. ``natural_breaks``:
        the limits that make the classes as internally alike as possible, by the exact
        dynamic programme of Fisher (1958), as used for natural breaks by Jenks (1977).
    classes : int
        Number of classes wanted (1 to :data:`MAX_CLASSES`). Fewer are returned when there
        are fewer distinct values, or when quantiles coincide.

    Returns
    -------
    numpy.ndarray
        The smallest value followed by the upper limit of each class, so ``len - 1`` classes.
        A value belongs to the first class whose upper limit it does not exceed (upper
        limits are inclusive). The first class may hold only the smallest value (its two
        limits are then equal). Empty when no value is finite; ``[v, v]`` when all values
        equal ``v``.

    Notes
    -----
    Quantiles are taken at 1/k, 2/k … 1 of all finite values (ties counted) with linear
    interpolation, and repeated limits are merged. Equal intervals split [min, max] into k
    equal parts. Natural breaks minimise the total squared deviation of the values from
    their class means over all ways to cut the sorted values into k groups (Fisher, W.D.
    1958, J. Am. Stat. Assoc. 53, 789–798; Jenks, G.F. 1977, Univ. Kansas Occasional Paper
    2). Equal values always fall in one class. The programme takes time k·m² for m distinct
    values; above :data:`NATURAL_BREAKS_MAX_VALUES` distinct values it works on that many
    values taken at evenly spaced ranks of the sorted data (deterministic; smallest and
    largest kept), so its limits are then close to, not exactly, the optimum.

    Examples
    --------
    >>> class_breaks([1, 2, 3, 10, 11, 12, 20, 21, 22], "natural_breaks", 3).tolist()
    [1.0, 3.0, 12.0, 22.0]
    >>> class_breaks([0, 10, 20, 30, 40], "equal_interval", 2).tolist()
    [0.0, 20.0, 40.0]
    """
    if scheme not in SCHEMES:
        raise InputError(f"map classes were {scheme!r}; expected one of {list(SCHEMES)}")
    k = _class_count(classes)
    v = np.sort(_finite(values))
    if v.size == 0:
        return np.array([])
    distinct = np.unique(v)
    if distinct.size == 1:
        return np.array([v[0], v[0]])
    k = min(k, distinct.size)
    if scheme == "quantiles":
        upper = np.quantile(v, np.arange(1, k + 1) / k)
        upper[-1] = v[-1]
        upper = np.unique(upper)
    elif scheme == "equal_interval":
        upper = np.linspace(v[0], v[-1], k + 1)[1:]
        upper[-1] = v[-1]
    else:
        upper = _natural_breaks(v, k)
    return np.concatenate([[v[0]], upper])


def class_index(values, breaks):
    """Class number (0-based) of each value for limits from :func:`class_breaks`.

    NaN values, and all values when ``breaks`` is empty, get −1. Values outside the limits
    go to the first or last class.
    """
    v = _as_float(values)
    breaks = np.asarray(breaks, dtype=float)
    out = np.full(v.shape, -1, dtype=int)
    if breaks.size < 2:
        return out
    n = breaks.size - 1
    ok = np.isfinite(v)
    out[ok] = np.clip(np.searchsorted(breaks[1:], v[ok], side="left"), 0, n - 1)
    return out


def _class_count(classes):
    try:
        k = int(classes)
        whole = not isinstance(classes, bool) and k == float(classes)
    except (TypeError, ValueError, OverflowError):
        whole = False
    if not whole or not 1 <= k <= MAX_CLASSES:
        raise InputError(
            f"number of map classes was {classes!r}; expected a whole number from 1 to {MAX_CLASSES}"
        )
    return k


def _as_float(values):
    """Any sequence of numbers (None, pandas NA, text numbers allowed) as a float array."""
    series = pd.to_numeric(pd.Series(np.asarray(values, dtype=object).ravel()), errors="coerce")
    return series.to_numpy(dtype=float, na_value=np.nan)


def _finite(values):
    v = _as_float(values)
    return v[np.isfinite(v)]


def _natural_breaks(sorted_values, k):
    """Upper class limits minimising the within-class sum of squares (Fisher 1958)."""
    v = sorted_values
    if np.unique(v).size > NATURAL_BREAKS_MAX_VALUES:
        ranks = np.round(np.linspace(0, v.size - 1, NATURAL_BREAKS_MAX_VALUES)).astype(int)
        v = v[ranks]
    x, weight = np.unique(v, return_counts=True)
    m = x.size
    k = min(k, m)
    # Centred and scaled values keep the sums of squares free of cancellation.
    spread = x[-1] - x[0]
    z = (x - x.mean()) / spread
    w = weight.astype(float)
    cw = np.concatenate([[0.0], np.cumsum(w)])
    cz = np.concatenate([[0.0], np.cumsum(w * z)])
    czz = np.concatenate([[0.0], np.cumsum(w * z * z)])

    def within(a, b):
        """Sum of squares of the values a..b-1 (a may be an array)."""
        n = cw[b] - cw[a]
        s = cz[b] - cz[a]
        return np.maximum(czz[b] - czz[a] - s * s / n, 0.0)

    # cost[j, i]: least sum of squares splitting the first i values into j + 1 classes.
    cost = np.full((k, m + 1), np.inf)
    start = np.zeros((k, m + 1), dtype=int)
    cost[0, 1:] = within(np.zeros(m, dtype=int), np.arange(1, m + 1))
    for j in range(1, k):
        for i in range(j + 1, m + 1):
            a = np.arange(j, i)
            total = cost[j - 1, a] + within(a, i)
            best = int(np.argmin(total))
            cost[j, i] = total[best]
            start[j, i] = a[best]
    ends = [m]
    for j in range(k - 1, 0, -1):
        ends.append(start[j, ends[-1]])
    ends = ends[::-1]
    return x[np.asarray(ends) - 1]


def within_class_squares(values, breaks):
    """Sum over classes of squared deviations from the class mean (lower is tighter).

    The quantity natural breaks minimise; used to compare classifications.
    """
    v = _finite(values)
    idx = class_index(v, breaks)
    total = 0.0
    for c in np.unique(idx):
        part = v[idx == c]
        total += float(((part - part.mean()) ** 2).sum())
    return total


# --------------------------------------------------------------------------- drawing helpers


def class_colours(n):
    """``n`` class colours as ``#rrggbb`` text, light (little recharge) to dark (much).

    The PNG maps and the QGIS style both use these, so the two look alike.
    """
    if n <= len(CLASS_COLOURS):
        idx = np.round(np.linspace(0, len(CLASS_COLOURS) - 1, n)).astype(int)
        return [CLASS_COLOURS[i] for i in idx]
    from matplotlib import colormaps
    from matplotlib.colors import to_hex

    cmap = colormaps["Blues"]
    return [to_hex(cmap(x)) for x in np.linspace(0.2, 1.0, n)]


def _digits(breaks):
    """Decimals that keep every class limit distinct in the legend."""
    b = np.asarray(breaks, dtype=float)
    if b.size == 0:
        return 0
    top = float(np.nanmax(np.abs(b)))
    digits = 0 if top >= 100 or np.all(b == np.round(b)) else 1 if top >= 1 else 2
    distinct = np.unique(b).size
    while digits < 4 and np.unique(np.round(b, digits)).size < distinct:
        digits += 1
    return digits


def class_labels(breaks):
    """Legend labels such as ``120 – 180`` for limits from :func:`class_breaks`."""
    b = np.asarray(breaks, dtype=float)
    digits = _digits(b)
    labels = []
    for low, high in zip(b[:-1], b[1:]):
        if low == high:
            labels.append(f"{low:,.{digits}f}")
        else:
            labels.append(f"{low:,.{digits}f} – {high:,.{digits}f}")
    return labels


def legend_title(field, units):
    """The legend title: the field's plain label and the units."""
    import textwrap

    label = FIELD_LABELS.get(field, str(field).replace("_", " ").capitalize())
    label = "\n".join(textwrap.wrap(label, 26)) or label
    return f"{label}\n({units})" if units else label


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


def recharge_map(
    catchments,
    gauges=None,
    field="recharge_mm_per_year",
    scheme="quantiles",
    classes=5,
    title=None,
    units="mm/yr",
):
    """A choropleth map of ``field`` over the catchment polygons.

    Larger catchments are drawn first, so nested ones show on top of the basins that contain
    them. Catchments without an estimate are grey and listed in the legend. Gauges, when
    given, are red triangles labelled with their ``gauge_id``.

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
        How to draw the class limits (see :func:`class_breaks`).
    title : str, optional
        Map title; by default the field's label and units.
    units : str
        Units shown in the legend title and the default title ("" for none).

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> figure = recharge_map(result.catchments, gauges, scheme="natural_breaks")  # doctest: +SKIP
    """
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch

    _require_field(catchments, field, "catchments")
    if not len(catchments):
        raise InputError("the catchments layer holds no polygons to map")
    values = _as_float(catchments[field])
    breaks = class_breaks(values, scheme, classes)
    order = _plot_order(catchments)
    colours, palette = _colours(values[order], breaks)

    figure = Figure(figsize=(9, 7))
    ax = figure.add_subplot(1, 1, 1)
    catchments.iloc[order].plot(ax=ax, color=colours, edgecolor=EDGE_COLOUR, linewidth=0.8)
    points = _point_layer(gauges, catchments.crs)
    if points is not None and len(points):
        points.plot(ax=ax, color=GAUGE_COLOUR, marker="^", markersize=40, zorder=5)
        if "gauge_id" in points.columns:
            halo = _label_halo()
            for geom, label in zip(points.geometry, points["gauge_id"]):
                ax.annotate(
                    str(label),
                    (geom.x, geom.y),
                    xytext=(4, 4),
                    textcoords="offset points",
                    fontsize=8,
                    zorder=6,
                    path_effects=halo,
                )
    handles = [
        Patch(facecolor=palette[i], edgecolor=EDGE_COLOUR, label=label)
        for i, label in enumerate(class_labels(breaks) if breaks.size >= 2 else [])
    ]
    if not np.all(np.isfinite(values)):
        handles.append(
            Patch(facecolor=NO_ESTIMATE_COLOUR, edgecolor=EDGE_COLOUR, label="no estimate")
        )
    if handles:
        ax.legend(
            handles=handles,
            title=legend_title(field, units),
            loc="upper left",
            bbox_to_anchor=(1.01, 1.0),
            fontsize=8,
            title_fontsize=9,
            frameon=False,
        )
    ax.set_title(title or _default_title(field, units))
    _blank_axes(ax)
    crs_name = catchments.crs.name if catchments.crs is not None else "unknown CRS"
    ax.text(
        0.0,
        -0.02,
        f"Recession-curve displacement (Rorabaugh 1964). Red triangles: gauges. "
        f"Classes: {scheme.replace('_', ' ')}. CRS: {crs_name}.",
        transform=ax.transAxes,
        va="top",
        fontsize=7,
        color="#555555",
    )
    return figure


def _default_title(field, units):
    if field == "recharge_mm_per_year":
        return f"Mean annual groundwater recharge ({units}), years with a complete record"
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
    from matplotlib.lines import Line2D
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
    breaks = class_breaks(shown["value"], scheme, classes)
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
    top_in, bottom_in = 0.6, 0.8
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
        any_missing |= bool(np.any(~np.isfinite(values)))
        any_incomplete |= bool(np.any(incomplete & np.isfinite(values)))
        colours, _ = _colours(values, breaks)
        layer.plot(ax=ax, color=colours, edgecolor=EDGE_COLOUR, linewidth=0.4)
        if np.any(incomplete):
            layer[incomplete].plot(
                ax=ax, facecolor="none", edgecolor="#555555", hatch="////", linewidth=0.0
            )
            layer[incomplete].plot(ax=ax, facecolor="none", edgecolor=EDGE_COLOUR, linewidth=0.4)
        if points is not None and len(points):
            points.plot(ax=ax, color=GAUGE_COLOUR, marker="^", markersize=8, zorder=5)
        ax.set_title(str(year), fontsize=9, pad=2)
        ax.set_xlim(xmin, xmax)
        ax.set_ylim(ymin, ymax)
        _blank_axes(ax)
        for spine in ax.spines.values():
            spine.set_edgecolor("#bbbbbb")

    handles = [
        Patch(facecolor=palette[i], edgecolor=EDGE_COLOUR, label=label)
        for i, label in enumerate(class_labels(breaks) if breaks.size >= 2 else [])
    ]
    if any_missing or breaks.size < 2:
        handles.append(
            Patch(facecolor=NO_ESTIMATE_COLOUR, edgecolor=EDGE_COLOUR, label="no estimate")
        )
    if any_incomplete:
        handles.append(
            Patch(facecolor="white", edgecolor="#555555", hatch="////", label="incomplete year")
        )
    if points is not None and len(points):
        handles.append(
            Line2D([], [], color=GAUGE_COLOUR, marker="^", linestyle="none", label="gauge")
        )
    figure.legend(
        handles=handles,
        title=legend_title(field, units).replace("\n", " "),
        loc="lower center",
        bbox_to_anchor=(0.5, 0.0),
        ncol=min(len(handles), 8),
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
