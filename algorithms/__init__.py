"""The QGIS-free core of Recharge Atlas.

Everything here works on pandas and geopandas objects and never imports ``qgis``. File reading
and writing lives in :mod:`recharge_atlas.algorithms.files` only.
"""
