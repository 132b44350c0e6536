"""Mean annual precipitation of each catchment from a raster, by QGIS's own zonal statistics.

The means go into the field :data:`algorithms.precipitation.RASTER_FIELD` of the catchments as
read into pandas; the core then computes the share of precipitation as it does for a field the
user names (one pipeline for QGIS and the command line). QGIS takes the cells whose centres lie
inside each polygon (and, for a polygon smaller than a cell, the cells it overlaps, by the
share inside), which is the command line's rule too (:mod:`algorithms.precipitation`).
"""

from __future__ import annotations

import numpy as np
from qgis.analysis import QgsZonalStatistics
from qgis.core import QgsCoordinateReferenceSystem, QgsCoordinateTransform, QgsProject

from . import compat
from .conversion import qgs_geometry


def zonal_means(raster_layer, frame, feedback=None):
    """The mean of band 1 of ``raster_layer`` under each polygon of the GeoDataFrame ``frame``
    (NaN where no valid cell lies under it)."""
    from ..algorithms.errors import InputError

    if raster_layer is None or not raster_layer.isValid():
        raise InputError("the precipitation raster could not be read (PRECIPITATION_RASTER)")
    if frame.crs is None:
        raise InputError("the catchments layer has no coordinate reference system")
    crs = QgsCoordinateReferenceSystem.fromWkt(frame.crs.to_wkt())
    transform = QgsCoordinateTransform(crs, raster_layer.crs(), QgsProject.instance())
    provider = raster_layer.dataProvider()
    size_x, size_y = raster_layer.rasterUnitsPerPixelX(), raster_layer.rasterUnitsPerPixelY()
    out = np.full(len(frame), np.nan)
    for i, shape in enumerate(frame.geometry):
        if feedback is not None and feedback.isCanceled():
            break
        if shape is None or shape.is_empty:
            continue
        geometry = qgs_geometry(shape)
        geometry.transform(transform)
        stats = QgsZonalStatistics.calculateStatistics(
            provider, geometry, size_x, size_y, 1, compat.ZONAL_MEAN
        )
        value = stats.get(int(compat.ZONAL_MEAN)) if stats else None
        if value is None and stats:
            value = next(iter(stats.values()))
        try:
            out[i] = float(value)
        except (TypeError, ValueError):
            pass
    return out
