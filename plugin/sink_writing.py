"""How the algorithms write their outputs: the fields of every table output, the check that
no output goes into an input's file, the report, the tables, and each sink (a plain GeoPackage
path gets the command line's layer names).

:class:`SinkWriting` is a mixin of :class:`recharge_run.RechargeRunAlgorithm`; sinks are
created only after the run, so a bad input or a cancel leaves no partial layers.
"""

from __future__ import annotations

import re
from pathlib import Path

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessingException,
    QgsProcessingOutputLayerDefinition,
)

from . import compat, conversion
from .progress import _REPORT_END, _RUN_END

#: Fields of each table output, used only when a run gives a table no rows, so a table chained
#: in a model still has its fields. Tests check them against the tables the core returns for
#: the demo region.
_TABLE_FIELDS = {
    "ANNUAL": """gauge_id:string water_year:int64 recharge_mm:double recharge_m3:double
        complete:bool recharge_low_mm:double recharge_high_mm:double baseflow_mm:double
        baseflow_m3:double storage_change_mm:double storage_change_m3:double residual_mm:double
        seasonal_recharge_mm:double flow_mm:double baseflow_index:double days:int64
        days_missing:int64 days_zero_or_flagged:int64 events:int64 events_skipped:int64
        all_events_measured:bool recharge_between_events_mm:double
        incremental_recharge_mm:double""",
    "EVENTS": """gauge_id:string event:int64 peak_date:date rise_start_date:date
        peaks_merged:int64 critical_time_days:double critical_date:date q_before_m3s:double
        q_after_m3s:double pre_anchor_date:date pre_anchor_m3s:double
        pre_extrapolation_days:double post_anchor_date:date post_anchor_m3s:double
        post_extrapolation_days:double recharge_m3:double used:bool anchor_in_gap:bool
        note:string last_peak_date:date reading_share:double close_to_next:bool
        recharge_mm:double""",
    "PERIODS": """gauge_id:string water_year:int64 period:string first_date:date last_date:date
        recharge_mm:double recharge_m3:double complete:bool days_missing:int64
        days_zero_or_flagged:int64 events:int64 events_skipped:int64 close_events:int64""",
    "SEGMENTS": """gauge_id:string first_date:date last_date:date days:int64 slope:double
        recession_index_days:double r2:double mean_flow_m3s:double""",
    "MASTER_RECESSION": """gauge_id:string flow_low_m3s:double flow_high_m3s:double
        segments:int64 recession_index_days:double recession_index_q25:double
        recession_index_q75:double""",
    "DAILY": "gauge_id:string date:date discharge_m3s:double baseflow_m3s:double",
    "LINKS": """gauge_id:string link:string method:string catchment_row:int64 catchment:string
        distance_m:double note:string""",
}


def table_fields(name):
    """``[(field, kind), ...]`` of table output ``name`` (kinds as in conversion.qgs_field)."""
    return [tuple(item.split(":")) for item in _TABLE_FIELDS[name].split()]


def _with_fields(frame, name):
    """``frame``, or when it has no rows, an empty table with the fields of output ``name``."""
    if len(frame):
        return frame
    import pandas as pd

    dtypes = {"string": object, "int64": "int64", "double": float, "bool": bool}
    return pd.DataFrame(
        {
            field: pd.Series(dtype=dtypes.get(kind, "datetime64[ns]"))
            for field, kind in table_fields(name)
        }
    )


def _file_of(source: str):
    """The file behind a layer source or an output destination (``/a/b.gpkg|layername=x``,
    ``ogr:dbname='/a/b.gpkg' table="x" (geom)``); None for memory layers and databases."""
    text = str(source or "").strip()
    match = re.match(r"^ogr:dbname='((?:[^']|'')*)'", text)
    if match:
        text = match.group(1).replace("''", "'")
    text = text.split("|", 1)[0]
    if not text or text.startswith("memory:") or "dbname=" in text or text == "TEMPORARY_OUTPUT":
        return None
    return Path(text)


class SinkWriting:
    """Writing the outputs (a mixin of a ``QgsProcessingAlgorithm``)."""

    def _check_outputs_are_not_inputs(self, parameters, context):
        """Raise InputError when an output would be written into one of the input files (a
        GeoPackage output over the catchments' file would replace or change it), in the
        command line's words."""
        from ..algorithms.errors import InputError
        from ..algorithms.files import same_file

        inputs = []
        for name in self._INPUTS:
            if not self._has(name):
                continue
            layer = self._input_layer(parameters, name, context)
            path = _file_of(layer.source()) if layer is not None else None
            if path:
                inputs.append(path)
        for definition in self.destinationParameterDefinitions():
            name = definition.name()
            if definition.type() == "fileDestination":
                target = self.parameterAsFileOutput(parameters, name, context)
            else:
                target = self.parameterAsOutputLayer(parameters, name, context)
            path = _file_of(target) if target else None
            if path and any(same_file(path, other) for other in inputs):
                raise InputError(
                    f"the output path is one of the input files ({name})", file=str(path)
                )

    def _requested(self, parameters, name, context) -> bool:
        """Whether this algorithm has output ``name`` and the caller asked for it (optional
        outputs may be left unset)."""
        if not self._has(name):
            return False
        return bool(self.parameterAsOutputLayer(parameters, name, context))

    def _write_report(
        self, result, tables, settings, scheme, classes, path, feedback, provenance=None
    ):
        """Write the HTML report after the run and before any layer, so that neither a cancel
        nor a failure leaves a report without layers or layers without it. The core writes it
        atomically and checks the cancel button before each gauge it draws."""
        from ..algorithms.errors import Cancelled
        from ..algorithms.report import write_report
        from .feedback import FeedbackReporter

        if feedback.isCanceled():
            raise Cancelled("run cancelled")
        feedback.setProgressText(self.tr("Writing the report"))
        reporter = FeedbackReporter(
            feedback,
            _RUN_END,
            _REPORT_END,
            self.tr("Drawing the report: gauge {gauge} ({number} of {total})"),
        )
        write_report(
            result,
            path,
            gauges=tables["gauges"].frame,
            scheme=scheme,
            classes=classes,
            settings=settings,
            reporter=reporter,
            provenance=provenance,
        )
        if feedback.isCanceled():
            Path(path).unlink(missing_ok=True)
            raise Cancelled("run cancelled")
        feedback.setProgress(_REPORT_END)

    def _write_tables(self, parameters, context, result, outputs, feedback):
        tables = (  # each built only when asked for: the daily table can be large
            (self.ANNUAL, lambda: result.annual),
            (self.EVENTS, lambda: result.events),
            (self.PERIODS, lambda: result.periods),
            (self.SEGMENTS, lambda: result.segments),
            (self.MASTER_RECESSION, lambda: result.master_recession),
            (self.DAILY, lambda: result.daily()),
            (self.LINKS, lambda: result.links),
        )
        for n, (name, table) in enumerate(tables):
            feedback.setProgress(_REPORT_END + (100.0 - _REPORT_END) * (n + 1) / (len(tables) + 1))
            if not self._requested(parameters, name, context):
                continue
            frame = _with_fields(table(), name)
            target = self._started_geopackage(parameters, name) if len(frame) else None
            if target is not None:
                dest = self._add_table(target, name, frame, context)
                feedback.pushInfo(
                    self.tr("{}: added to {} by the command line's GeoPackage writer").format(
                        name, target[0]
                    )
                )
            else:
                fields, rows = conversion.frame_fields(frame)
                dest = self._write(
                    parameters,
                    name,
                    context,
                    fields,
                    rows,
                    compat.WKB_NO_GEOMETRY,
                    QgsCoordinateReferenceSystem(),
                )
            if dest is not None:
                outputs[name] = dest

    def _started_geopackage(self, parameters, name):
        """``(text, layer, definition)`` when table output ``name`` goes to a GeoPackage given
        as a plain path that this run has already written a layer to; None otherwise.

        Such a table is added by the core's own GeoPackage writer, as on the command line
        (the same columns, types and values), not feature by feature through a QGIS sink: for
        200 gauges x 30 years (170,000 rows) 0.4 s against 3.5 s. Any other destination (a new
        file, a memory layer, a database, another format) gets a sink as before.
        """
        plain = self._plain_geopackage(parameters, name)
        if plain is None:
            return None
        text, layer, definition = plain
        path = Path(text)
        if str(path) not in self.__dict__.get("_gpkg_written", ()) or not path.is_file():
            return None
        return text, layer, definition

    def _add_table(self, target, name, frame, context):
        """Add ``frame`` as table output ``name`` to the GeoPackage of :meth:`_started_geopackage`
        and, when the caller asked for it, have it loaded on completion as a sink would."""
        import sqlite3

        from qgis.core import QgsProcessingContext

        from ..algorithms.geopackage import RESULT_TABLES, add_attribute_table
        from ..algorithms.outputs import disk_full

        text, layer, definition = target
        description = {n: d for n, _, d in RESULT_TABLES}.get(layer, "")
        try:
            db = sqlite3.connect(text)
            try:
                with db:  # one transaction: the table is there whole or not at all
                    add_attribute_table(db, layer, frame, description)
            finally:
                db.close()
        except (OSError, sqlite3.Error) as exc:
            full = disk_full(exc, text, f"writing the {layer} table")
            if full is not None:
                raise full from None
            raise
        dest = f"{text}|layername={layer}"
        project = definition.destinationProject if definition is not None else None
        if project is not None:
            shown = definition.destinationName or self.parameterDefinition(name).description()
            context.addLayerToLoadOnCompletion(
                dest, QgsProcessingContext.LayerDetails(shown, project, name)
            )
        return dest

    #: The layer each output gets inside a GeoPackage given as a plain file path: the names
    #: of the command line's GeoPackage (QGIS would name it after the file). ``OUTPUT`` is
    #: :attr:`OUTPUT_LAYER`.
    LAYER_NAMES = {
        "INCREMENTAL_AREAS": "incremental_areas",
        "CATCHMENTS": "catchments",
        "ANNUAL": "annual",
        "EVENTS": "events",
        "PERIODS": "periods",
        "SEGMENTS": "segments",
        "MASTER_RECESSION": "master_recession",
        "DAILY": "daily",
        "LINKS": "links",
    }
    OUTPUT_LAYER = "catchments"

    def _plain_geopackage(self, parameters, name):
        """``(text, layer, definition)`` when output ``name`` is a plain ``.gpkg`` path (its
        layer name from :attr:`LAYER_NAMES`, the output's definition or None); else None."""
        layer = self.OUTPUT_LAYER if name == self.OUTPUT else self.LAYER_NAMES.get(name)
        value = parameters.get(name)
        definition = value if isinstance(value, QgsProcessingOutputLayerDefinition) else None
        sink = definition.sink.staticValue() if definition is not None else value
        if layer is None or not isinstance(sink, str):
            return None
        text = sink.strip()
        if not text.lower().endswith(".gpkg") or "|" in text or ":" in text.split("/")[0]:
            return None
        return text, layer, definition

    def _named_destination(self, parameters, name, geometry):
        """``parameters`` with output ``name`` sent to its own layer (:attr:`LAYER_NAMES`)
        when it is a plain ``.gpkg`` path: several outputs may then share one file, as on the
        command line. A file this run has not yet written is replaced, as QGIS replaces it for
        a plain path; other destinations are left as they are."""
        plain = self._plain_geopackage(parameters, name)
        if plain is None:
            return parameters
        text, layer, definition = plain
        written = self.__dict__.setdefault("_gpkg_written", set())  # set per run
        path = Path(text)
        if str(path) not in written:
            written.add(str(path))
            if path.is_file():
                path.unlink()
        quoted = text.replace("'", "''")
        named = f"ogr:dbname='{quoted}' table=\"{layer}\"" + (" (geom)" if geometry else "")
        copy = dict(parameters)
        if definition is not None:
            definition = QgsProcessingOutputLayerDefinition(definition)
            definition.sink.setStaticValue(named)
            copy[name] = definition
        else:
            copy[name] = named
        return copy

    def _write(self, parameters, name, context, fields, rows, wkb_type, crs, geometries=None):
        parameters = self._named_destination(parameters, name, wkb_type != compat.WKB_NO_GEOMETRY)
        sink, dest_id = self.parameterAsSink(
            parameters, name, context, fields, wkb_type, crs, compat.SINK_REGENERATE_PRIMARY_KEY
        )
        if sink is None:
            if not dest_id and self.parameterDefinition(name).flags() & compat.PARAMETER_OPTIONAL:
                return None  # an optional output the caller chose not to write
            raise QgsProcessingException(self.invalidSinkError(parameters, name))
        if not conversion.write_rows(sink, fields, rows, geometries):
            if hasattr(self, "writeFeatureError"):
                raise QgsProcessingException(self.writeFeatureError(sink, parameters, name))
            raise QgsProcessingException(f"could not write the features of {name}")
        del sink  # closes the layer before the next output opens the same file
        return dest_id

    def _write_polygons(self, parameters, name, context, frame, crs, keep=None, keep_names=()):
        """Write polygon layer ``frame`` to sink ``name``.

        With ``keep`` (the source the rows came from, row for row), the fields named in
        ``keep_names`` are written as the source had them, and so is each geometry the core
        left as it was; a geometry the core repaired is written as repaired. Without it, every
        geometry is the frame's.
        """
        fields, rows = conversion.frame_fields(frame, keep=keep, keep_names=keep_names)
        wkb_type, geometries = conversion.output_geometries(frame, keep)
        return self._write(parameters, name, context, fields, rows, wkb_type, crs, geometries)
