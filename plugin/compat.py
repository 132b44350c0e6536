"""Enum values that moved between QGIS releases, looked up by name.

QGIS 3.30 to 3.38 moved many enums into the ``Qgis`` namespace (``Qgis.ProcessingSourceType``,
``Qgis.WkbType``, ...) and field types from ``QVariant.Type`` to ``QMetaType.Type``; QGIS 4
(Qt 6) drops the old spellings. Each constant below tries the new name first and falls back to
the old one, so the plugin runs unchanged from QGIS 3.22 to QGIS 4. Never use raw integers:
their values are not part of the API.
"""

from __future__ import annotations

from qgis.analysis import QgsZonalStatistics
from qgis.core import (
    Qgis,
    QgsCoordinateReferenceSystem,
    QgsFeatureRequest,
    QgsFeatureSink,
    QgsProcessing,
    QgsProcessingAlgorithm,
    QgsProcessingFeatureSource,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterField,
    QgsProcessingParameterNumber,
    QgsWkbTypes,
)
from qgis.PyQt.QtCore import QMetaType, QUrl

try:  # gone from PyQt6 as a type enum; only needed before QGIS 3.38
    from qgis.PyQt.QtCore import QVariant
except ImportError:  # pragma: no cover - Qt 6 builds
    QVariant = None

_NAMESPACE = {
    "Qgis": Qgis,
    "QgsCoordinateReferenceSystem": QgsCoordinateReferenceSystem,
    "QgsFeatureRequest": QgsFeatureRequest,
    "QgsFeatureSink": QgsFeatureSink,
    "QgsProcessing": QgsProcessing,
    "QgsProcessingAlgorithm": QgsProcessingAlgorithm,
    "QgsProcessingFeatureSource": QgsProcessingFeatureSource,
    "QgsProcessingParameterDefinition": QgsProcessingParameterDefinition,
    "QgsProcessingParameterField": QgsProcessingParameterField,
    "QgsProcessingParameterNumber": QgsProcessingParameterNumber,
    "QgsWkbTypes": QgsWkbTypes,
    "QgsZonalStatistics": QgsZonalStatistics,
    "QMetaType": QMetaType,
    "QUrl": QUrl,
    "QVariant": QVariant,
}


def first_of(*paths: str):
    """Return the first of the dotted names (``"Qgis.WkbType.Polygon"``) that this QGIS has.

    Raises
    ------
    AttributeError
        If none of them exists.
    """
    for path in paths:
        head, *rest = path.split(".")
        value = _NAMESPACE.get(head)
        if value is None:
            continue
        try:
            for name in rest:
                value = getattr(value, name)
        except AttributeError:
            continue
        return value
    raise AttributeError(f"none of {', '.join(paths)} exists in QGIS {Qgis.QGIS_VERSION}")


def qgis_version_int() -> int:
    """QGIS version as an integer, e.g. 32216 for 3.22.16."""
    version = getattr(Qgis, "versionInt", None)
    return int(version()) if callable(version) else int(Qgis.QGIS_VERSION_INT)


# Processing source types (Qgis.ProcessingSourceType since 3.36).
SOURCE_POINT = first_of("Qgis.ProcessingSourceType.VectorPoint", "QgsProcessing.TypeVectorPoint")
SOURCE_POLYGON = first_of(
    "Qgis.ProcessingSourceType.VectorPolygon", "QgsProcessing.TypeVectorPolygon"
)
#: Any vector layer, with or without geometry (tables such as CSV files included).
SOURCE_VECTOR = first_of("Qgis.ProcessingSourceType.Vector", "QgsProcessing.TypeVector")
#: Any vector layer that has geometry.
SOURCE_ANY_GEOMETRY = first_of(
    "Qgis.ProcessingSourceType.VectorAnyGeometry", "QgsProcessing.TypeVectorAnyGeometry"
)

# Parameter sub-types (Qgis.ProcessingNumberParameterType and friends since 3.36).
NUMBER_INTEGER = first_of(
    "Qgis.ProcessingNumberParameterType.Integer", "QgsProcessingParameterNumber.Integer"
)
NUMBER_DOUBLE = first_of(
    "Qgis.ProcessingNumberParameterType.Double", "QgsProcessingParameterNumber.Double"
)
FIELD_ANY = first_of("Qgis.ProcessingFieldParameterDataType.Any", "QgsProcessingParameterField.Any")
FIELD_NUMERIC = first_of(
    "Qgis.ProcessingFieldParameterDataType.Numeric", "QgsProcessingParameterField.Numeric"
)

# Geometry types (Qgis.WkbType since 3.30).
WKB_NO_GEOMETRY = first_of("Qgis.WkbType.NoGeometry", "QgsWkbTypes.NoGeometry")
WKB_MULTIPOLYGON = first_of("Qgis.WkbType.MultiPolygon", "QgsWkbTypes.MultiPolygon")

# Parameter flags (Qgis.ProcessingParameterFlag since 3.36).
PARAMETER_OPTIONAL = first_of(
    "Qgis.ProcessingParameterFlag.Optional", "QgsProcessingParameterDefinition.FlagOptional"
)
#: Shown under "Advanced parameters" in the dialog.
PARAMETER_ADVANCED = first_of(
    "Qgis.ProcessingParameterFlag.Advanced", "QgsProcessingParameterDefinition.FlagAdvanced"
)

# Algorithm flags (Qgis.ProcessingAlgorithmFlag since 3.36).
ALGORITHM_CAN_CANCEL = first_of(
    "Qgis.ProcessingAlgorithmFlag.CanCancel", "QgsProcessingAlgorithm.FlagCanCancel"
)
#: Set, an algorithm runs in the interface's thread and blocks it; ours never set it.
ALGORITHM_NO_THREADING = first_of(
    "Qgis.ProcessingAlgorithmFlag.NoThreading", "QgsProcessingAlgorithm.FlagNoThreading"
)

# Feature sink and request flags.
SINK_REGENERATE_PRIMARY_KEY = first_of(
    "QgsFeatureSink.SinkFlag.RegeneratePrimaryKey", "QgsFeatureSink.RegeneratePrimaryKey"
)
SINK_FAST_INSERT = first_of("QgsFeatureSink.Flag.FastInsert", "QgsFeatureSink.FastInsert")
REQUEST_NO_GEOMETRY = first_of("Qgis.FeatureRequestFlag.NoGeometry", "QgsFeatureRequest.NoGeometry")
#: Read a Processing source without the context's invalid-geometry check (the core repairs
#: invalid polygons itself and says so).
SOURCE_SKIP_GEOMETRY_CHECK = first_of(
    "Qgis.ProcessingFeatureSourceFlag.SkipGeometryValidityChecks",
    "QgsProcessingFeatureSource.FlagSkipGeometryValidityChecks",
)

#: The mean of a zonal statistics run (Qgis.ZonalStatistic since 3.36).
ZONAL_MEAN = first_of("Qgis.ZonalStatistic.Mean", "QgsZonalStatistics.Statistic.Mean")

#: The WKT flavour PROJ prefers (Qgis.CrsWktVariant since 3.36).
URL_FULLY_DECODED = first_of("QUrl.ComponentFormattingOption.FullyDecoded", "QUrl.FullyDecoded")
CRS_WKT_PREFERRED = first_of(
    "Qgis.CrsWktVariant.Preferred", "QgsCoordinateReferenceSystem.WKT_PREFERRED"
)


def _field_types():
    if qgis_version_int() >= 33800 or QVariant is None:
        # QgsField takes QMetaType.Type from QGIS 3.38; scoped spellings for PyQt6.
        def pick(name, qt5_name=None):
            return first_of(f"QMetaType.Type.{name}", f"QMetaType.{qt5_name or name}")

        return {
            "int": pick("Int"),
            "int64": pick("LongLong"),
            "double": pick("Double"),
            "bool": pick("Bool"),
            "string": pick("QString"),
            "date": pick("QDate"),
            "datetime": pick("QDateTime"),
        }
    return {
        "int": QVariant.Int,
        "int64": QVariant.LongLong,
        "double": QVariant.Double,
        "bool": QVariant.Bool,
        "string": QVariant.String,
        "date": QVariant.Date,
        "datetime": QVariant.DateTime,
    }


#: Field types for QgsField by plain name: int, int64, double, bool, string, date, datetime.
FIELD_TYPES = _field_types()


def is_null(value) -> bool:
    """True for Python ``None`` and for a null ``QVariant`` (how QGIS 3 returns NULL attributes)."""
    if value is None:
        return True
    if QVariant is not None and isinstance(value, QVariant):
        return value.isNull()
    return False


def has_m(wkb_type) -> bool:
    """True when the geometry type carries M values."""
    return bool(QgsWkbTypes.hasM(wkb_type))


def is_curved(wkb_type) -> bool:
    """True for circular strings, compound curves and curve polygons."""
    return bool(QgsWkbTypes.isCurvedType(wkb_type))
