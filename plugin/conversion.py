"""Between QGIS feature sources and sinks and the pandas/geopandas objects the core works on.

Reading: a ``QgsFeatureSource`` becomes a ``pandas.DataFrame`` (tables) or a
``geopandas.GeoDataFrame`` (shapely geometries from WKB, the CRS from the source). Attribute
values become plain Python: NULL becomes None, QDate a ``datetime.date``, QDateTime a
``datetime.datetime``.

Writing: a DataFrame becomes ``QgsFields`` (types from the column dtypes) and attribute rows
(NaN and NaT become NULL).

pandas, geopandas and shapely are imported inside the functions, so importing this module
costs nothing when they are missing.
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass, field

from qgis.core import (
    QgsFeature,
    QgsFeatureRequest,
    QgsField,
    QgsFields,
    QgsGeometry,
    QgsProcessingFeatureSource,
    QgsWkbTypes,
)
from qgis.PyQt.QtCore import QDate, QDateTime, QTime

from . import compat

#: Check the cancel button every this many features while reading.
CHECK_EVERY = 5000


@dataclass
class LayerTable:
    """One source read into memory.

    Attributes
    ----------
    frame : pandas.DataFrame or geopandas.GeoDataFrame
        One row per feature, in the source's order, index 0..n-1.
    fields : QgsFields
        All the source's fields, as it defines them (``frame`` may hold only some).
    rows : list of list
        When asked for, the raw attribute values of each feature (QVariant and all, one per
        field of ``fields``), for writing them back as they were.
    geometries : list of QgsGeometry
        The geometry of each feature when read with geometry, else empty.
    wkb_type : QgsWkbTypes.Type or None
        The source's geometry type.
    """

    frame: object
    fields: QgsFields
    rows: list = field(default_factory=list, repr=False)
    geometries: list = field(default_factory=list, repr=False)
    wkb_type: object = None


#: Attribute types that need no conversion (the common case, checked first for speed).
_PLAIN_TYPES = frozenset({str, float, int, bool})


def python_value(value):
    """A QGIS attribute value as a plain Python value (NULL → None, QDate → date, ...)."""
    if type(value) in _PLAIN_TYPES:
        return value
    if compat.is_null(value):
        return None
    if isinstance(value, QDateTime):
        return value.toPyDateTime() if value.isValid() else None
    if isinstance(value, QDate):
        return value.toPyDate() if value.isValid() else None
    if isinstance(value, QTime):
        return value.toPyTime() if value.isValid() else None
    return value


def crs_text(source) -> str | None:
    """The source's CRS for pyproj: the authority id when there is one, else WKT; None if unset."""
    crs = source.sourceCrs()
    if not crs.isValid():
        return None
    authid = crs.authid()
    if authid.upper().startswith("EPSG:"):
        return authid
    return crs.toWkt(compat.CRS_WKT_PREFERRED)


def _shapely(geometry):
    from shapely import wkb

    if geometry is None or geometry.isNull() or geometry.isEmpty():
        return None
    kind = geometry.wkbType()
    if compat.is_curved(kind) or compat.has_m(kind):
        geometry = QgsGeometry(geometry)
        if compat.is_curved(kind):
            geometry = QgsGeometry(geometry.constGet().segmentize())
        if compat.has_m(geometry.wkbType()):
            geometry.get().dropMValue()
    return wkb.loads(bytes(geometry.asWkb()))


def _features(source, request, with_geometry):
    """The source's features; a Processing source's geometries without the context's validity
    check, which would drop or refuse invalid polygons before the core can repair them."""
    if with_geometry and isinstance(source, QgsProcessingFeatureSource):
        return source.getFeatures(request, compat.SOURCE_SKIP_GEOMETRY_CHECK)
    return source.getFeatures(request)


def read_source(
    source, *, field_names=None, with_geometry=True, keep_rows=False, feedback=None, what="layer"
):
    """Read a feature source into a :class:`LayerTable`.

    Parameters
    ----------
    source : QgsFeatureSource
    field_names : list of str, optional
        Read only these fields (all when None). Names the source lacks are ignored; check for
        them first so the message can name them.
    with_geometry : bool
        Read geometries into a GeoDataFrame with the source's CRS; else a plain DataFrame.
    keep_rows : bool
        Keep each feature's raw attribute values (``LayerTable.rows``) for writing them back.
    feedback : QgsProcessingFeedback, optional
        Checked for cancel while reading; returns None when cancelled.
    what : str
        Name of the layer in debug messages.
    """
    import pandas as pd

    fields = source.fields()
    if field_names is None:
        indices = list(range(fields.count()))
    else:
        indices = [i for i in (fields.lookupField(n) for n in field_names) if i >= 0]
    names = [fields.at(i).name() for i in indices]

    request = QgsFeatureRequest()
    if field_names is not None:
        request.setSubsetOfAttributes(indices)
    if not with_geometry:
        request.setFlags(compat.REQUEST_NO_GEOMETRY)

    records, geometries = [], []
    for n, feature in enumerate(_features(source, request, with_geometry)):
        if feedback is not None and n % CHECK_EVERY == 0 and feedback.isCanceled():
            return None
        records.append(feature.attributes())
        if with_geometry:
            geometries.append(QgsGeometry(feature.geometry()))

    columns = list(zip(*records)) if records else [()] * fields.count()
    data = {name: [python_value(v) for v in columns[i]] for name, i in zip(names, indices)}
    frame = pd.DataFrame(data, columns=names)
    rows = records if keep_rows else []
    if feedback is not None:
        feedback.pushDebugInfo(f"{what}: {len(frame)} features read")
    if not with_geometry:
        return LayerTable(frame, fields, rows, wkb_type=source.wkbType())

    import geopandas as gpd

    geometry_name = "geometry"
    while geometry_name in names:  # an attribute already has that name
        geometry_name = "_" + geometry_name
    frame[geometry_name] = gpd.GeoSeries([_shapely(g) for g in geometries], index=frame.index)
    frame = gpd.GeoDataFrame(frame, geometry=geometry_name, crs=crs_text(source))
    return LayerTable(frame, fields, rows, geometries, source.wkbType())


# --------------------------------------------------------------------------- writing


def _kind(series) -> str:
    import pandas as pd

    if pd.api.types.is_bool_dtype(series):
        return "bool"
    if pd.api.types.is_integer_dtype(series):
        return "int64"
    if pd.api.types.is_float_dtype(series):
        return "double"
    if pd.api.types.is_datetime64_any_dtype(series):
        values = series.dropna()
        if len(values) and not (values == values.dt.normalize()).all():
            return "datetime"
        return "date"
    values = [v for v in series.tolist() if v is not None]
    if values and all(isinstance(v, _dt.datetime) for v in values):
        return "datetime"
    if values and all(isinstance(v, _dt.date) for v in values):
        return "date"
    return "string"


def qgs_field(name: str, kind: str) -> QgsField:
    """A QgsField of one of the kinds in :data:`compat.FIELD_TYPES`."""
    return QgsField(name, compat.FIELD_TYPES[kind])


def _cell(value, kind):
    if value is None:
        return None
    if kind == "double":
        value = float(value)
        return value if math.isfinite(value) else None
    if isinstance(value, float) and math.isnan(value):
        return None
    if kind == "int64":
        return int(value)
    if kind == "bool":
        return bool(value)
    if kind in ("date", "datetime"):
        import pandas as pd

        if value is pd.NaT:
            return None
        stamp = pd.Timestamp(value)
        date = QDate(stamp.year, stamp.month, stamp.day)
        if kind == "date":
            return date
        return QDateTime(
            date, QTime(stamp.hour, stamp.minute, stamp.second, stamp.microsecond // 1000)
        )
    return str(value)


def _column_values(series, kind):
    """A column's cells as attribute values (NULL for missing). Plain numeric columns and
    typed dates are converted column-wise (a run's tables hold hundreds of thousands of rows);
    anything else cell by cell."""
    fast = _typed_column_values(series, kind)
    if fast is not None:
        return fast
    import pandas as pd

    if kind in ("date", "datetime") and pd.api.types.is_datetime64_any_dtype(series):
        values = [None if pd.isna(v) else v for v in series.tolist()]
    else:
        values = series.astype(object).where(series.notna(), None).tolist()
    return [_cell(v, kind) for v in values]


def _typed_column_values(series, kind):
    """:func:`_column_values` for numpy-typed columns without a cell-by-cell loop (the same
    values :func:`_cell` gives), or None for any other column."""
    import numpy as np

    values = series.to_numpy()
    if kind == "string" and not isinstance(values, np.ndarray):  # pandas' own text dtypes
        values = series.to_numpy(dtype=object)
    if not isinstance(values, np.ndarray):
        return None
    if kind == "string" and values.dtype == object:
        import pandas as pd

        missing = pd.isna(values)
        cells = values.tolist()
        if not all(type(v) is str for v, m in zip(cells, missing.tolist()) if not m):
            return None  # other objects: written as their text, cell by cell
        for i in np.flatnonzero(missing).tolist():
            cells[i] = None
        return cells
    if kind == "double" and values.dtype.kind == "f":
        cells = values.tolist()
        for i in np.flatnonzero(~np.isfinite(values)).tolist():
            cells[i] = None
        return cells
    if kind == "int64" and values.dtype.kind in "iu":
        return values.tolist()
    if kind == "bool" and values.dtype.kind == "b":
        return values.tolist()
    if kind in ("date", "datetime") and values.dtype.kind == "M":
        import pandas as pd

        # One QDate (QDateTime) per distinct day (time stamp), shared by its rows: setting
        # an attribute copies the value. NaT is left out of the distinct values (numpy
        # versions differ on whether NaTs count as equal) and gives NULL.
        known = ~np.isnat(values)
        stamps, where = np.unique(values[known], return_inverse=True)
        made = [_cell(pd.Timestamp(stamp), kind) for stamp in stamps] + [None]
        pick = np.full(values.size, len(made) - 1)
        pick[known] = where.reshape(-1)
        return list(map(made.__getitem__, pick.tolist()))
    return None


def frame_fields(frame, keep: LayerTable | None = None, keep_names=()):
    """Fields and attribute rows for writing ``frame`` (its geometry column left out).

    Parameters
    ----------
    frame : pandas.DataFrame or geopandas.GeoDataFrame
    keep : LayerTable, optional
        The source the frame's rows came from, row for row. Columns named in ``keep_names`` that
        the source has are written with the source's own field definition and raw values.
    keep_names : iterable of str

    Returns
    -------
    (QgsFields, list of list)
    """
    geometry_name = getattr(getattr(frame, "geometry", None), "name", None)
    names = [c for c in frame.columns if c != geometry_name]
    keep_names = set(keep_names)
    fields = QgsFields()
    columns = []
    for name in names:
        source_index = (
            keep.fields.lookupField(name) if keep is not None and name in keep_names else -1
        )
        if source_index >= 0:
            fields.append(keep.fields.at(source_index))
            columns.append([row[source_index] for row in keep.rows])
        else:
            kind = _kind(frame[name])
            fields.append(qgs_field(str(name), kind))
            columns.append(_column_values(frame[name], kind))
    rows = (
        [list(values) for values in zip(*columns)] if columns else [[] for _ in range(len(frame))]
    )
    return fields, rows


def qgs_geometry(shape) -> QgsGeometry:
    """A shapely geometry as a QgsGeometry (a null geometry for None or empty)."""
    geometry = QgsGeometry()
    if shape is None or shape.is_empty:
        return geometry
    geometry.fromWkb(bytes(shape.wkb))
    return geometry


def _same_shape(before, after) -> bool:
    if before is None or before.is_empty:
        return after is None or after.is_empty
    if after is None or after.is_empty:
        return False
    return before is after or before.equals_exact(after, 0.0)


def output_geometries(frame, keep: LayerTable | None = None):
    """Geometry type and geometries for writing the polygons of ``frame``.

    With ``keep`` (the source the frame's rows came from, row for row), each geometry the core
    left as it was is the source's own (curves, M values and all), and each one it changed
    (a repaired polygon) is the frame's. Without it, every geometry is the frame's.

    When a written geometry is multipart and the type is not, the type becomes the multipart
    one and every geometry is made multipart, as a GeoPackage layer needs one type.

    Returns
    -------
    (QgsWkbTypes.Type, list of QgsGeometry)
    """
    shapes = list(frame.geometry)
    if keep is not None:
        before = list(keep.frame.geometry)
        geometries = [
            keep.geometries[i] if _same_shape(before[i], shape) else qgs_geometry(shape)
            for i, shape in enumerate(shapes)
        ]
        wkb_type = keep.wkb_type
    else:
        geometries = [qgs_geometry(shape) for shape in shapes]
        wkb_type = compat.WKB_MULTIPOLYGON
        if any(g.constGet() is not None and QgsWkbTypes.hasZ(g.wkbType()) for g in geometries):
            wkb_type = QgsWkbTypes.addZ(wkb_type)
    if any(not g.isNull() and g.isMultipart() for g in geometries):
        wkb_type = QgsWkbTypes.multiType(wkb_type)
    if QgsWkbTypes.isMultiType(wkb_type):
        geometries = [_multipart(g) for g in geometries]
    return wkb_type, geometries


def _multipart(geometry):
    if geometry.isNull() or geometry.isMultipart():
        return geometry
    geometry = QgsGeometry(geometry)
    geometry.convertToMultiType()
    return geometry


def write_rows(sink, fields, rows, geometries=None, batch=1000) -> bool:
    """Add the rows (and geometries) to ``sink`` in batches; False if the sink refused any."""
    features = []
    for i, values in enumerate(rows):
        feature = QgsFeature(fields)
        feature.setAttributes(values)
        if geometries is not None:
            feature.setGeometry(geometries[i])
        features.append(feature)
        if len(features) >= batch:
            if not sink.addFeatures(features, compat.SINK_FAST_INSERT):
                return False
            features = []
    if features and not sink.addFeatures(features, compat.SINK_FAST_INSERT):
        return False
    return True
