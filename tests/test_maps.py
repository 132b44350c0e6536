"""Map classes and the map figures.

Sources: Fisher, W.D. (1958) J. Am. Stat. Assoc. 53, 789–798 (the exact least-squares
grouping behind natural breaks), checked by brute force over every way to cut small samples;
the ``mapclassify`` package (PyPI; Rey, Arribas-Bel & Wolf) as an independent reference for
quantiles, equal intervals and Fisher–Jenks when it is importable; hand-worked examples always.
Scale bar and north arrow: pyproj's ``Proj.get_factors`` (PROJ's scale factors and meridian
convergence, a separate code path from the geodesics the map uses) and the closed-form radii
of curvature of the ellipsoid (Snyder 1987, *Map Projections — A Working Manual*, USGS PP 1395,
eqs. 4-18 and 4-20; from memory). Hatch contrast: W3C WCAG 2.1 relative luminance and
contrast ratio, 3:1 the minimum for graphical objects (success criterion 1.4.11).
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

from recharge_atlas.algorithms.errors import InputError
from recharge_atlas.algorithms.maps import (
    CLASS_COLOURS,
    NATURAL_BREAKS_MAX_VALUES,
    NO_ESTIMATE_COLOUR,
    SCHEMES,
    class_breaks,
    class_index,
    class_labels,
    contrast_ratio,
    map_aspect,
    map_classes,
    north_angle,
    recharge_map,
    round_breaks,
    scale_bar,
    within_class_squares,
    year_maps,
)

# --------------------------------------------------------------------------- hand examples


def test_natural_breaks_hand_example():
    # Three obvious groups: the breaks fall at the top of each group (worked by hand).
    values = [1, 2, 3, 10, 11, 12, 20, 21, 22]
    assert class_breaks(values, "natural_breaks", 3).tolist() == [1, 3, 12, 22]


def test_equal_interval_hand_example():
    # Range 0–100 in 4 equal parts of 25.
    assert class_breaks([0, 7, 50, 100], "equal_interval", 4).tolist() == [0, 25, 50, 75, 100]


def test_quantiles_hand_example():
    # 1..8 in quartiles with linear interpolation: 2.75, 4.5, 6.25, 8 (numpy's default rule).
    assert class_breaks(np.arange(1, 9), "quantiles", 4).tolist() == [1, 2.75, 4.5, 6.25, 8]


def test_class_index_upper_limits_are_inclusive():
    breaks = [1, 3, 12, 22]
    got = class_index([1, 3, 3.5, 12, 22, np.nan, 40, -5], breaks).tolist()
    assert got == [0, 0, 1, 1, 2, -1, 2, 0]


def _brute_force_best(values, k):
    """Least within-class sum of squares over every way to cut the sorted values (Fisher 1958)."""
    v = np.sort(np.asarray(values, float))
    best = np.inf
    for cuts in itertools.combinations(range(1, v.size), k - 1):
        groups = np.split(v, cuts)
        best = min(best, sum(float(((g - g.mean()) ** 2).sum()) for g in groups))
    return best


@pytest.mark.parametrize("seed", range(8))
@pytest.mark.parametrize("k", [2, 3, 4])
def test_natural_breaks_reach_the_least_squares_optimum(seed, k):
    values = np.random.default_rng(seed).gamma(2.0, 40.0, size=11).round(1)
    breaks = class_breaks(values, "natural_breaks", k)
    assert breaks.size == k + 1
    assert within_class_squares(values, breaks) == pytest.approx(
        _brute_force_best(values, k), rel=1e-9, abs=1e-9
    )


def test_natural_breaks_keep_equal_values_together():
    values = [5, 5, 5, 5, 6, 6, 9, 9, 9, 30]
    breaks = class_breaks(values, "natural_breaks", 3)
    idx = class_index(values, breaks)
    for v in set(values):
        assert len(set(idx[np.asarray(values) == v])) == 1


def test_natural_breaks_sample_large_inputs_deterministically():
    values = np.random.default_rng(5).lognormal(5, 0.5, size=NATURAL_BREAKS_MAX_VALUES + 2000)
    first = class_breaks(values, "natural_breaks", 5)
    assert np.array_equal(first, class_breaks(values[::-1], "natural_breaks", 5))
    assert first[0] == values.min() and first[-1] == values.max()
    # Close to the optimum of the full data: no worse than quantile classes.
    assert within_class_squares(values, first) < within_class_squares(
        values, class_breaks(values, "quantiles", 5)
    )


# --------------------------------------------------------------------------- odd inputs


@pytest.mark.parametrize("scheme", SCHEMES)
def test_nan_none_and_infinite_values_are_left_out(scheme):
    values = [np.nan, 10, None, 20, np.inf, 30, 40, -np.inf, 50]
    assert class_breaks(values, scheme, 2)[[0, -1]].tolist() == [10, 50]
    series = pd.Series([10.0, None, 20.0, 30.0], dtype="Float64")  # pandas nullable floats
    assert class_breaks(series, scheme, 2)[[0, -1]].tolist() == [10, 30]


@pytest.mark.parametrize("scheme", SCHEMES)
def test_all_equal_and_empty(scheme):
    assert class_breaks([7.0, 7.0, np.nan], scheme, 5).tolist() == [7.0, 7.0]
    assert class_breaks([np.nan, None], scheme, 5).size == 0
    assert class_breaks([], scheme, 5).size == 0
    assert class_index([7.0, np.nan], [7.0, 7.0]).tolist() == [0, -1]


@pytest.mark.parametrize("scheme", SCHEMES)
def test_few_distinct_values_give_fewer_classes(scheme):
    breaks = class_breaks([1, 1, 1, 2, 2, 3], scheme, 5)
    assert 2 <= breaks.size - 1 <= 3
    assert np.all(np.diff(breaks[1:]) > 0)


def test_quantiles_with_many_ties_merge_classes():
    breaks = class_breaks([0] * 8 + [1, 2], "quantiles", 5)
    # The first class holds only the zeros (limits 0 – 0); no limit is repeated above it.
    assert breaks[0] == breaks[1] == 0
    assert np.all(np.diff(breaks[1:]) > 0)
    assert class_labels(breaks)[0] == "0"


@pytest.mark.parametrize(
    "scheme, classes, match",
    [
        ("jenks", 5, "map classes were 'jenks'"),
        ("quantiles", 0, "number of map classes"),
        ("quantiles", 2.5, "number of map classes"),
        ("quantiles", "five", "number of map classes"),
        ("quantiles", 99, "number of map classes"),
    ],
)
def test_bad_scheme_or_count_is_a_short_input_error(scheme, classes, match):
    with pytest.raises(InputError, match=match):
        class_breaks([1, 2, 3], scheme, classes)


def test_labels_stay_distinct_when_limits_are_close():
    labels = class_labels([0.101, 0.102, 0.2])
    assert len(set(labels)) == 2 and labels[0] != "0.10 – 0.10"


# --------------------------------------------------------------------------- mapclassify reference


@pytest.mark.filterwarnings("ignore:Numba not installed")
def test_same_limits_as_mapclassify():
    mapclassify = pytest.importorskip("mapclassify")  # PyPI; not a dependency of the core
    for seed in range(30):
        rng = np.random.default_rng(seed)
        values = rng.gamma(2.0, 60.0, size=int(rng.integers(12, 150))).round(2)
        k = int(rng.integers(2, 8))
        reference = {
            "quantiles": mapclassify.Quantiles(values, k=k).bins,
            "equal_interval": mapclassify.EqualInterval(values, k=k).bins,
            "natural_breaks": mapclassify.FisherJenks(values, k=k).bins,
        }
        for scheme, bins in reference.items():
            mine = class_breaks(values, scheme, k)
            assert mine[0] == values.min()
            np.testing.assert_allclose(mine[1:], bins, rtol=1e-9, err_msg=f"{scheme}, seed {seed}")


# --------------------------------------------------------------------------- figures


@pytest.fixture(scope="module")
def squares():
    """Three squares, one nested inside another, with gauges at their corners."""
    gpd = pytest.importorskip("geopandas")
    from shapely.geometry import Point, box

    catchments = gpd.GeoDataFrame(
        {
            "gauge_id": ["A1", "B2", "C3", None],
            "recharge_mm_per_year": [120.0, 250.0, np.nan, np.nan],
        },
        geometry=[box(0, 0, 10, 10), box(2, 2, 5, 5), box(12, 0, 20, 8), box(22, 0, 25, 3)],
        crs="EPSG:32630",
    )
    gauges = gpd.GeoDataFrame(
        {"gauge_id": ["A1", "B2", "C3"]},
        geometry=[Point(10, 0), Point(5, 2), Point(20, 0)],
        crs="EPSG:32630",
    )
    years = np.arange(2000, 2025)
    rows = []
    for gid, scale in (("A1", 1.0), ("B2", 1.6), ("C3", 0.7)):
        for y in years:
            rows.append(
                {
                    "gauge_id": gid,
                    "water_year": y,
                    "recharge_mm": scale * (100 + 5 * (y - 2000)),
                    "complete": not (gid == "C3" and y < 2003),
                }
            )
    return catchments, gauges, pd.DataFrame(rows)


def _facecolours(ax):
    from matplotlib.colors import to_hex

    return {to_hex(c) for coll in ax.collections for c in coll.get_facecolor() if c[3] > 0}


@pytest.mark.parametrize("scheme", SCHEMES)
def test_recharge_map_has_legend_with_units_and_no_estimate(squares, scheme):
    catchments, gauges, _ = squares
    apart = catchments.iloc[[0, 2, 3]]  # no nesting: every basin filled
    figure = recharge_map(apart, gauges, scheme=scheme, classes=2)
    ax = figure.axes[0]
    legend = ax.get_legend()
    texts = [t.get_text() for t in legend.get_texts()]
    assert legend.get_title().get_text() == "Mean annual recharge\n(mm/yr)"
    # One value, so one class (never more classes than values), then the two greys.
    assert texts == ["120", "no gauge", "no estimate", "gauge"]
    assert NO_ESTIMATE_COLOUR in _facecolours(ax)
    assert {t.get_text() for t in ax.texts} >= {"A1", "C3"}


def test_recharge_map_draws_nested_catchments_on_top(nested):
    figure = recharge_map(
        nested.iloc[[1, 0, 2, 3]],
        field="incremental_recharge_mm_per_year",
        scheme="equal_interval",
        classes=2,
    )
    collection = figure.axes[0].collections[0]
    from matplotlib.colors import to_hex

    colours = [to_hex(c) for c in collection.get_facecolor()]
    # Largest first (A1 then C3 …) and the small nested B2 last of the two with estimates.
    assert colours.index(to_hex("#08519c")) > colours.index(to_hex("#c6dbef"))


def test_recharge_map_any_field_and_units(squares):
    catchments, _, _ = squares
    catchments = catchments.assign(baseflow_index=[0.61, 0.72, 0.55, np.nan])
    figure = recharge_map(catchments, field="baseflow_index", units="", classes=3)
    assert figure.axes[0].get_legend().get_title().get_text() == "Baseflow index"
    with pytest.raises(InputError, match="no field 'incremental_recharge_mm_per_year'"):
        recharge_map(catchments, field="incremental_recharge_mm_per_year")
    with pytest.raises(InputError, match="no polygons to map"):
        recharge_map(catchments.iloc[:0])


def test_recharge_map_in_a_geographic_crs_and_gauges_without_geometry(squares):
    catchments, gauges, _ = squares
    figure = recharge_map(catchments.to_crs("EPSG:4326"), gauges)  # gauges reprojected
    assert {t.get_text().split("\n")[0] for t in figure.axes[0].texts} >= {"A1", "B2", "C3"}
    table_only = pd.DataFrame(gauges.drop(columns="geometry"))
    figure = recharge_map(catchments, table_only)  # no points to draw: drawn without them
    assert not any(t.get_text() == "A1" for t in figure.axes[0].texts)


def test_year_maps_one_axis_per_year_and_one_legend(squares):
    catchments, gauges, annual = squares
    figure = year_maps(catchments, annual, gauges, scheme="natural_breaks")
    years = sorted(annual["water_year"].unique())
    assert len(figure.axes) == len(years) == 25
    assert [ax.get_title() for ax in figure.axes] == [str(y) for y in years]
    assert len(figure.legends) == 1
    assert all(ax.get_legend() is None for ax in figure.axes)
    labels = [t.get_text() for t in figure.legends[0].get_texts()]
    assert "incomplete year" in labels and "no gauge" in labels and "gauge" in labels
    assert figure.legends[0].get_title().get_text() == "Recharge (mm/yr)"
    # Incomplete years are hatched: C3 was incomplete in 2000–2002 only.
    hatched = [ax.get_title() for ax in figure.axes if any(c.get_hatch() for c in ax.collections)]
    assert hatched == ["2000", "2001", "2002"]


def test_year_maps_share_one_set_of_classes(squares):
    catchments, _, annual = squares
    figure = year_maps(catchments, annual, classes=3)
    first, last = _facecolours(figure.axes[0]), _facecolours(figure.axes[-1])
    # The first year is low everywhere and the last high: different classes, one palette.
    assert first != last
    allowed = set(CLASS_COLOURS) | {NO_ESTIMATE_COLOUR}
    for ax in figure.axes:
        assert _facecolours(ax) <= allowed


def test_year_maps_chosen_years_and_bad_tables(squares):
    catchments, _, annual = squares
    figure = year_maps(catchments, annual, years=[2010, 2011])
    assert [ax.get_title() for ax in figure.axes] == ["2010", "2011"]
    with pytest.raises(InputError, match="no field 'water_year'"):
        year_maps(catchments, annual.drop(columns="water_year"))
    with pytest.raises(InputError, match="no water years"):
        year_maps(catchments, annual.iloc[:0])


# --------------------------------------------------------------------------- a map that tells the truth


@pytest.fixture(scope="module")
def nested(squares):
    """The squares with what a run writes: the area between gauges and the quality."""
    catchments, _, _ = squares
    return catchments.assign(
        incremental_recharge_mm_per_year=[100.0, 250.0, np.nan, np.nan],
        quality=[
            "ok",
            "ok",
            "no complete water year: mean annual recharge not computed",
            "no gauge linked to this catchment",
        ],
    )


def _note(figure):
    return " ".join(t.get_text() for t in figure.axes[0].texts if t.get_gid() == "map-note")


def test_standalone_map_colours_the_area_between_gauges_where_basins_nest(nested, squares):
    _, gauges, _ = squares
    figure = recharge_map(nested, gauges, scheme="equal_interval", classes=2)
    ax = figure.axes[0]
    # The colours are the area-between-gauges values (100 and 250), not A1's whole 120 ...
    assert ax.get_legend().get_title().get_text().startswith("Mean annual recharge of\nthe area")
    assert class_labels(map_classes([100.0, 250.0], "equal_interval", 2))[0].startswith("100")
    assert [t.get_text() for t in ax.get_legend().get_texts()][0].startswith("100")
    # ... and the picture itself says what they mean and which basins contain others.
    assert "recharge of the area between gauges" in _note(figure)
    assert "basin with gauged\nbasins inside it" in [
        t.get_text() for t in ax.get_legend().get_texts()
    ]


def test_outline_mode_keeps_whole_basin_values_and_writes_them(nested, squares):
    _, gauges, _ = squares
    figure = recharge_map(nested, gauges, nested="outline")
    ax = figure.axes[0]
    fills = ax.collections[0].get_facecolor()  # largest first: A1 contains B2
    assert fills[0][3] == 0  # the containing basin is an outline only
    assert "A1\nwhole basin 120 mm/yr" in {t.get_text() for t in ax.texts}
    assert "drawn as thick outlines only" in _note(figure)
    with pytest.raises(InputError, match="nested was 'hidden'"):
        recharge_map(nested, nested="hidden")


def test_grey_basins_say_why(nested, squares):
    _, gauges, _ = squares
    ax = recharge_map(nested, gauges).axes[0]
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "no gauge" in legend and "flagged (see quality)" in legend
    assert {"no gauge", "flagged"} <= {t.get_text() for t in ax.texts}


def test_ground_scale_matches_pyproj_scale_factors_in_a_projected_crs():
    from pyproj import Proj, Transformer

    # UTM zone 30N 3 degrees east of its central meridian (scale factor well above 0.9996).
    x, y = Transformer.from_crs(4326, 32630, always_xy=True).transform(0.0, 55.0)
    bounds = (x - 50_000, y - 40_000, x + 50_000, y + 40_000)
    factors = Proj("EPSG:32630").get_factors(0.0, 55.0)  # PROJ's scale factors (pyproj)
    length, metres, label = scale_bar("EPSG:32630", bounds)
    assert metres == 20_000 and label == "20 km"  # 1-2-5 rule below a quarter of 100 km
    assert length * factors.parallel_scale == pytest.approx(metres, rel=2e-4)
    # True north is the meridian convergence away from grid north (pyproj's sign: minus).
    assert north_angle("EPSG:32630", bounds) == pytest.approx(
        -factors.meridian_convergence, abs=0.01
    )
    assert abs(north_angle("EPSG:32630", bounds)) > 2  # not a map whose north is simply up
    assert map_aspect("EPSG:32630", bounds) == 1.0


@pytest.mark.parametrize("latitude", [0.0, 35.0, 60.0, -70.0])
def test_scale_bar_in_a_geographic_crs_depends_on_latitude(latitude):
    import math

    bounds = (10.0, latitude - 0.5, 12.0, latitude + 0.5)
    # Radii of curvature of the WGS 84 ellipsoid (Snyder 1987, eqs. 4-18, 4-20).
    a, f = 6378137.0, 1 / 298.257223563
    e2 = f * (2 - f)
    s2 = math.sin(math.radians(latitude)) ** 2
    n = a / math.sqrt(1 - e2 * s2)
    m = a * (1 - e2) / (1 - e2 * s2) ** 1.5
    per_degree_east = math.radians(1) * n * math.cos(math.radians(latitude))
    length, metres, _ = scale_bar("EPSG:4326", bounds)
    assert length * per_degree_east == pytest.approx(metres, rel=1e-4)
    assert map_aspect("EPSG:4326", bounds) == pytest.approx(
        m / (n * math.cos(math.radians(latitude))), rel=1e-4
    )
    assert north_angle("EPSG:4326", bounds) == pytest.approx(0.0, abs=1e-9)


def test_the_map_draws_the_scale_bar_and_north_arrow_it_computed(nested, squares):
    import math

    _, gauges, _ = squares
    for layer in (nested, nested.to_crs("EPSG:4326")):
        ax = recharge_map(layer, gauges).axes[0]
        bar = [line for line in ax.lines if line.get_gid() == "scale-bar"]
        assert len(bar) == 1
        bounds = (*ax.get_xlim(), *ax.get_ylim())
        bounds = (bounds[0], bounds[2], bounds[1], bounds[3])
        xs = bar[0].get_xdata()
        assert xs[1] - xs[0] == pytest.approx(scale_bar(layer.crs, bounds)[0])
        assert ax.get_aspect() == pytest.approx(map_aspect(layer.crs, bounds))
        arrow = [t for t in ax.texts if t.get_gid() == "north-arrow"][0]
        dx, dy = arrow.xyann  # the tail, in points from the head
        assert math.degrees(math.atan2(-dx, -dy)) == pytest.approx(north_angle(layer.crs, bounds))
        label = [t.get_text() for t in ax.texts if t.get_gid() == "scale-bar-label"]
        assert label == [scale_bar(layer.crs, bounds)[2]]


def test_a_map_without_crs_says_it_has_no_scale_bar(nested):
    import geopandas as gpd

    figure = recharge_map(
        gpd.GeoDataFrame(nested.drop(columns="geometry"), geometry=list(nested.geometry))
    )
    assert "no CRS" in _note(figure)
    assert not [line for line in figure.axes[0].lines if line.get_gid() == "scale-bar"]


def test_class_limits_are_rounded_to_two_significant_figures():
    # Our own rule (2 significant figures, more only when rounding would merge or empty classes).
    assert round_breaks([163.54, 180.2, 196.4, 213.0, 233.4, 260.1]).tolist() == [
        160,
        180,
        200,
        210,
        230,
        270,
    ]
    assert round_breaks([0.0123, 0.5, 1.77]).tolist() == [0.012, 0.5, 1.8]
    # Close values need more figures to stay apart; the lowest rounds down, the highest up.
    assert round_breaks([1000.1, 1000.2, 1000.3]).tolist() == [1000.1, 1000.2, 1000.3]
    assert round_breaks([0, 0, 1, 2]).tolist() == [0, 0, 1, 2]


@pytest.mark.parametrize("scheme", SCHEMES)
@pytest.mark.parametrize("seed", range(25))
def test_never_more_classes_than_distinct_values_and_none_emptied(scheme, seed):
    rng = np.random.default_rng(seed)
    values = rng.choice(rng.gamma(2.0, 80.0, size=int(rng.integers(1, 8))).round(1), size=12)
    breaks = map_classes(values, scheme, int(rng.integers(1, 9)))
    assert breaks.size - 1 <= np.unique(values).size
    assert breaks[0] <= values.min() and breaks[-1] >= values.max()
    counts = np.bincount(class_index(values, breaks), minlength=breaks.size - 1)
    raw = class_breaks(values, scheme, int(rng.integers(1, 9)))
    if scheme != "equal_interval":  # equal intervals may be empty by their definition
        assert np.all(counts > 0), (values, breaks)
    assert raw.size - 1 <= np.unique(values).size


def test_map_legend_shows_the_rounded_limits(squares):
    catchments, _, _ = squares
    apart = catchments.iloc[[0, 2]].assign(recharge_mm_per_year=[123.456, 345.678])
    labels = [t.get_text() for t in recharge_map(apart, classes=2).axes[0].get_legend().get_texts()]
    assert labels == ["120 – 230", "230 – 350"]  # 2 significant figures, not 123 – 235


def _hatch_of(collection):
    from matplotlib.colors import to_hex

    colour = (
        collection.get_hatchcolor()
        if hasattr(collection, "get_hatchcolor")
        else collection._hatch_color
    )
    colour = np.asarray(colour, dtype=float).reshape(-1, 4)[0]
    return to_hex(colour)


def test_year_map_hatching_shows_on_dark_and_light_fills(squares):
    catchments, _, _ = squares
    apart = catchments.iloc[[0, 2]]  # A1 and C3, side by side
    annual = pd.DataFrame(
        {
            "gauge_id": ["A1", "C3", "A1", "C3"],
            "water_year": [2001, 2001, 2002, 2002],
            "recharge_mm": [400.0, 50.0, 390.0, 60.0],
            "complete": [False, False, True, True],  # 2001 incomplete: one dark, one light fill
        }
    )
    figure = year_maps(apart, annual, classes=2)
    ax = figure.axes[0]
    fills = {tuple(c) for c in ax.collections[0].get_facecolor()}
    from matplotlib.colors import to_hex

    fills = {to_hex(c) for c in fills}
    assert fills == {CLASS_COLOURS[0], CLASS_COLOURS[-1]}
    hatches = [c for c in ax.collections if c.get_hatch() == "////"]
    assert len(hatches) == 2
    hatch_colours = {_hatch_of(c) for c in hatches}
    # Each fill has a hatch colour that stands out from it by 3:1 at least (WCAG 2.1, 1.4.11).
    for fill in fills:
        assert max(contrast_ratio(fill, h) for h in hatch_colours) >= 3
    assert len(hatch_colours) == 2


def test_a_subbasin_map_says_its_colours_are_areas_between_gauges(squares):
    catchments, _, _ = squares
    tiles = catchments.iloc[[0, 2]].assign(estimate_source=["gauge A1", "gauge C3"])
    note = _note(recharge_map(tiles))
    assert "of each subbasin" in note and "whole basin" not in note
