"""Mean annual precipitation of each catchment from a raster, for the command line.

QGIS reads the raster with its own zonal statistics (``plugin/precipitation.py``); the command
line reads it with rasterio, an optional extra (``pip install 'recharge-atlas[raster]'``). Both
hand the run a field of the catchments layer, so the share of precipitation is computed in one
place (:func:`pipeline._precipitation_share`).

The mean over a catchment is the plain mean of the cells whose centres lie inside it, the rule
QGIS's zonal statistics follow, so the command line and QGIS give the same share (our choice: in
a geographic raster a cell's ground area falls with the cosine of its latitude, but across one
catchment of up to some thousand km² that changes the mean by well under 1 %). A catchment
smaller than a cell, holding no cell centre, takes the cells it touches (QGIS weights those by
the share of each cell inside; the two differ only there). Cells equal to the raster's no-data
value, or not finite, are left out; a catchment with none left gets no value.
"""

from __future__ import annotations

import os

import numpy as np

from .errors import InputError

#: The field a raster's means are put in before the run.
RASTER_FIELD = "precipitation_mm_per_year"


def _rasterio():
    try:
        import rasterio
        import rasterio.features
        import rasterio.windows
    except ImportError:
        raise InputError(
            "reading a precipitation raster needs rasterio, which is not installed: "
            "pip install 'recharge-atlas[raster]' (or give the precipitation as a field of the "
            "catchments layer with --precipitation-field)"
        ) from None
    return rasterio


def zonal_means(catchments, path):
    """The mean of raster band 1 over each catchment polygon (see the module notes).

    Parameters
    ----------
    catchments : geopandas.GeoDataFrame
        Polygons with a CRS (reprojected to the raster's CRS for the overlay).
    path : str or os.PathLike
        A raster of mean annual precipitation in mm/yr, in any format GDAL reads.

    Returns
    -------
    numpy.ndarray
        One mean per polygon, NaN where no valid cell lies under it.
    """
    rasterio = _rasterio()
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise InputError("the precipitation raster does not exist", file=path)
    try:
        source = rasterio.open(path)
    except Exception as exc:  # rasterio's own error types vary between versions
        raise InputError(f"the precipitation raster could not be read: {exc}", file=path) from None
    with source:
        if source.crs is None:
            raise InputError(
                "the precipitation raster has no coordinate reference system", file=path
            )
        if catchments.crs is None:
            raise InputError("the catchments layer has no coordinate reference system")
        shapes = catchments.geometry.to_crs(source.crs.to_wkt())
        out = np.full(len(shapes), np.nan)
        for i, shape in enumerate(shapes):
            if shape is None or shape.is_empty:
                continue
            out[i] = _mean_under(rasterio, source, shape)
    return out


def _mean_under(rasterio, source, shape):
    """The mean of the cells under one polygon (see the module notes)."""
    # The cells under the polygon's bounds (north-up raster), clipped to the raster.
    inverse = ~source.transform
    xmin, ymin, xmax, ymax = shape.bounds
    cols, rows = zip(*(inverse * (x, y) for x, y in ((xmin, ymax), (xmax, ymin))))
    col0, col1 = max(int(np.floor(min(cols))), 0), min(int(np.ceil(max(cols))), source.width)
    row0, row1 = max(int(np.floor(min(rows))), 0), min(int(np.ceil(max(rows))), source.height)
    if col1 <= col0 or row1 <= row0:  # the polygon lies outside the raster
        return np.nan
    window = rasterio.windows.Window(col0, row0, col1 - col0, row1 - row0)
    values = source.read(1, window=window, masked=True).astype(float)
    transform = source.window_transform(window)
    for touched in (False, True):
        inside = rasterio.features.geometry_mask(
            [shape], out_shape=values.shape, transform=transform, invert=True, all_touched=touched
        )
        valid = inside & ~np.ma.getmaskarray(values) & np.isfinite(values.filled(np.nan))
        if valid.any():
            break
    if not valid.any():
        return np.nan
    return float(np.mean(values.filled(np.nan)[valid]))
