"""Processing algorithm ``catchmentrecharge``: recharge for every gauged catchment.

A thin shell over :func:`recharge_atlas.algorithms.pipeline.run_atlas`, the pipeline the
command line uses too, so both give the same numbers. The core is imported only when the
algorithm runs, so the provider loads and lists the algorithm even when pandas, scipy or
geopandas are missing.
"""

from __future__ import annotations

import re

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
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


#: Baseflow separation methods: the core's id and the label the dialog shows.
BASEFLOW_METHODS = {
    "eckhardt": "Eckhardt filter",
    "lyne_hollick": "Lyne-Hollick filter",
    "smoothed_minima": "smoothed minima",
}
#: How recharge is summed within the water year (the core's ids, shown as they are).
PERIODS = ("month", "season")
# Defaults of the core's Settings, declared here so the dialog can be drawn without the core;
# tests check that they equal recharge_atlas.algorithms.pipeline.Settings().
_BFI_MAX = 0.80
_MIN_SEGMENT_DAYS = 7


def _plain(text) -> str:
    """Lower case, with runs of spaces, hyphens, dashes and underscores as one space."""
    return re.sub(r"[\s_\-\u2010-\u2015]+", " ", str(text).strip().lower()).strip()


def baseflow_method_id(value):
    """The core id of a baseflow method given by its label or its id (None when unknown).

    >>> baseflow_method_id("Lyne-Hollick filter"), baseflow_method_id("smoothed_minima")
    ('lyne_hollick', 'smoothed_minima')
    """
    key = _plain(value)
    for method, label in BASEFLOW_METHODS.items():
        if key in (_plain(method), _plain(label)):
            return method
    return None


#: Fields of each table output, used only when a run gives a table no rows: the core then
#: returns the gauge id alone, and a table chained in a model should still have its fields.
#: Tests check them against the tables the core returns for the demo region.
_TABLE_FIELDS = {
    "ANNUAL": """gauge_id:string water_year:int64 recharge_mm:double recharge_m3:double
        complete:bool recharge_low_mm:double recharge_high_mm:double baseflow_mm:double
        baseflow_m3:double storage_change_mm:double storage_change_m3:double residual_mm:double
        seasonal_recharge_mm:double flow_mm:double baseflow_index:double days:int64
        days_missing:int64 events:int64 events_skipped:int64 incremental_recharge_mm:double""",
    "EVENTS": """gauge_id:string event:int64 peak_date:date rise_start_date:date
        peaks_merged:int64 critical_time_days:double critical_date:date q_before_m3s:double
        q_after_m3s:double pre_anchor_date:date pre_anchor_m3s:double
        pre_extrapolation_days:double post_anchor_date:date post_anchor_m3s:double
        post_extrapolation_days:double recharge_m3:double used:bool anchor_in_gap:bool
        note:string recharge_mm:double""",
    "PERIODS": """gauge_id:string water_year:int64 period:string first_date:date last_date:date
        recharge_mm:double recharge_m3:double complete:bool days_missing:int64 events:int64
        events_skipped:int64""",
    "SEGMENTS": """gauge_id:string first_date:date last_date:date days:int64 slope:double
        recession_index_days:double r2:double mean_flow_m3s:double""",
    "MASTER_RECESSION": """gauge_id:string flow_low_m3s:double flow_high_m3s:double
        segments:int64 recession_index_days:double recession_index_q25:double
        recession_index_q75:double""",
    "DAILY": "gauge_id:string date:date discharge_m3s:double baseflow_m3s:double",
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


def _option_text(value, options):
    """An enum value given as an index read as its option's text; other values unchanged."""
    if isinstance(value, int) and not isinstance(value, bool) and 0 <= value < len(options):
        return options[value]
    return value


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
    RECESSION_INDEX = "RECESSION_INDEX"
    RECESSION_INDEX_FIELD = "RECESSION_INDEX_FIELD"
    RUNOFF_END_LAG = "RUNOFF_END_LAG"
    MIN_SEGMENT_DAYS = "MIN_SEGMENT_DAYS"
    FLAG_FIELD = "FLAG_FIELD"
    FLAG_VALUES = "FLAG_VALUES"
    BASEFLOW_METHOD = "BASEFLOW_METHOD"
    BFI_MAX = "BFI_MAX"
    PERIOD = "PERIOD"
    OUTPUT = "OUTPUT"
    ANNUAL = "ANNUAL"
    EVENTS = "EVENTS"
    PERIODS = "PERIODS"
    SEGMENTS = "SEGMENTS"
    MASTER_RECESSION = "MASTER_RECESSION"
    DAILY = "DAILY"

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
        self._init_method_parameters()
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
        for name, label in (
            (self.PERIODS, self.tr("Recharge by month or season")),
            (self.SEGMENTS, self.tr("Recession segments")),
            (self.MASTER_RECESSION, self.tr("Recession index by flow level")),
            (self.DAILY, self.tr("Daily discharge and baseflow")),
        ):
            self.addParameter(
                QgsProcessingParameterFeatureSink(
                    name, label, compat.SOURCE_VECTOR, optional=True, createByDefault=False
                )
            )

    def _init_method_parameters(self):
        """The advanced parameters: recession index, record quality, baseflow and periods."""
        self.add_advanced(
            QgsProcessingParameterNumber(
                self.RECESSION_INDEX,
                self.tr("Recession index K for all gauges (days; empty: estimate)"),
                type=compat.NUMBER_DOUBLE,
                optional=True,
                minValue=0.0,
            )
        )
        self.add_advanced(
            QgsProcessingParameterField(
                self.RECESSION_INDEX_FIELD,
                self.tr("Recession index field in the gauges (days; empty values: estimate)"),
                parentLayerParameterName=self.GAUGES,
                type=compat.FIELD_NUMERIC,
                optional=True,
            )
        )
        self.add_advanced(
            QgsProcessingParameterNumber(
                self.RUNOFF_END_LAG,
                self.tr("Runoff-end lag N (days; empty: from drainage area)"),
                type=compat.NUMBER_DOUBLE,
                optional=True,
                minValue=0.0,
            )
        )
        self.add_advanced(
            QgsProcessingParameterNumber(
                self.MIN_SEGMENT_DAYS,
                self.tr("Minimum recession segment length (days)"),
                type=compat.NUMBER_INTEGER,
                defaultValue=_MIN_SEGMENT_DAYS,
                minValue=2,
            )
        )
        self.add_advanced(
            QgsProcessingParameterField(
                self.FLAG_FIELD,
                self.tr("Quality-code field in the discharge table"),
                parentLayerParameterName=self.DISCHARGE,
                type=compat.FIELD_ANY,
                optional=True,
            )
        )
        self.add_advanced(
            QgsProcessingParameterString(
                self.FLAG_VALUES,
                self.tr("Codes that mark a value unusable (comma-separated; empty: any code)"),
                optional=True,
            )
        )
        labels = list(BASEFLOW_METHODS.values())
        self.add_advanced(
            QgsProcessingParameterEnum(
                self.BASEFLOW_METHOD,
                self.tr("Baseflow separation method"),
                options=labels,
                defaultValue=labels[0],
                usesStaticStrings=True,
            )
        )
        self.add_advanced(
            QgsProcessingParameterNumber(
                self.BFI_MAX,
                self.tr("BFImax of the Eckhardt filter"),
                type=compat.NUMBER_DOUBLE,
                defaultValue=_BFI_MAX,
                minValue=0.0,
                maxValue=1.0,
            )
        )
        self.add_advanced(
            QgsProcessingParameterEnum(
                self.PERIOD,
                self.tr("Recharge within the year by"),
                options=list(PERIODS),
                defaultValue=PERIODS[0],
                usesStaticStrings=True,
            )
        )

    # ---------------------------------------------------------------- parameters

    #: Field parameters whose defaults apply when left empty. They are declared optional
    #: because QGIS 3.22 (processing.run, qgis_process) rejects a missing mandatory field
    #: parameter even when it has a default; the command line's defaults should hold for
    #: scripts too.
    _DEFAULT_FIELDS = (GAUGE_ID_FIELD, DATE_FIELD, VALUE_FIELD)

    def _completed(self, parameters):
        """``parameters`` with the default fields filled in and aliases read as labels:
        ``cfs`` as ``ft3/s``, a baseflow method's core id (``lyne_hollick``) as its label, and
        an option's index (as older scripts pass it) as its text."""
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
        labels = list(BASEFLOW_METHODS.values())
        value = _option_text(parameters.get(self.BASEFLOW_METHOD), labels)
        if isinstance(value, str) and baseflow_method_id(value) is not None:
            value = BASEFLOW_METHODS[baseflow_method_id(value)]
        if value is not None:
            parameters[self.BASEFLOW_METHOD] = value
        value = _option_text(parameters.get(self.PERIOD), PERIODS)
        if isinstance(value, str) and _plain(value) in PERIODS:
            value = _plain(value)
        if value is not None:
            parameters[self.PERIOD] = value
        return parameters

    def checkParameterValues(self, parameters, context):  # noqa: N802
        parameters = self._completed(parameters)
        value = parameters.get(self.UNITS)
        labels, aliases = unit_labels()
        if isinstance(value, str) and value.strip() not in labels:
            allowed = ", ".join(labels + sorted(aliases))
            return False, self.tr("units was {!r}; expected one of {}").format(value, allowed)
        value = parameters.get(self.BASEFLOW_METHOD)
        if isinstance(value, str) and value not in BASEFLOW_METHODS.values():
            return False, self._unknown_method(value)
        value = parameters.get(self.PERIOD)
        if isinstance(value, str) and value not in PERIODS:
            return False, self.tr("period was {!r}; expected one of {}").format(
                value, ", ".join(PERIODS)
            )
        problem = self._value_problem(parameters, context)
        if problem:
            return False, problem
        return super().checkParameterValues(parameters, context)

    def _unknown_method(self, value) -> str:
        return self.tr("baseflow method was {!r}; expected one of {} (or {})").format(
            value, ", ".join(BASEFLOW_METHODS.values()), ", ".join(BASEFLOW_METHODS)
        )

    #: The parameters whose values the core checks, and the Settings attribute of each.
    _SETTING_OF = {
        WATER_YEAR_START: "water_year_start",
        RECESSION_INDEX: "recession_index_days",
        RUNOFF_END_LAG: "runoff_end_lag_days",
        MIN_SEGMENT_DAYS: "min_segment_days",
        BASEFLOW_METHOD: "baseflow_method",
        BFI_MAX: "bfi_max",
        PERIOD: "period",
    }

    def _value_problem(self, parameters, context):
        """The core's message for the first value it refuses, with the parameter id; None when
        all are fine or the core cannot be imported (processAlgorithm then says what to
        install). The core checks the values, so the rules live in one place."""
        try:
            from ..algorithms.errors import InputError
            from ..algorithms.pipeline import Settings
        except ImportError:
            return None
        values = self._setting_values(parameters, context)
        for name, attribute in self._SETTING_OF.items():
            try:
                Settings(**{attribute: values[attribute]}).resolved()
            except InputError as exc:
                return f"{exc} ({name})"
        return None

    def _number(self, parameters, name, context):
        """A number parameter as given (its default when empty, None when optional and empty).

        Plain numbers and numeric text pass through as numbers and other text as it is, so the
        core's message can quote a bad value; anything else (an expression) is evaluated."""
        value = parameters.get(name)
        if value is None or compat.is_null(value) or (isinstance(value, str) and not value.strip()):
            return self.parameterDefinition(name).defaultValue()
        if isinstance(value, (int, float)):
            return value
        if isinstance(value, str):
            try:
                return float(value)
            except ValueError:
                return value.strip()
        return self.parameterAsDouble(parameters, name, context)

    def _choice(self, parameters, name, context):
        """An enum parameter's option text, as given (checked by the core) or evaluated."""
        value = parameters.get(name)
        if isinstance(value, str) or (isinstance(value, int) and not isinstance(value, bool)):
            return value
        return self.parameterAsEnumString(parameters, name, context)

    def _setting_values(self, parameters, context) -> dict:
        """Settings of the method, by attribute name, read from the parameters."""
        label = self._choice(parameters, self.BASEFLOW_METHOD, context)
        method = baseflow_method_id(label) if isinstance(label, str) else None
        flags = self.parameterAsString(parameters, self.FLAG_VALUES, context).strip()
        return {
            "water_year_start": self._number(parameters, self.WATER_YEAR_START, context),
            "recession_index_days": self._number(parameters, self.RECESSION_INDEX, context),
            "runoff_end_lag_days": self._number(parameters, self.RUNOFF_END_LAG, context),
            "min_segment_days": self._number(parameters, self.MIN_SEGMENT_DAYS, context),
            "baseflow_method": method or label,
            "bfi_max": self._number(parameters, self.BFI_MAX, context),
            "period": self._choice(parameters, self.PERIOD, context),
            "flag_values": flags or None,
        }

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
        k_field = self.field_name(parameters, self.RECESSION_INDEX_FIELD, context)
        flag_field = self.field_name(parameters, self.FLAG_FIELD, context)
        values = self._setting_values(parameters, context)

        from ..algorithms.errors import Cancelled, InputError
        from ..algorithms.pipeline import Settings, run_atlas
        from .feedback import FeedbackReporter, push_warning

        settings = Settings(
            units=units,
            gauge_id_field=gauge_field or "gauge_id",
            discharge_gauge_field=discharge_gauge_field or None,
            date_field=date_field or "date",
            value_field=value_field or "discharge",
            catchment_gauge_field=catchment_gauge_field or None,
            flag_field=flag_field or None,
            recession_index_field=k_field or None,
            **values,
        )
        try:
            settings = settings.resolved()
            self._explain_settings(settings, feedback, push_warning)
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
        tables = (  # each built only when asked for: the daily table can be large
            (self.ANNUAL, lambda: result.annual),
            (self.EVENTS, lambda: result.events),
            (self.PERIODS, lambda: result.periods),
            (self.SEGMENTS, lambda: result.segments),
            (self.MASTER_RECESSION, lambda: result.master_recession),
            (self.DAILY, result.daily),
        )
        for n, (name, table) in enumerate(tables):
            feedback.setProgress(_RUN_END + (100.0 - _RUN_END) * (n + 1) / (len(tables) + 1))
            if not self._requested(parameters, name, context):
                continue
            fields, rows = conversion.frame_fields(_with_fields(table(), name))
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

    def _explain_settings(self, settings, feedback, push_warning):
        """Say in the log when a setting has no effect, or how two of them combine."""
        if settings.flag_values and not settings.flag_field:
            push_warning(
                feedback,
                self.tr(
                    "Quality codes were given (FLAG_VALUES) but no quality-code field "
                    "(FLAG_FIELD): no value is left out"
                ),
            )
        if settings.baseflow_method != "eckhardt" and settings.bfi_max != _BFI_MAX:
            feedback.pushInfo(self.tr("BFImax is used by the Eckhardt filter only"))
        if settings.recession_index_field and settings.recession_index_days is not None:
            feedback.pushInfo(
                self.tr(
                    "Recession index from the field {} where it has a value, else {:g} days"
                ).format(settings.recession_index_field, settings.recession_index_days)
            )

    def _requested(self, parameters, name, context) -> bool:
        """Whether the caller asked for output ``name`` (optional outputs may be left unset)."""
        return bool(self.parameterAsOutputLayer(parameters, name, context))

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

        gauge_fields = [settings.gauge_id_field]
        if settings.recession_index_field:
            gauge_fields.append(settings.recession_index_field)
        check(gauges, gauge_fields, "gauges layer")
        check(catchments, [settings.catchment_gauge_field], "catchments layer")
        wanted = [settings.discharge_gauge_field, settings.date_field, settings.value_field]
        if settings.flag_field:
            wanted.append(settings.flag_field)
        wanted = list(dict.fromkeys(wanted))
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
