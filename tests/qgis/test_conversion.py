"""Layers to pandas and back: values, NULLs, dates, geometry kinds and field types."""

from __future__ import annotations

import datetime as dt
import math

import pytest

pytest.importorskip("qgis.core")

from qgis.core import QgsFeature, QgsGeometry, QgsVectorLayer  # noqa: E402
from qgis.PyQt.QtCore import QDate, QDateTime, QTime, QVariant  # noqa: E402


def _memory_layer(definition, rows, geometries=None):
    layer = QgsVectorLayer(definition, "test", "memory")
    assert layer.isValid()
    features = []
    for i, values in enumerate(rows):
        feature = QgsFeature(layer.fields())
        feature.setAttributes(values)
        if geometries is not None:
            feature.setGeometry(QgsGeometry.fromWkt(geometries[i]))
        features.append(feature)
    layer.dataProvider().addFeatures(features)
    return layer


def test_python_values(qgis_app):
    from recharge_atlas.plugin.conversion import python_value

    assert python_value(QVariant()) is None
    assert python_value(None) is None
    assert python_value(QDate(2001, 10, 31)) == dt.date(2001, 10, 31)
    assert python_value(QDate()) is None
    assert python_value(QDateTime(QDate(2001, 10, 31), QTime(6, 30))) == dt.datetime(
        2001, 10, 31, 6, 30
    )
    assert python_value("QM01") == "QM01"
    assert python_value(2.5) == 2.5


def test_table_with_dates_and_nulls(qgis_app):
    from recharge_atlas.plugin.conversion import read_source

    layer = _memory_layer(
        "None?field=site:string&field=day:date&field=q:double&field=other:integer",
        [
            ["A", QDate(2001, 1, 2), 1.5, 7],
            ["A", QDate(2001, 1, 3), QVariant(), 8],
            [QVariant(), QDate(), 2.0, 9],
        ],
    )
    table = read_source(layer, field_names=["site", "day", "q"], with_geometry=False)
    frame = table.frame
    assert list(frame.columns) == ["site", "day", "q"]
    assert frame["site"].tolist() == ["A", "A", None]
    assert frame["day"].tolist() == [dt.date(2001, 1, 2), dt.date(2001, 1, 3), None]
    assert frame["q"].iloc[0] == 1.5 and math.isnan(frame["q"].iloc[1])
    assert table.rows == []


def test_polygons_curves_and_m_values_become_shapely(qgis_app):
    from recharge_atlas.plugin.conversion import read_source

    layer = _memory_layer(
        "MultiPolygonM?crs=EPSG:32624&field=gauge_id:string",
        [["G1"], ["G2"]],
        ["MultiPolygonM (((0 0 1, 1000 0 1, 1000 1000 1, 0 1000 1, 0 0 1)))", None],
    )
    table = read_source(layer, keep_rows=True)
    frame = table.frame
    assert frame.crs.to_epsg() == 32624
    assert frame.geometry.iloc[0].area == pytest.approx(1e6)
    assert frame.geometry.iloc[1] is None
    assert [row[0] for row in table.rows] == ["G1", "G2"]

    curved = _memory_layer(
        "CurvePolygon?crs=EPSG:32624&field=gauge_id:string",
        [["C1"]],
        ["CurvePolygon (CircularString (0 0, 1000 0, 0 0))"],
    )
    shape = read_source(curved).frame.geometry.iloc[0]
    assert shape.area == pytest.approx(math.pi * 500**2, rel=0.01)


def test_frame_fields_types_and_nulls(qgis_app):
    import numpy as np
    import pandas as pd

    from recharge_atlas.plugin import compat
    from recharge_atlas.plugin.conversion import frame_fields, write_rows

    frame = pd.DataFrame(
        {
            "gauge_id": ["A", None],
            "year": np.array([2001, 2002], dtype="int64"),
            "depth": [1.5, np.nan],
            "complete": [True, False],
            "peak_date": pd.to_datetime(["2001-10-31", None]),
            "moment": pd.to_datetime(["2001-10-31 06:30", "2001-11-01 00:00"]),
        }
    )
    fields, rows = frame_fields(frame)
    types = {f.name(): f.type() for f in fields}
    assert types == {
        "gauge_id": compat.FIELD_TYPES["string"],
        "year": compat.FIELD_TYPES["int64"],
        "depth": compat.FIELD_TYPES["double"],
        "complete": compat.FIELD_TYPES["bool"],
        "peak_date": compat.FIELD_TYPES["date"],
        "moment": compat.FIELD_TYPES["datetime"],
    }
    assert rows[0] == [
        "A",
        2001,
        1.5,
        True,
        QDate(2001, 10, 31),
        QDateTime(QDate(2001, 10, 31), QTime(6, 30)),
    ]
    assert rows[1][0] is None and rows[1][2] is None and rows[1][4] is None

    layer = QgsVectorLayer("None", "out", "memory")
    layer.dataProvider().addAttributes(fields.toList())
    layer.updateFields()
    assert write_rows(layer.dataProvider(), layer.fields(), rows)
    assert layer.featureCount() == 2


def test_column_wise_cells_are_the_cell_by_cell_ones(qgis_app):
    """Typed columns are converted column-wise; each cell is what the cell-by-cell
    conversion gives (NULL for NaN, ±inf and NaT; one QDate per distinct day)."""
    import numpy as np
    import pandas as pd

    from recharge_atlas.plugin import conversion

    days = pd.to_datetime(["2001-10-31", None, "1999-01-02", "2001-10-31", None, "2030-12-31"])
    columns = {
        "double": pd.Series([1.5, np.nan, np.inf, -np.inf, 0.0, -2.25]),
        "int64": pd.Series(np.array([3, -1, 0, 2**40, 7, 8], dtype=np.int64)),
        "bool": pd.Series([True, False, True, True, False, False]),
        "date": pd.Series(days),
        "datetime": pd.Series(
            pd.to_datetime(
                [
                    "2001-10-31 06:30:15.250",
                    None,
                    "2001-10-31",
                    "1970-01-01",
                    None,
                    "2001-10-31 06:30:15.250",
                ]
            )
        ),
        "date_in_seconds": pd.Series(days.values.astype("datetime64[s]")),
    }
    for name, series in columns.items():
        kind = name.split("_")[0]
        fast = conversion._typed_column_values(series, kind)
        assert fast is not None, name
        slow = [
            conversion._cell(v, kind) for v in series.astype(object).where(series.notna(), None)
        ]
        assert fast == slow, name
    for text in (pd.Series(["a", None, "", "b"]), pd.Series(["a", None, "", "b"], dtype="string")):
        slow = [
            conversion._cell(v, "string") for v in text.astype(object).where(text.notna(), None)
        ]
        assert conversion._typed_column_values(text, "string") == slow == ["a", None, "", "b"]
    assert conversion._typed_column_values(pd.Series(["a", 3]), "string") is None  # cell by cell
    assert conversion._typed_column_values(pd.Series([1, None], dtype="Int64"), "int64") is None
