"""Paths and helpers shared by the QGIS tests (no QGIS import here: the .venv run imports it)."""

from __future__ import annotations

import os
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
SAMPLE = ROOT / "sample_layers"
#: Folder QGIS loads plugins from: holds the link recharge_atlas -> the repository.
QGIS_PLUGIN_PATH = ROOT / ".qgis-path"
#: QGIS's own Python plugins (``import processing``).
PROCESSING_PLUGINS = Path("/usr/share/qgis/python/plugins")
#: The command-line runner (``/usr/bin/qgis_process`` is a broken wrapper on Debian 12).
QGIS_PROCESS = Path("/usr/bin/qgis_process.bin")
#: The Python QGIS runs (Debian's), for subprocess tests.
QGIS_PYTHON = Path("/usr/bin/python3")

#: Codes of the discharge copy with a quality-code column: (code, every, offset) marks data
#: row i when i % every == offset (invented codes). "poor" days are the ones tests flag.
QUALITY_CODES = (("poor", 23, 5), ("fair", 17, 3))
#: Recession index per gauge in the gauges copy with a K field; other gauges are left empty.
GIVEN_K = {"QM01": 60.0}

IN_QGIS = os.environ.get("RECHARGE_ATLAS_IN_QGIS") == "1"
REQUIRED = IN_QGIS and os.environ.get("RECHARGE_ATLAS_QGIS_REQUIRED") == "1"


def private_qt_folders(base: Path) -> dict:
    """XDG folders under ``base`` so Qt writes no settings or caches into the user's home."""
    folders = {
        "XDG_CONFIG_HOME": base / "config",
        "XDG_CACHE_HOME": base / "cache",
        "XDG_DATA_HOME": base / "data",
        "XDG_RUNTIME_DIR": base / "runtime",
    }
    for folder in folders.values():
        folder.mkdir(parents=True, exist_ok=True)
    folders["XDG_RUNTIME_DIR"].chmod(0o700)
    return {name: str(path) for name, path in folders.items()}


def subprocess_env(home: Path, pythonpath: bool = False) -> dict:
    """Environment for a QGIS subprocess: offscreen, our plugin path, a throwaway HOME/profile."""
    env = {k: v for k, v in os.environ.items() if not k.startswith(("XDG_", "QGIS_"))}
    env.pop("PYTHONPATH", None)
    env.update(HOME=str(home), QT_QPA_PLATFORM="offscreen", QGIS_PLUGINPATH=str(QGIS_PLUGIN_PATH))
    env.update(private_qt_folders(home))
    if pythonpath:
        env["PYTHONPATH"] = str(QGIS_PLUGIN_PATH)
    return env


def sample_parameters(**changes):
    """Parameters for the demo region, with the brief's names; ``changes`` override them."""
    parameters = {
        "GAUGES": str(SAMPLE / "gauges.gpkg"),
        "GAUGE_ID_FIELD": "gauge_id",
        "DISCHARGE": str(SAMPLE / "discharge.csv"),
        "DISCHARGE_GAUGE_FIELD": "gauge_id",
        "DATE_FIELD": "date",
        "VALUE_FIELD": "discharge",
        "CATCHMENTS": str(SAMPLE / "catchments.gpkg"),
        "UNITS": "m3/s",
        "WATER_YEAR_START": 10,
    }
    parameters.update(changes)
    return parameters


def gpkg_layer(path: Path, table: str, geometry: bool = False) -> str:
    """Processing's destination string for a layer inside a GeoPackage."""
    return f"ogr:dbname='{path}' table=\"{table}\"" + (" (geom)" if geometry else "")


def write_gauges_copy(path: Path, field: str, values: dict) -> Path:
    """Write the demo gauges to GeoPackage ``path`` with a numeric ``field``: ``values`` by
    gauge id, NULL for the others. Needs a running QGIS."""
    from qgis.core import (
        QgsCoordinateTransformContext,
        QgsFeature,
        QgsVectorFileWriter,
        QgsVectorLayer,
    )

    from recharge_atlas.plugin.conversion import qgs_field

    source = QgsVectorLayer(str(SAMPLE / "gauges.gpkg"), "gauges", "ogr")
    layer = QgsVectorLayer(f"Point?crs={source.crs().authid()}", "gauges", "memory")
    provider = layer.dataProvider()
    kept = [f for f in source.fields() if f.name() != "fid"]
    provider.addAttributes([*kept, qgs_field(field, "double")])
    layer.updateFields()
    features = []
    for feature in source.getFeatures():
        copy = QgsFeature(layer.fields())
        copy.setGeometry(feature.geometry())
        copy.setAttributes([feature[f.name()] for f in kept] + [values.get(feature["gauge_id"])])
        features.append(copy)
    provider.addFeatures(features)
    options = QgsVectorFileWriter.SaveVectorOptions()
    options.driverName = "GPKG"
    options.layerName = "gauges"
    error = QgsVectorFileWriter.writeAsVectorFormatV3(
        layer, str(path), QgsCoordinateTransformContext(), options
    )
    assert error[0] == QgsVectorFileWriter.NoError, error
    return path
