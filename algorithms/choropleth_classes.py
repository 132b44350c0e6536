"""Map classes: the class limits, their colours and their legend labels (no drawing).

The class limits come from :func:`class_breaks` (quantiles, equal intervals or natural breaks),
computed here without any classification package, then rounded for the legend by
:func:`round_breaks`; :func:`map_classes` does both as the maps draw them. The PNG maps
(:mod:`maps`, :mod:`trend_map`), the report and the QGIS style (:mod:`layer_style`) all use these
classes, colours (:func:`class_colours`) and labels (:func:`class_labels`, :func:`legend_title`),
so they agree. Every name here stays importable from :mod:`maps` too.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .errors import InputError

#: Colours for up to five recharge classes, light (little recharge) to dark blue (much):
#: ColorBrewer "Blues" (Brewer, colorbrewer2.org), six classes without the near-white first,
#: so the lowest class still reads as a colour on white paper.
CLASS_COLOURS = ["#c6dbef", "#9ecae1", "#6baed6", "#3182bd", "#08519c"]

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


# --------------------------------------------------------------------------- colours and labels


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
