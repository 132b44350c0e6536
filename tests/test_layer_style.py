"""The catchments layer's default QGIS style, written without QGIS (QGIS reads it back in
tests/qgis/test_rendering.py)."""

from __future__ import annotations

import sqlite3
import xml.etree.ElementTree as ET

import geopandas as gpd
import numpy as np
from shapely.geometry import box

from recharge_atlas.algorithms.layer_style import graduated_qml, recharge_style
from recharge_atlas.algorithms.maps import (
    NO_ESTIMATE_COLOUR,
    class_colours,
    class_labels,
    map_classes,
)


def _layer(values):
    return gpd.GeoDataFrame(
        {"recharge_mm_per_year": values, "area_km2": np.arange(len(values), 0, -1.0)},
        geometry=[box(i, 0, i + 1, 1) for i in range(len(values))],
        crs="EPSG:3035",
    )


def _rgba(hex_colour):
    return ",".join(str(int(hex_colour[i : i + 2], 16)) for i in (1, 3, 5)) + ",255"


def test_style_holds_the_maps_classes_labels_and_colours():
    values = [120.0, 150.0, 180.0, 210.0, 260.0, 300.0, np.nan]
    name, title, qml = recharge_style(_layer(values), scheme="equal_interval", classes=3)
    assert title == "Mean annual recharge (mm/yr)"
    assert name == "Mean annual recharge (mm/yr), equal interval"
    root = ET.fromstring(qml)  # well-formed XML
    renderer = root.find("renderer-v2")
    assert renderer.get("type") == "graduatedSymbol"
    # A NULL is not drawn by a graduated renderer: the plugin's stand-in number for it.
    assert renderer.get("attr") == 'coalesce("recharge_mm_per_year", -1e+300)'
    breaks = map_classes([v for v in values if np.isfinite(v)], "equal_interval", 3)
    ranges = renderer.findall("ranges/range")
    assert [(float(r.get("lower")), float(r.get("upper"))) for r in ranges[:-1]] == list(
        zip(breaks[:-1], breaks[1:])
    )
    assert [r.get("label") for r in ranges] == [
        f"{label} mm/yr" for label in class_labels(breaks)
    ] + ["no estimate"]
    colours = {
        s.get("name"): s.find("layer/Option/Option[@name='color']").get("value")
        for s in renderer.findall("symbols/symbol")
    }
    wanted = [*class_colours(3), NO_ESTIMATE_COLOUR]
    assert [colours[r.get("symbol")] for r in ranges] == [_rgba(c) for c in wanted]
    # Older QGIS reads the same settings from prop elements.
    props = renderer.find("symbols/symbol/layer").findall("prop")
    assert {p.get("k") for p in props} >= {"color", "outline_color", "style"}
    assert renderer.find("orderby/orderByClause").text == '"area_km2"'


def test_no_style_without_a_value_and_plain_field_without_missing():
    assert recharge_style(_layer([np.nan, np.nan])) is None
    assert recharge_style(_layer([1.0]).drop(columns="recharge_mm_per_year")) is None
    qml = graduated_qml('odd "name"', [1.0, 2.0], has_missing=False, units="", order_field=None)
    renderer = ET.fromstring(qml).find("renderer-v2")
    assert renderer.get("attr") == 'odd "name"' and renderer.get("enableorderby") == "0"
    qml = graduated_qml('odd "name"', [1.0, 2.0], has_missing=True)
    assert ET.fromstring(qml).find("renderer-v2").get("attr") == (
        'coalesce("odd ""name""", -1e+300)'
    )


def test_geopackage_carries_the_default_style(tmp_path, sample_paths):
    from test_end_to_end import run_args

    from recharge_atlas.cli import main

    out = tmp_path / "recharge.gpkg"
    args = run_args(sample_paths, out, "--classes", "equal-interval", "--class-count", "4")
    assert main(args) == 0
    with sqlite3.connect(out) as db:
        rows = db.execute(
            "SELECT f_table_catalog, f_table_schema, f_table_name, f_geometry_column, "
            "useAsDefault, styleName, styleQML, update_time FROM layer_styles"
        ).fetchall()
        listed = db.execute(
            "SELECT data_type FROM gpkg_contents WHERE table_name = 'layer_styles'"
        ).fetchone()
    assert listed == ("attributes",)
    assert len(rows) == 1
    catalog, schema, table, geometry, default, name, qml, when = rows[0]
    assert (catalog, schema, table, geometry, default) == ("", "", "catchments", "geom", 1)
    assert name.endswith("equal interval")
    # GeoPackage 1.2 DATETIME: YYYY-MM-DDTHH:MM:SS.SSSZ.
    assert len(when) == 24 and when[10] == "T" and when.endswith("Z")
    labels = [r.get("label") for r in ET.fromstring(qml).findall("renderer-v2/ranges/range")]
    assert len(labels) == 5 and labels[-1] == "no estimate"  # 4 classes and the grey one
