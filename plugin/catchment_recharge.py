"""Processing algorithm ``catchmentrecharge``: recharge for every gauged catchment.

A thin shell over :func:`recharge_atlas.algorithms.pipeline.run_atlas`, the pipeline the
command line uses too, so both give the same numbers. The core is imported only when the
algorithm runs, so the provider loads and lists the algorithm even when pandas, scipy or
geopandas are missing.
"""

from __future__ import annotations

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterNumber,
)

from . import compat, conversion, styling
from .base import RechargeAtlasAlgorithm

# Used only when the core cannot be imported (numpy missing), so the dialog can still be drawn;
# tests check that they equal recharge_atlas.algorithms.units.
_UNIT_LABELS = ("m3/s", "L/s", "ft3/s", "ML/d")
_UNIT_ALIASES = {"cfs": "ft3/s"}


def unit_labels():
    """The discharge unit labels and their aliases, from the core when it imports."""
    try:
        from ..algorithms.units import DISCHARGE_UNITS, UNIT_ALIASES
    except ImportError:
        return list(_UNIT_LABELS), dict(_UNIT_ALIASES)
    return list(DISCHARGE_UNITS), dict(UNIT_ALIASES)


# Share of the progress bar for each stage.
_READ_END, _RUN_END = 15.0, 90.0


class CatchmentRecharge(RechargeAtlasAlgorithm):
    """Mean annual, annual and event recharge by recession-curve displacement (Rorabaugh 1964)."""

    GAUGES = "GAUGES"
    GAUGE_ID_FIELD = "GAUGE_ID_FIELD"
    DISCHARGE = "DISCHARGE"
    DISCHARGE_GAUGE_FIELD = "DISCHARGE_GAUGE_FIELD"
    DATE_FIELD = "DATE_FIELD"
    VALUE_FIELD = "VALUE_FIELD"
    CATCHMENTS = "CATCHMENTS"
    CATCHMENT_GAUGE_FIELD = "CATCHMENT_GAUGE_FIELD"
    UNITS = "UNITS"
    WATER_YEAR_START = "WATER_YEAR_START"
    OUTPUT = "OUTPUT"
    ANNUAL = "ANNUAL"
    EVENTS = "EVENTS"

    def name(self):
        return "catchmentrecharge"

    def displayName(self):  # noqa: N802 (QGIS API name)
        return self.tr("Catchment recharge")

    def group(self):
        return self.tr("Recharge")

    def groupId(self):  # noqa: N802
        return "recharge"

    def shortDescription(self):  # noqa: N802
        return self.tr(
            "Groundwater recharge for each gauged catchment from daily streamflow, by "
            "recession-curve displacement; adds mean annual recharge to the catchment polygons."
        )

    def tags(self):
        return self.tr(
            "groundwater,recharge,streamflow,discharge,recession index,critical time,"
            "water year,baseflow,hydrology,catchment"
        ).split(",")

    def initAlgorithm(self, config=None):  # noqa: N802
        labels, _aliases = unit_labels()
        self.addParameter(
            QgsProcessingParameterFeatureSource(
                self.GAUGES, self.tr("Stream gauges"), [compat.SOURCE_POINT]
            )
        )
        self.addParameter(
            QgsProcessingParameterField(
                self.GAUGE_ID_FIELD,
                self.tr("Gauge id field"),
                defaultValue="gauge_id",
                parentLayerParameterName=self.GAUGES,
                type=compat.FIELD_ANY,
                optional=True,
            )
        )
        self.addParameter(
            QgsProcessingParameterFeatureSource(
                self.DISCHARGE,
                self.tr("Daily discharge table"),
                [compat.SOURCE_VECTOR],
            )
        )
        self.addParameter(
            QgsProcessingParameterField(
                self.DISCHARGE_GAUGE_FIELD,
                self.tr("Gauge id field in the discharge table"),
                defaultValue="gauge_id",
                parentLayerParameterName=self.DISCHARGE,
                type=compat.FIELD_ANY,
                optional=True,
            )
        )
        self.addParameter(
            QgsProcessingParameterField(
                self.DATE_FIELD,
                self.tr("Date field"),
                defaultValue="date",
                parentLayerParameterName=self.DISCHARGE,
                type=compat.FIELD_ANY,
                optional=True,
            )
        )
        self.addParameter(
            QgsProcessingParameterField(
                self.VALUE_FIELD,
                self.tr("Discharge field"),
                defaultValue="discharge",
                parentLayerParameterName=self.DISCHARGE,
                type=compat.FIELD_ANY,
                optional=True,
            )
        )
        self.addParameter(
            QgsProcessingParameterFeatureSource(
                self.CATCHMENTS,
                self.tr("Catchments"),
                [compat.SOURCE_POLYGON],
            )
        )
        self.addParameter(
            QgsProcessingParameterField(
                self.CATCHMENT_GAUGE_FIELD,
                self.tr("Gauge id field in the catchments"),
                parentLayerParameterName=self.CATCHMENTS,
                type=compat.FIELD_ANY,
                optional=True,
            )
        )
        self.addParameter(
            QgsProcessingParameterEnum(
                self.UNITS,
                self.tr("Discharge units"),
                options=labels,
                defaultValue=labels[0],
                usesStaticStrings=True,
            )
        )
        self.addParameter(
            QgsProcessingParameterNumber(
                self.WATER_YEAR_START,
                self.tr("Water year starts in month"),
                type=compat.NUMBER_INTEGER,
                defaultValue=10,
                minValue=1,
                maxValue=12,
            )
        )
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                self.OUTPUT, self.tr("Catchment recharge"), compat.SOURCE_POLYGON
            )
        )
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                self.ANNUAL,
                self.tr("Recharge by water year"),
                compat.SOURCE_VECTOR,
                optional=True,
                createByDefault=True,
            )
        )
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                self.EVENTS,
                self.tr("Recharge events"),
                compat.SOURCE_VECTOR,
                optional=True,
                createByDefault=True,
            )
        )

    # ---------------------------------------------------------------- parameters

    #: Field parameters whose defaults apply when left empty. They are declared optional
    #: because QGIS 3.22 (processing.run, qgis_process) rejects a missing mandatory field
    #: parameter even when it has a default; the command line's defaults should hold for
    #: scripts too.
    _DEFAULT_FIELDS = (GAUGE_ID_FIELD, DATE_FIELD, VALUE_FIELD)

    def _completed(self, parameters):
        """``parameters`` with the default fields filled in and ``cfs`` read as ``ft3/s``."""
        parameters = dict(parameters or {})
        for name in self._DEFAULT_FIELDS:
            if parameters.get(name) in (None, ""):
                parameters[name] = self.parameterDefinition(name).defaultValue()
        value = parameters.get(self.UNITS)
        if isinstance(value, str):
            labels, aliases = unit_labels()
            label = aliases.get(value.strip(), value.strip())
            if label in labels:
                parameters[self.UNITS] = label
        return parameters

    def checkParameterValues(self, parameters, context):  # noqa: N802
        parameters = self._completed(parameters)
        value = parameters.get(self.UNITS)
        labels, aliases = unit_labels()
        if isinstance(value, str) and value.strip() not in labels:
            allowed = ", ".join(labels + sorted(aliases))
            return False, self.tr("units was {!r}; expected one of {}").format(value, allowed)
        return super().checkParameterValues(parameters, context)

    def _units(self, parameters, context) -> str:
        value = parameters.get(self.UNITS)
        labels, _aliases = unit_labels()
        if isinstance(value, str) and value.strip() in labels:
            return value.strip()
        return self.parameterAsEnumString(parameters, self.UNITS, context)

    # ---------------------------------------------------------------- the work

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802
        self.require_dependencies()
        feedback = feedback or QgsProcessingFeedback()
        parameters = self._completed(parameters)

        gauges = self.source(parameters, self.GAUGES, context)
        discharge = self.source(parameters, self.DISCHARGE, context)
        catchments = self.source(parameters, self.CATCHMENTS, context)
        gauge_field = self.field_name(parameters, self.GAUGE_ID_FIELD, context)
        discharge_gauge_field = self.field_name(parameters, self.DISCHARGE_GAUGE_FIELD, context)
        date_field = self.field_name(parameters, self.DATE_FIELD, context)
        value_field = self.field_name(parameters, self.VALUE_FIELD, context)
        catchment_gauge_field = self.field_name(parameters, self.CATCHMENT_GAUGE_FIELD, context)
        units = self._units(parameters, context)
        water_year_start = self.parameterAsInt(parameters, self.WATER_YEAR_START, context)

        from ..algorithms.errors import Cancelled, InputError
        from ..algorithms.pipeline import Settings, run_atlas
        from .feedback import FeedbackReporter

        settings = Settings(
            units=units,
            water_year_start=water_year_start,
            gauge_id_field=gauge_field or "gauge_id",
            discharge_gauge_field=discharge_gauge_field or None,
            date_field=date_field or "date",
            value_field=value_field or "discharge",
            catchment_gauge_field=catchment_gauge_field or None,
        )
        try:
            settings = settings.resolved()
            tables = self._read_inputs(gauges, discharge, catchments, settings, feedback)
            reporter = FeedbackReporter(feedback, _READ_END, _RUN_END)
            result = run_atlas(
                tables["gauges"].frame,
                tables["catchments"].frame,
                tables["discharge"].frame,
                settings,
                reporter,
            )
        except InputError as exc:
            raise QgsProcessingException(str(exc)) from None
        except Cancelled:
            raise QgsProcessingException(
                self.tr("Run cancelled: no outputs were written.")
            ) from None

        # Sinks are created only now, so a bad input or a cancel leaves no partial layers.
        feedback.setProgressText(self.tr("Writing the outputs"))
        catchment_table = tables["catchments"]
        if len(result.catchments) != len(catchment_table.rows):
            raise QgsProcessingException("the pipeline returned a different number of catchments")
        outputs = {}
        fields, rows = conversion.frame_fields(
            result.catchments, keep=catchment_table, keep_names=self._kept_catchment_fields(result)
        )
        outputs[self.OUTPUT] = self._write(
            parameters,
            self.OUTPUT,
            context,
            fields,
            rows,
            catchments.wkbType(),
            catchments.sourceCrs(),
            catchment_table.geometries,
        )
        feedback.setProgress(95.0)
        for name, frame in ((self.ANNUAL, result.annual), (self.EVENTS, result.events)):
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
        feedback.setProgress(100.0)

        dest_id = outputs[self.OUTPUT]
        if context.willLoadLayerOnCompletion(dest_id):
            context.layerToLoadOnCompletionDetails(dest_id).setPostProcessor(
                styling.recharge_post_processor()
            )
        return outputs

    @staticmethod
    def _kept_catchment_fields(result):
        from ..algorithms.pipeline import CATCHMENT_FIELDS

        return [c for c in result.catchments.columns if c not in CATCHMENT_FIELDS]

    def _read_inputs(self, gauges, discharge, catchments, settings, feedback):
        """Read the three sources into pandas, checking the fields first so errors come early."""
        import pandas as pd

        from ..algorithms.discharge import require_columns

        def check(source, names, what):
            require_columns(pd.DataFrame(columns=source.fields().names()), names, what)

        check(gauges, [settings.gauge_id_field], "gauges layer")
        check(catchments, [settings.catchment_gauge_field], "catchments layer")
        wanted = list(
            dict.fromkeys(
                [settings.discharge_gauge_field, settings.date_field, settings.value_field]
            )
        )
        check(discharge, wanted, "discharge table")

        tables = {}
        steps = (  # what, source, fields (None: all), with geometry, keep raw rows
            ("gauges", gauges, None, True, False),
            ("catchments", catchments, None, True, True),
            ("discharge", discharge, wanted, False, False),
        )
        for n, (what, source, names, with_geometry, keep_rows) in enumerate(steps):
            feedback.setProgressText(self.tr("Reading the {}").format(what))
            table = conversion.read_source(
                source,
                field_names=names,
                with_geometry=with_geometry,
                keep_rows=keep_rows,
                feedback=feedback,
                what=what,
            )
            if table is None or feedback.isCanceled():
                from ..algorithms.errors import Cancelled

                raise Cancelled("run cancelled")
            tables[what] = table
            feedback.setProgress(_READ_END * (n + 1) / len(steps))
        return tables

    def _write(self, parameters, name, context, fields, rows, wkb_type, crs, geometries=None):
        sink, dest_id = self.parameterAsSink(
            parameters, name, context, fields, wkb_type, crs, compat.SINK_REGENERATE_PRIMARY_KEY
        )
        if sink is None:
            if not dest_id and self.parameterDefinition(name).flags() & compat.PARAMETER_OPTIONAL:
                return None  # an optional table the caller chose not to write
            raise QgsProcessingException(self.invalidSinkError(parameters, name))
        if not conversion.write_rows(sink, fields, rows, geometries):
            if hasattr(self, "writeFeatureError"):
                raise QgsProcessingException(self.writeFeatureError(sink, parameters, name))
            raise QgsProcessingException(f"could not write the features of {name}")
        del sink  # closes the layer before the next output opens the same file
        return dest_id
