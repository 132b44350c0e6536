"""Map classes and the map figures.

Sources: Fisher, W.D. (1958) J. Am. Stat. Assoc. 53, 789–798 (the exact least-squares
grouping behind natural breaks), checked by brute force over every way to cut small samples;
the ``mapclassify`` package (PyPI; Rey, Arribas-Bel & Wolf) as an independent reference for
quantiles, equal intervals and Fisher–Jenks when it is importable; hand-worked examples always.
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
    recharge_map,
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
    figure = recharge_map(catchments, gauges, scheme=scheme, classes=2)
    ax = figure.axes[0]
    legend = ax.get_legend()
    texts = [t.get_text() for t in legend.get_texts()]
    assert legend.get_title().get_text() == "Mean annual recharge\n(mm/yr)"
    assert texts[-1] == "no estimate"
    assert len(texts) == 3  # two classes and the grey
    assert NO_ESTIMATE_COLOUR in _facecolours(ax)
    assert {t.get_text() for t in ax.texts} >= {"A1", "B2", "C3"}


def test_recharge_map_draws_nested_catchments_on_top(squares):
    catchments, _, _ = squares
    figure = recharge_map(catchments.iloc[[1, 0, 2, 3]], scheme="equal_interval", classes=2)
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
    assert {t.get_text() for t in figure.axes[0].texts} >= {"A1", "B2", "C3"}
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
    assert "incomplete year" in labels and "no estimate" in labels and "gauge" in labels
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
