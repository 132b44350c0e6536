"""The map of recharge trends (issue 15, item 5): diverging classes symmetric about zero, hatching
where the trend is not clear, grey basins with their reason, nested basins as outlines."""

import numpy as np
import pytest

gpd = pytest.importorskip("geopandas")

from shapely.geometry import Point, box  # noqa: E402

from recharge_atlas.algorithms.errors import InputError  # noqa: E402
from recharge_atlas.algorithms.trend_map import (  # noqa: E402
    NO_TREND_REASONS,
    TREND_COLOURS,
    trend_breaks,
    trend_map,
)


def test_breaks_are_symmetric_about_zero_and_rounded():
    np.testing.assert_allclose(
        trend_breaks([-4.1, 12.34, np.nan, 0.5]), [-13, -26 / 3, -13 / 3, 0, 13 / 3, 26 / 3, 13]
    )
    np.testing.assert_allclose(trend_breaks([0.0, 0.0]), [0.0, 0.0])
    assert trend_breaks([np.nan]).size == 0


@pytest.fixture
def region():
    catchments = gpd.GeoDataFrame(
        {
            "gauge_id": ["R1", "F2", "U3", "S4", None, "W6"],
            "recharge_trend_mm_per_decade": [30.0, -20.0, 2.0, np.nan, np.nan, 25.0],
            "recharge_trend": ["rising", "falling", "no clear trend", "", "", "rising"],
            "complete_years": [25, 25, 25, 6, 0, 30],
            "quality": ["ok", "ok", "ok", "only 6 complete water years", "no gauge", "ok"],
        },
        geometry=[
            box(0, 0, 10, 10),
            box(12, 0, 20, 8),
            box(22, 0, 30, 8),
            box(32, 0, 40, 8),
            box(42, 0, 45, 3),
            box(-20, -20, 50, 20),  # contains all the others
        ],
        crs="EPSG:32630",
    )
    gauges = gpd.GeoDataFrame(
        {"gauge_id": ["R1", "F2", "U3", "S4", "W6"]},
        geometry=[Point(10, 0), Point(20, 0), Point(30, 0), Point(40, 0), Point(50, -20)],
        crs="EPSG:32630",
    )
    return catchments, gauges


def _legend(ax):
    return [t.get_text() for t in ax.get_legend().get_texts()]


def test_rising_is_blue_green_falling_brown_and_unclear_hatched(region):
    from matplotlib.colors import to_hex

    catchments, gauges = region
    ax = trend_map(catchments, gauges).axes[0]
    fills = [to_hex(c) if c[3] > 0 else None for c in ax.collections[0].get_facecolor()]
    # drawn largest first: W6 (outline only), then R1, F2, U3, S4, the gaugeless one
    assert fills[0] is None
    assert fills[1] == TREND_COLOURS[-1]  # +30: the strongest rise
    assert fills[2] in TREND_COLOURS[:2]  # −20: brown
    assert fills[3] in TREND_COLOURS[3:4]  # +2: pale blue-green
    legend = _legend(ax)
    assert legend[:6] == ["-30 – -20", "-20 – -10", "-10 – 0", "0 – 10", "10 – 20", "20 – 30"]
    assert "no clear trend\n(p ≥ 0.05)" in legend
    assert "fewer than 10 complete years" in legend and "no gauge" in legend
    assert "basin with gauged\nbasins inside it" in legend
    assert "W6\nwhole basin +25.0 mm/yr per decade (rising)" in {t.get_text() for t in ax.texts}
    assert any(c.get_hatch() == "///" for c in ax.collections)
    assert set(NO_TREND_REASONS) >= {"no gauge", "fewer than 10 complete years"}


def test_the_map_says_what_the_colours_mean(region):
    catchments, _ = region
    ax = trend_map(catchments).axes[0]
    note = " ".join(t.get_text() for t in ax.texts if t.get_gid() == "map-note")
    note = note.replace("\n", " ")
    assert "Sen's slope" in note and "Mann–Kendall" in note and "not what will" in note
    assert "North arrow" in note


def test_a_layer_without_trends_is_a_short_error(region):
    catchments, _ = region
    with pytest.raises(InputError, match="recharge_trend_mm_per_decade"):
        trend_map(catchments.drop(columns="recharge_trend_mm_per_decade"))
