"""Paths and helpers shared by the QGIS tests (no QGIS import here: the .venv run imports it)."""

from __future__ import annotations

import math
import os
import subprocess
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
#: The gauge of the one-gauge discharge table: the only record there, so runs on it are quick.
#: HB05 drains a basin of its own (no gauge upstream or downstream) and has a full record.
ONE_GAUGE = "HB05"
#: Water years of the short table of ONE_GAUGE (from October 2000): enough for K, complete
#: years and a report, in a fraction of the time.
SHORT_YEARS = 6

#: The algorithms of the toolbox beside catchmentrecharge and subbasinrecharge.
TOOLBOX = ("recessionindex", "baseflowseparation", "eventrecharge", "linkcheck", "rechargereport")
#: The core Settings keywords of each toolbox run of the ``toolbox_runs`` fixture.
TOOLBOX_SETTINGS = {
    "recessionindex": {},
    "baseflowseparation": {"baseflow_method": "lyne_hollick"},
    "eventrecharge": {"water_year_start": 4},
    "linkcheck": {},
    "rechargereport": {},
}

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


def write_layer_copy(
    path: Path, source_path: Path, name: str, *, drop=(), crs=None, edit=None, values=None
):
    """Copy the GeoPackage layer at ``source_path`` to GeoPackage ``path`` (layer ``name``):
    the fields in ``drop`` left out, the geometries reprojected to ``crs`` (e.g. "EPSG:4326")
    and, with ``edit(row, QgsGeometry) -> QgsGeometry``, changed (before reprojecting);
    ``values`` ({row: {field: value}}) changes attributes. The core and QGIS then read the very
    same file. Needs a running QGIS."""
    from qgis.core import (
        QgsCoordinateReferenceSystem,
        QgsCoordinateTransform,
        QgsCoordinateTransformContext,
        QgsFeature,
        QgsGeometry,
        QgsProject,
        QgsVectorFileWriter,
        QgsVectorLayer,
        QgsWkbTypes,
    )

    source = QgsVectorLayer(str(source_path), name, "ogr")
    assert source.isValid(), source_path
    target = QgsCoordinateReferenceSystem(crs) if crs else source.crs()
    kind = QgsWkbTypes.displayString(source.wkbType())
    layer = QgsVectorLayer(f"{kind}?crs={target.authid()}", name, "memory")
    kept = [f for f in source.fields() if f.name() != "fid" and f.name() not in drop]
    layer.dataProvider().addAttributes(kept)
    layer.updateFields()
    transform = QgsCoordinateTransform(source.crs(), target, QgsProject.instance()) if crs else None
    features = []
    for row, feature in enumerate(source.getFeatures()):
        geometry = QgsGeometry(feature.geometry())
        if edit is not None:
            geometry = edit(row, geometry)
        if transform is not None:
            geometry.transform(transform)
        copy = QgsFeature(layer.fields())
        copy.setGeometry(geometry)
        changed = (values or {}).get(row, {})
        copy.setAttributes([changed.get(f.name(), feature[f.name()]) for f in kept])
        features.append(copy)
    layer.dataProvider().addFeatures(features)
    options = QgsVectorFileWriter.SaveVectorOptions()
    options.driverName = "GPKG"
    options.layerName = name
    error = QgsVectorFileWriter.writeAsVectorFormatV3(
        layer, str(path), QgsCoordinateTransformContext(), options
    )
    assert error[0] == QgsVectorFileWriter.NoError, error
    return path


# --------------------------------------------------------------------------- comparing outputs

#: Relative tolerance for "the same number": the same pipeline on the same values.
SAME = 1e-9


def layer_names(layer):
    """The layer's fields, the GeoPackage's own ``fid`` left out."""
    return [n for n in layer.fields().names() if n != "fid"]


def is_null(value):
    """True for NULL (None or a null QVariant) and NaN."""
    from recharge_atlas.plugin.compat import is_null as qgis_null

    return qgis_null(value) or (isinstance(value, float) and math.isnan(value))


def same_value(got, want):
    """A value read back from QGIS against the core's value of the same cell."""
    import numpy as np
    import pandas as pd

    if want is None or want is pd.NaT or (isinstance(want, float) and math.isnan(want)):
        return is_null(got)
    if is_null(got):
        return False
    if isinstance(want, (bool, np.bool_)):
        return bool(got) == bool(want)
    if isinstance(want, pd.Timestamp):
        return got.toPyDate() == want.date()
    if isinstance(want, (int, np.integer)):
        return int(got) == int(want)
    if isinstance(want, (float, np.floating)):
        return math.isclose(float(got), float(want), rel_tol=SAME, abs_tol=1e-12)
    return str(got) == str(want)


def assert_table_is(layer, frame, what, fields=None):
    """``layer`` holds ``frame``: the same fields in order and every cell equal.

    With ``fields``, only those are compared (the catchments keep their own fields too)."""
    names = layer.fields().names()
    if fields is None:
        assert layer_names(layer) == [str(c) for c in frame.columns], what
    assert layer.featureCount() == len(frame), what
    rows = [feature.attributes() for feature in layer.getFeatures()]
    for column in fields or frame.columns:
        index = names.index(column)
        wrong = [
            (i, row[index], want)
            for i, (row, want) in enumerate(zip(rows, frame[column].tolist()))
            if not same_value(row[index], want)
        ]
        assert not wrong, f"{what}.{column}: {len(wrong)} cells differ, first {wrong[:3]}"


def assert_catchments_are(layer, core):
    """The catchment fields the core adds, row by row, equal the core's."""
    from recharge_atlas.algorithms.pipeline import CATCHMENT_FIELDS

    assert_table_is(layer, core.catchments, "catchments", fields=CATCHMENT_FIELDS)


class QgisProcess:
    """Runs ``qgis_process.bin`` in one environment: ``runner(*args)`` waits for the result;
    ``runner.start(*args)`` returns at once, so several runs can share the two cores, and
    ``runner.finish(process)`` waits for one."""

    def __init__(self, env):
        self.env = env

    def __call__(self, *args, timeout=300):
        return subprocess.run(
            [str(QGIS_PROCESS), *map(str, args)],
            env=self.env,
            capture_output=True,
            text=True,
            timeout=timeout,
        )

    def start(self, *args):
        return subprocess.Popen(
            [str(QGIS_PROCESS), *map(str, args)],
            env=self.env,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )

    @staticmethod
    def finish(process, timeout=300):
        try:
            stdout, stderr = process.communicate(timeout=timeout)
        except subprocess.TimeoutExpired:
            process.kill()
            stdout, stderr = process.communicate()
        return subprocess.CompletedProcess(process.args, process.returncode, stdout, stderr)
