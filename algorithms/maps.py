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


def round_breaks(breaks, values=None, figures=2):
    """Class limits rounded to ``figures`` significant figures, more where needed.

    The lowest limit is rounded down and the highest up, so every value stays inside; the
    limits between classes go to the nearest rounded number. When rounding would merge two
    limits, change the number of classes, or empty a class that held values, one more
    significant figure is tried (up to 15, then the limits are returned unrounded).

    Notes
    -----
    Two significant figures for legend limits is our own rule, in line with the common
    practice of showing no more digits than a reader can use on a map (a recharge estimate
    carries a band of several percent, so a third figure would claim more than it knows).

    Examples
    --------
    >>> round_breaks([163.5, 180.2, 196.4, 213.0, 233.4, 260.1]).tolist()
    [160.0, 180.0, 200.0, 210.0, 230.0, 270.0]
    """
    b = np.asarray(breaks, dtype=float)
    if b.size < 2 or not np.all(np.isfinite(b)) or b[0] == b[-1]:
        return b.copy()  # one value: shown as it is
    v = None if values is None else _finite(values)
    before = None if v is None else np.bincount(class_index(v, b), minlength=b.size - 1)
    for f in range(int(figures), 16):
        low = _round_significant(b[0], f, np.floor)
        high = _round_significant(b[-1], f, np.ceil)
        inner = [_round_significant(x, f, np.round) for x in b[1:-1]]
        r = np.array([low, *inner, high])
        if b[0] == b[1]:
            r[0] = r[1] = b[0]  # a first class of only the smallest value keeps it exactly
        steps = np.diff(r[1:]) if b[0] == b[1] else np.diff(r)
        if np.any(steps <= 0):
            continue
        if v is not None:
            after = np.bincount(class_index(v, r), minlength=r.size - 1)
            if np.any((after == 0) & (before > 0)):
                continue
        return r
    return b.copy()


def _round_significant(x, figures, how):
    """``x`` rounded (``how``: np.floor, np.ceil or np.round) to ``figures`` significant figures."""
    if x == 0 or not np.isfinite(x):
        return float(x)
    exponent = math.floor(math.log10(abs(x))) - figures + 1
    step = 10.0**exponent
    out = float(how(x / step)) * step
    return round(out, -exponent) if exponent < 0 else float(round(out))


def map_classes(values, scheme="quantiles", classes=5):
    """Class limits as the maps draw them: :func:`class_breaks`, then :func:`round_breaks`.

    Never more classes than distinct values; a quantile class that holds no value (limits
    interpolated between tied values) is merged into the class above; no class that held a
    value is left empty by the rounding. The QGIS style should use these limits too, so the map and the layer agree.
    """
    breaks = class_breaks(values, scheme, classes)
    if scheme != "equal_interval" and breaks.size > 2:
        # Quantiles interpolated between tied values can leave a class with no value: merge it
        # into the class above (equal intervals keep empty classes by their definition).
        counts = np.bincount(class_index(_finite(values), breaks), minlength=breaks.size - 1)
        keep = np.concatenate([[True], counts > 0])
        keep[-1] = True
        if breaks[0] == breaks[1]:
            keep[1] = True
        breaks = breaks[keep]
    return round_breaks(breaks, values)


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


# Fisher's algorithm by hand, measured against mapclassify.FisherJenks 2.10 (issue 17; ``python
# benchmarks/libraries.py``; without numba, which would speed mapclassify up: not measured):
# 50 values 1.6 ms against 3.0 ms, 500 values 19 ms against 273-280 ms, 3,000 values
# 0.21-0.28 s against 9.6-10.3 s. The limits are equal on 50 and 500 values; on 3,000 one limit
# differs and ours has the smaller within-class sum of squares, the quantity both minimise
# (tests/test_maps.py checks equality on smaller samples). Kept because it measures better, and
# QGIS's Python on Debian 12 has no mapclassify.
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


# --------------------------------------------------------------------------- scale bar, north arrow


def _lonlat_transformers(crs):
    from pyproj import CRS, Transformer

    crs = CRS.from_user_input(crs)
    geographic = CRS.from_epsg(4326)
    to_lonlat = Transformer.from_crs(crs, geographic, always_xy=True)
    from_lonlat = Transformer.from_crs(geographic, crs, always_xy=True)
    return crs, to_lonlat, from_lonlat


def ground_scale(crs, bounds):
    """Metres on the ground per map unit along x and along y, at the centre of ``bounds``.

    Measured, not assumed: two points a thousandth of the map's width (height) apart about
    the centre are taken to longitude/latitude with pyproj and their geodesic distance on
    the WGS 84 ellipsoid is computed with :class:`pyproj.Geod` (Karney 2013, J. Geodesy 87,
    43–55). This holds for any CRS: in a geographic CRS a degree of longitude shrinks with
    the cosine of latitude; in a projected CRS the projection's own scale factor counts.

    Returns
    -------
    (float, float)
        Metres per map unit along x (east–west on the map) and along y.
    """
    from pyproj import Geod

    crs, to_lonlat, _ = _lonlat_transformers(crs)
    xmin, ymin, xmax, ymax = (float(b) for b in bounds)
    xc, yc = (xmin + xmax) / 2, (ymin + ymax) / 2
    geod = Geod(ellps="WGS84")
    out = []
    for dx, dy in (((xmax - xmin) / 1000 or 1e-6, 0.0), (0.0, (ymax - ymin) / 1000 or 1e-6)):
        lon, lat = to_lonlat.transform([xc - dx / 2, xc + dx / 2], [yc - dy / 2, yc + dy / 2])
        metres = geod.inv(lon[0], lat[0], lon[1], lat[1])[2]
        out.append(metres / (dx + dy))
    return out[0], out[1]


def map_aspect(crs, bounds):
    """The y/x drawing ratio that shows the centre of the map without stretch.

    1 for a projected CRS (its units are alike on both axes); in a geographic CRS the
    ratio of the ground length of a degree of latitude to one of longitude at the centre
    (about 1/cos(latitude)), as measured by :func:`ground_scale`.
    """
    from pyproj import CRS

    if not CRS.from_user_input(crs).is_geographic:
        return 1.0
    x_metres, y_metres = ground_scale(crs, bounds)
    return y_metres / x_metres


def scale_bar(crs, bounds, fraction=0.25):
    """A scale bar for a map of ``bounds``: its length in map units and on the ground.

    The ground length is the largest 1, 2 or 5 × 10^n metres (common practice for scale
    bars) not above ``fraction`` of the map's width, measured at the centre of the map by
    :func:`ground_scale`. In a geographic CRS the bar is true only near the centre's
    latitude; the map says so.

    Returns
    -------
    (float, float, str)
        Length in map units, length in metres, and its label (``"20 km"``, ``"500 m"``).
    """
    x_metres, _ = ground_scale(crs, bounds)
    width_m = (float(bounds[2]) - float(bounds[0])) * x_metres
    if not np.isfinite(width_m) or width_m <= 0:
        raise ValueError(f"the map has no width to scale (bounds {list(bounds)})")
    target = width_m * fraction
    power = 10.0 ** math.floor(math.log10(target))
    metres = max(m * power for m in (1, 2, 5) if m * power <= target)
    label = f"{metres / 1000:g} km" if metres >= 1000 else f"{metres:g} m"
    return metres / x_metres, metres, label


def north_angle(crs, bounds):
    """Direction of true north at the map's centre, in degrees clockwise from the map's up.

    The centre is taken to longitude/latitude and a point 0.01° of latitude north of it is
    projected back into ``crs`` (pyproj); the angle of the line between them on the drawn map
    (with the aspect of :func:`map_aspect`) is the direction of the north arrow. In a
    projected CRS it is minus the meridian convergence there; in a geographic CRS it is 0.
    """
    crs, to_lonlat, from_lonlat = _lonlat_transformers(crs)
    xmin, ymin, xmax, ymax = (float(b) for b in bounds)
    xc, yc = (xmin + xmax) / 2, (ymin + ymax) / 2
    lon, lat = to_lonlat.transform(xc, yc)
    step = 0.01 if lat < 89.98 else -0.01  # at the pole, look from just south of it
    x2, y2 = from_lonlat.transform(lon, lat + step)
    dx, dy = (x2 - xc) * np.sign(step), (y2 - yc) * np.sign(step)
    return math.degrees(math.atan2(dx, dy * map_aspect(crs, bounds)))


def _draw_furniture(ax, crs, bounds):
    """Scale bar (lower left) and north arrow (lower right); a note of what they mean."""
    from matplotlib import patheffects

    length, _, label = scale_bar(crs, bounds)
    x0, y0 = bounds[0], bounds[1]
    width, height = bounds[2] - bounds[0], bounds[3] - bounds[1]
    bx, by = x0 + 0.03 * width, y0 + 0.04 * height
    halo = [patheffects.withStroke(linewidth=3, foreground="white")]
    ax.plot(
        [bx, bx + length],
        [by, by],
        color="black",
        linewidth=3,
        solid_capstyle="butt",
        zorder=7,
        gid="scale-bar",
        path_effects=[patheffects.withStroke(linewidth=5, foreground="white")],
    )
    for x in (bx, bx + length):
        ax.plot([x, x], [by, by + 0.015 * height], color="black", linewidth=1, zorder=7)
    ax.text(
        bx + length / 2,
        by + 0.02 * height,
        label,
        ha="center",
        va="bottom",
        fontsize=8,
        zorder=7,
        gid="scale-bar-label",
        path_effects=halo,
    )
    angle = math.radians(north_angle(crs, bounds))
    size = 28.0  # points
    tail = (-size * math.sin(angle), -size * math.cos(angle))
    ax.annotate(
        "",
        xy=(0.95, 0.16),
        xycoords="axes fraction",
        xytext=tail,
        textcoords="offset points",
        arrowprops={"arrowstyle": "-|>", "color": "black", "linewidth": 1.5, "mutation_scale": 14},
        zorder=7,
        gid="north-arrow",
    )
    ax.annotate(
        "N",
        xy=(0.95, 0.16),
        xycoords="axes fraction",
        xytext=(6 * math.sin(angle), 6 * math.cos(angle)),
        textcoords="offset points",
        ha="center",
        va="center",
        fontsize=9,
        fontweight="bold",
        zorder=7,
        path_effects=halo,
    )


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
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

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
    for reason, hatch in NO_ESTIMATE_REASONS.items():
        pick = (reasons == reason) & filled
        if hatch and pick.any():
            _hatched(ax, _visible(layer, pick), hatch, "#707070")
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
    handles = [
        Patch(facecolor=palette[i], edgecolor=EDGE_COLOUR, label=label)
        for i, label in enumerate(class_labels(breaks) if breaks.size >= 2 else [])
    ]
    for reason, hatch in NO_ESTIMATE_REASONS.items():
        if np.any((reasons == reason) & filled):
            handles.append(
                Patch(facecolor=NO_ESTIMATE_COLOUR, edgecolor="#707070", hatch=hatch, label=reason)
            )
    if mode != "plain":
        handles.append(
            Patch(
                facecolor="none",
                edgecolor="black",
                linewidth=2.2,
                label="basin with gauged\nbasins inside it",
            )
        )
    if points is not None and len(points):
        handles.append(
            Line2D([], [], color=GAUGE_COLOUR, marker="^", linestyle="none", label="gauge")
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
    notes.append(
        f"Recession-curve displacement (Rorabaugh 1964). {classes_note} CRS: {crs_name}."
    )
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

    handles = [
        Patch(facecolor=palette[i], edgecolor=EDGE_COLOUR, label=label)
        for i, label in enumerate(class_labels(breaks) if breaks.size >= 2 else [])
    ]
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
    if np.any(outer):
        handles.append(
            Patch(
                facecolor="none",
                edgecolor="black",
                linewidth=1.2,
                label="basin with gauged basins inside it\n(its colour shows only outside them)",
            )
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
