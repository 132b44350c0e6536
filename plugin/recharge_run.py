"""What every Recharge Atlas algorithm that reads gauges shares.

``catchmentrecharge`` and ``subbasinrecharge`` differ only in how basins are described (total
drainage areas, or a subbasin map). Both take the same gauges, discharge table, units and
method parameters, and write the same tables, so those are declared, read, checked and written
here once. The rest of the toolbox is built on the same machinery: the gauge algorithms
(``recessionindex``, ``baseflowseparation``, ``eventrecharge``; :mod:`gauge_run`) run without
basins, ``linkcheck`` without discharge, and ``rechargereport`` writes only the page. Each
declares only the parameters it uses (:meth:`RechargeRunAlgorithm._init_method_parameters`);
the others keep the core's defaults. The core is imported only when an algorithm runs, so the
provider loads and lists the algorithms even when pandas, scipy or geopandas are missing.
"""

from __future__ import annotations

import re
from pathlib import Path

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsProcessingOutputLayerDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
)

from . import compat, conversion, direct_read, styling
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


# Choices: the core's id and the label the dialog shows. Scripts may pass either (or the
# option's index); tests check the ids against the core.
#: Baseflow separation methods.
BASEFLOW_METHODS = {
    "eckhardt": "Eckhardt filter",
    "lyne_hollick": "Lyne-Hollick filter",
    "smoothed_minima": "smoothed minima",
}
#: How recharge is summed within the water year (the core's ids, shown as they are).
PERIODS = ("month", "season")
_PERIOD_CHOICES = {period: period for period in PERIODS}
#: How gauges find their catchments.
LINK_METHODS = {
    "auto": "auto (by gauge id if the catchments have it; else by location)",
    "id": "by gauge id",
    "spatial": "by location (gauge at the outlet)",
}
#: What subbasins with no gauge downstream get.
UNGAUGED_CHOICES = {
    "donor": "depth of the nearest gauged subbasin",
    "empty": "no estimate",
}
#: How the map's class limits are drawn (the core's schemes).
MAP_CLASSES = {
    "quantiles": "quantiles",
    "equal_interval": "equal interval",
    "natural_breaks": "natural breaks",
}
# Defaults of the core's Settings, declared here so the dialog can be drawn without the core;
# tests check that they equal recharge_atlas.algorithms.pipeline.Settings().
_BFI_MAX = 0.80
_MIN_SEGMENT_DAYS = 7
_LINK_TOLERANCE_M = 100.0
_OVERLAP_TOLERANCE = 0.05
# Of the core's maps: the number of classes of the command line's map, and the most a map may
# have (tests check them).
_CLASS_COUNT = 5
_MAX_CLASSES = 12


def _plain(text) -> str:
    """Lower case, with runs of spaces, hyphens, dashes and underscores as one space."""
    return re.sub(r"[\s_\-\u2010-\u2015]+", " ", str(text).strip().lower()).strip()


def choice_id(value, choices):
    """The core id of a choice given by its label or its id (None when unknown).

    >>> choice_id("Lyne-Hollick filter", BASEFLOW_METHODS), choice_id("natural breaks", MAP_CLASSES)
    ('lyne_hollick', 'natural_breaks')
    """
    key = _plain(value)
    for core_id, label in choices.items():
        if key in (_plain(core_id), _plain(label)):
            return core_id
    return None


def baseflow_method_id(value):
    """The core id of a baseflow method given by its label or its id (None when unknown).

    >>> baseflow_method_id("Lyne-Hollick filter"), baseflow_method_id("smoothed_minima")
    ('lyne_hollick', 'smoothed_minima')
    """
    return choice_id(value, BASEFLOW_METHODS)


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


def _option_text(value, options):
    """An enum value given as an index (a number, or digits as ``qgis_process`` passes it)
    read as its option's text; other values unchanged. No option is a number, so digits can
    only mean an index."""
    index = int(value.strip()) if isinstance(value, str) and value.strip().isdigit() else value
    if isinstance(index, int) and not isinstance(index, bool) and 0 <= index < len(options):
        return options[index]
    return value


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


# Share of the progress bar for each stage.
_READ_END, _RUN_END, _REPORT_END = 15.0, 85.0, 90.0


class RechargeRunAlgorithm(RechargeAtlasAlgorithm):
    """Base of the algorithms: read the parameters and sources, run the core, write the sinks.

    Subclasses declare their parameters in ``initAlgorithm`` with the builders here, and
    implement :meth:`_basin_sources`, :meth:`_basin_settings`, :meth:`_check_basin_fields`,
    :meth:`_run` and :meth:`_write_basins`; :meth:`_prepare`, :meth:`_gauge_fields` and
    :meth:`_summarize` may be overridden.
    """

    GAUGES = "GAUGES"
    GAUGE_ID_FIELD = "GAUGE_ID_FIELD"
    DISCHARGE = "DISCHARGE"
    DISCHARGE_GAUGE_FIELD = "DISCHARGE_GAUGE_FIELD"
    DATE_FIELD = "DATE_FIELD"
    VALUE_FIELD = "VALUE_FIELD"
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
    LINK = "LINK"
    LINK_TOLERANCE = "LINK_TOLERANCE"
    OVERLAP_TOLERANCE = "OVERLAP_TOLERANCE"
    REPORTED_AREA_FIELD = "REPORTED_AREA_FIELD"
    AREA_FIELD = "AREA_FIELD"
    CLASSES = "CLASSES"
    CLASS_COUNT = "CLASS_COUNT"
    WORKERS = "WORKERS"
    UNGAUGED = "UNGAUGED"
    OUTPUT = "OUTPUT"
    ANNUAL = "ANNUAL"
    EVENTS = "EVENTS"
    PERIODS = "PERIODS"
    SEGMENTS = "SEGMENTS"
    MASTER_RECESSION = "MASTER_RECESSION"
    DAILY = "DAILY"
    LINKS = "LINKS"
    REPORT = "REPORT"

    #: Enum parameters whose options stand for core ids: parameter -> {core id: label}.
    _CHOICES = {
        BASEFLOW_METHOD: BASEFLOW_METHODS,
        PERIOD: _PERIOD_CHOICES,
        LINK: LINK_METHODS,
        UNGAUGED: UNGAUGED_CHOICES,
        CLASSES: MAP_CLASSES,
    }
    #: How error messages name each choice.
    _CHOICE_NAMES = {
        BASEFLOW_METHOD: "baseflow method",
        PERIOD: "period",
        LINK: "link",
        UNGAUGED: "ungauged",
        CLASSES: "map classes",
    }

    def group(self):
        return self.tr("Recharge")

    def groupId(self):  # noqa: N802 (QGIS API name)
        return "recharge"

    # ---------------------------------------------------------------- declaring parameters

    def _init_gauge_parameters(self):
        """GAUGES and its id field, the discharge table and its three fields."""
        self._init_gauge_layer_parameters()
        self._init_discharge_parameters()

    def _init_gauge_layer_parameters(self):
        """GAUGES (points) and its id field."""
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

    def _init_discharge_parameters(self):
        """DISCHARGE (any table QGIS reads) and its gauge id, date and value fields."""
        self.addParameter(
            QgsProcessingParameterFeatureSource(
                self.DISCHARGE,
                self.tr("Daily discharge table"),
                [compat.SOURCE_VECTOR],
            )
        )
        for name, label, default in (
            (
                self.DISCHARGE_GAUGE_FIELD,
                self.tr("Gauge id field in the discharge table"),
                "gauge_id",
            ),
            (self.DATE_FIELD, self.tr("Date field"), "date"),
            (self.VALUE_FIELD, self.tr("Discharge field"), "discharge"),
        ):
            self.addParameter(
                QgsProcessingParameterField(
                    name,
                    label,
                    defaultValue=default,
                    parentLayerParameterName=self.DISCHARGE,
                    type=compat.FIELD_ANY,
                    optional=True,
                )
            )

    def _init_area_parameter(self):
        """AREA_FIELD: the gauges' drainage areas (km²), for the algorithms without basins."""
        self.addParameter(
            QgsProcessingParameterField(
                self.AREA_FIELD,
                self.tr("Drainage area field in the gauges (km²; empty: no depths)"),
                parentLayerParameterName=self.GAUGES,
                type=compat.FIELD_NUMERIC,
                optional=True,
            )
        )

    def _init_unit_parameters(self, water_year=True):
        """UNITS and (when ``water_year``) WATER_YEAR_START."""
        labels, _aliases = unit_labels()
        self.addParameter(
            QgsProcessingParameterEnum(
                self.UNITS,
                self.tr("Discharge units"),
                options=labels,
                defaultValue=labels[0],
                usesStaticStrings=True,
            )
        )
        if not water_year:
            return
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

    def _choice_definition(self, name, label, default_id):
        """An enum of static strings for a choice of :data:`_CHOICES`."""
        choices = self._CHOICES[name]
        return QgsProcessingParameterEnum(
            name,
            label,
            options=list(choices.values()),
            defaultValue=choices[default_id],
            usesStaticStrings=True,
        )

    def _choice_parameter(self, name, label, default_id, advanced=False):
        """Add an enum of static strings for a choice of :data:`_CHOICES`."""
        parameter = self._choice_definition(name, label, default_id)
        if advanced:
            return self.add_advanced(parameter)
        return self.addParameter(parameter)

    #: The method parameters in the order the dialog shows them (see :meth:`_method_parameter`).
    METHOD_PARAMETERS = (
        RECESSION_INDEX,
        RECESSION_INDEX_FIELD,
        RUNOFF_END_LAG,
        MIN_SEGMENT_DAYS,
        FLAG_FIELD,
        FLAG_VALUES,
        BASEFLOW_METHOD,
        BFI_MAX,
        PERIOD,
        LINK,
        LINK_TOLERANCE,
        OVERLAP_TOLERANCE,
        REPORTED_AREA_FIELD,
        CLASSES,
        CLASS_COUNT,
        WORKERS,
    )

    def _init_method_parameters(self, link=True, names=None, basic=()):
        """The method parameters ``names`` (all of :data:`METHOD_PARAMETERS` by default, LINK
        only when ``link``), in that order: advanced, except those in ``basic``."""
        for name in names if names is not None else self.METHOD_PARAMETERS:
            if name == self.LINK and not link:
                continue
            parameter = self._method_parameter(name)
            if name in basic:
                self.addParameter(parameter)
            else:
                self.add_advanced(parameter)

    def _method_parameter(self, name):
        """The definition of method parameter ``name`` (one of :data:`METHOD_PARAMETERS`)."""
        number = QgsProcessingParameterNumber
        if name == self.RECESSION_INDEX:
            return number(
                name,
                self.tr("Recession index K for all gauges (days; empty: estimate)"),
                type=compat.NUMBER_DOUBLE,
                optional=True,
                minValue=0.0,
            )
        if name == self.RECESSION_INDEX_FIELD:
            return QgsProcessingParameterField(
                name,
                self.tr("Recession index field in the gauges (days; empty values: estimate)"),
                parentLayerParameterName=self.GAUGES,
                type=compat.FIELD_NUMERIC,
                optional=True,
            )
        if name == self.RUNOFF_END_LAG:
            return number(
                name,
                self.tr("Runoff-end lag N (days; empty: from drainage area)"),
                type=compat.NUMBER_DOUBLE,
                optional=True,
                minValue=0.0,
            )
        if name == self.WORKERS:
            return number(
                name,
                self.tr("Processes that share the gauges (results are identical)"),
                type=compat.NUMBER_INTEGER,
                defaultValue=1,
                minValue=1,
                maxValue=64,
            )
        if name == self.MIN_SEGMENT_DAYS:
            return number(
                name,
                self.tr("Minimum recession segment length (days)"),
                type=compat.NUMBER_INTEGER,
                defaultValue=_MIN_SEGMENT_DAYS,
                minValue=2,
            )
        if name == self.FLAG_FIELD:
            return QgsProcessingParameterField(
                name,
                self.tr("Quality-code field in the discharge table"),
                parentLayerParameterName=self.DISCHARGE,
                type=compat.FIELD_ANY,
                optional=True,
            )
        if name == self.FLAG_VALUES:
            return QgsProcessingParameterString(
                name,
                self.tr("Codes that mark a value unusable (comma-separated; empty: any code)"),
                optional=True,
            )
        if name == self.BFI_MAX:
            return number(
                name,
                self.tr("BFImax of the Eckhardt filter"),
                type=compat.NUMBER_DOUBLE,
                defaultValue=_BFI_MAX,
                minValue=0.0,
                maxValue=1.0,
            )
        if name == self.LINK_TOLERANCE:
            return number(
                name,
                self.tr("Greatest distance from a gauge to its basin's boundary (m)"),
                type=compat.NUMBER_DOUBLE,
                defaultValue=_LINK_TOLERANCE_M,
                minValue=0.0,
            )
        if name == self.OVERLAP_TOLERANCE:
            return number(
                name,
                self.tr("Nested basins: share of a basin that may lie outside the one around it"),
                type=compat.NUMBER_DOUBLE,
                defaultValue=_OVERLAP_TOLERANCE,
                minValue=0.0,
                maxValue=0.5,
            )
        if name == self.REPORTED_AREA_FIELD:
            return QgsProcessingParameterField(
                name,
                self.tr("Reported drainage area field in the gauges (km²)"),
                parentLayerParameterName=self.GAUGES,
                type=compat.FIELD_NUMERIC,
                optional=True,
            )
        if name == self.CLASS_COUNT:
            return number(
                name,
                self.tr("Number of map classes"),
                type=compat.NUMBER_INTEGER,
                defaultValue=_CLASS_COUNT,
                minValue=1,
                maxValue=_MAX_CLASSES,
            )
        choices = {
            self.BASEFLOW_METHOD: (self.tr("Baseflow separation method"), "eckhardt"),
            self.PERIOD: (self.tr("Recharge within the year by"), "month"),
            self.LINK: (self.tr("Link gauges to catchments"), "auto"),
            self.CLASSES: (self.tr("Map classes"), "quantiles"),
        }
        label, default_id = choices[name]
        return self._choice_definition(name, label, default_id)

    def _table_sink(self, name, label, by_default, optional=True):
        """A table output (no geometry) that a model can feed to the next step."""
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                name,
                label,
                compat.SOURCE_VECTOR,
                optional=optional,
                createByDefault=by_default or not optional,
            )
        )

    def _init_table_outputs(self):
        """The tables (ANNUAL and EVENTS by default, the others when asked for) and REPORT."""
        self._table_sink(self.ANNUAL, self.tr("Recharge by water year"), True)
        self._table_sink(self.EVENTS, self.tr("Recharge events"), True)
        for name, label in (
            (self.PERIODS, self.tr("Recharge by month or season")),
            (self.SEGMENTS, self.tr("Recession segments")),
            (self.MASTER_RECESSION, self.tr("Recession index by flow level")),
            (self.DAILY, self.tr("Daily discharge and baseflow")),
            (self.LINKS, self.tr("How gauges link to basins")),
        ):
            self._table_sink(name, label, False)
        self.addParameter(
            QgsProcessingParameterFileDestination(
                self.REPORT,
                self.tr("Report (HTML page)"),
                fileFilter=self.tr("HTML files (*.html *.htm)"),
                optional=True,
                createByDefault=False,
            )
        )

    # ---------------------------------------------------------------- parameters

    #: Field parameters whose defaults apply when left empty. They are declared optional
    #: because QGIS 3.22 (processing.run, qgis_process) rejects a missing mandatory field
    #: parameter even when it has a default; the command line's defaults should hold for
    #: scripts too.
    _DEFAULT_FIELDS = (GAUGE_ID_FIELD, DATE_FIELD, VALUE_FIELD)

    def _has(self, name) -> bool:
        return self.parameterDefinition(name) is not None

    def _completed(self, parameters):
        """``parameters`` with the default fields filled in and aliases read as labels:
        ``cfs`` as ``ft3/s``, a choice's core id (``lyne_hollick``) as its label, and an
        option's index (as older scripts pass it) as its text."""
        parameters = dict(parameters or {})
        for name in self._DEFAULT_FIELDS:
            if self._has(name) and parameters.get(name) in (None, ""):
                parameters[name] = self.parameterDefinition(name).defaultValue()
        labels, aliases = unit_labels()
        value = _option_text(parameters.get(self.UNITS), labels)
        if isinstance(value, str) and self._has(self.UNITS):
            label = aliases.get(value.strip(), value.strip())
            if label in labels:
                parameters[self.UNITS] = label
        for name, choices in self._CHOICES.items():
            if not self._has(name):
                continue
            value = _option_text(parameters.get(name), list(choices.values()))
            if isinstance(value, str) and choice_id(value, choices) is not None:
                value = choices[choice_id(value, choices)]
            if value is not None:
                parameters[name] = value
        return parameters

    def checkParameterValues(self, parameters, context):  # noqa: N802
        parameters = self._completed(parameters)
        value = parameters.get(self.UNITS) if self._has(self.UNITS) else None
        labels, aliases = unit_labels()
        if isinstance(value, str) and value.strip() not in labels:
            allowed = ", ".join(labels + sorted(aliases))
            return False, self.tr("units was {!r}; expected one of {}").format(value, allowed)
        for name, choices in self._CHOICES.items():
            value = parameters.get(name) if self._has(name) else None
            if isinstance(value, str) and value not in choices.values():
                return False, self._unknown_choice(name, value)
        problem = self._value_problem(parameters, context)
        if problem:
            return False, problem
        if self._has(self.REPORT):
            path = self.parameterAsFileOutput(parameters, self.REPORT, context)
            if path and Path(path).suffix.lower() not in (".html", ".htm"):
                return False, self._report_suffix_problem(path)
        return super().checkParameterValues(parameters, context)

    def _unknown_choice(self, name, value) -> str:
        choices = self._CHOICES[name]
        labels = ", ".join(choices.values())
        ids = [core_id for core_id, label in choices.items() if core_id != label]
        text = self.tr("{} was {!r}; expected one of {}").format(
            self._CHOICE_NAMES[name], value, labels
        )
        if ids:
            text += self.tr(" (or {})").format(", ".join(choices))
        return f"{text} ({name})"

    def _report_suffix_problem(self, path) -> str:
        return self.tr("the report must be an HTML file ending in .html: {} ({})").format(
            path, self.REPORT
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
        LINK: "link",
        LINK_TOLERANCE: "link_tolerance_m",
        OVERLAP_TOLERANCE: "overlap_tolerance",
        UNGAUGED: "ungauged",
        WORKERS: "workers",
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
            if attribute not in values:
                continue
            try:
                Settings(**{attribute: values[attribute]}).resolved()
            except InputError as exc:
                return f"{exc} ({name})"
        if not self._has(self.CLASS_COUNT):
            return None
        return self._class_count_problem(parameters, context)

    def _class_count_problem(self, parameters, context):
        """The core's message when it refuses the number of map classes; None when fine."""
        from ..algorithms.errors import InputError
        from ..algorithms.maps import class_breaks

        try:
            class_breaks([0.0, 1.0], "quantiles", self._class_count(parameters, context))
        except InputError as exc:
            return f"{exc} ({self.CLASS_COUNT})"
        return None

    def _class_count(self, parameters, context):
        return self._number(parameters, self.CLASS_COUNT, context)

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
        """The core id of an enum parameter's choice; what was given when it is unknown (the
        core's message then quotes it)."""
        value = parameters.get(name)
        if not (isinstance(value, str) or (isinstance(value, int) and not isinstance(value, bool))):
            value = self.parameterAsEnumString(parameters, name, context)
        choices = self._CHOICES[name]
        value = _option_text(value, list(choices.values()))
        if isinstance(value, str):
            return choice_id(value, choices) or value
        return value

    def _setting_values(self, parameters, context) -> dict:
        """Settings of the method, by attribute name, read from the parameters this algorithm
        declares (the others keep the core's defaults)."""
        values = {}
        for name, attribute in self._SETTING_OF.items():
            if not self._has(name):
                continue
            if name in self._CHOICES:
                values[attribute] = self._choice(parameters, name, context)
            else:
                values[attribute] = self._number(parameters, name, context)
        if self._has(self.FLAG_VALUES):
            flags = self.parameterAsString(parameters, self.FLAG_VALUES, context).strip()
            values["flag_values"] = flags or None
        return values

    def _units(self, parameters, context) -> str:
        if not self._has(self.UNITS):
            return "m3/s"
        value = parameters.get(self.UNITS)
        labels, _aliases = unit_labels()
        if isinstance(value, str) and value.strip() in labels:
            return value.strip()
        return self.parameterAsEnumString(parameters, self.UNITS, context)

    def _settings(self, parameters, context):
        """The core's Settings from the parameters (not yet resolved)."""
        from ..algorithms.pipeline import Settings

        field = self.field_name
        return Settings(
            units=self._units(parameters, context),
            gauge_id_field=field(parameters, self.GAUGE_ID_FIELD, context) or "gauge_id",
            discharge_gauge_field=field(parameters, self.DISCHARGE_GAUGE_FIELD, context) or None,
            date_field=field(parameters, self.DATE_FIELD, context) or "date",
            value_field=field(parameters, self.VALUE_FIELD, context) or "discharge",
            flag_field=field(parameters, self.FLAG_FIELD, context) or None,
            recession_index_field=field(parameters, self.RECESSION_INDEX_FIELD, context) or None,
            reported_area_field=field(parameters, self.REPORTED_AREA_FIELD, context) or None,
            **self._setting_values(parameters, context),
            **self._basin_settings(parameters, context),
        )

    # ---------------------------------------------------------------- for subclasses

    def _basin_sources(self, parameters, context) -> dict:
        """The basin layers by name (``{"catchments": source}``)."""
        raise NotImplementedError

    def _basin_settings(self, parameters, context) -> dict:
        """Settings keywords of the basin parameters."""
        raise NotImplementedError

    def _check_basin_fields(self, sources, settings, feedback):
        """Raise InputError when a basin layer lacks a field the settings need."""
        raise NotImplementedError

    def _check_basins(self, tables, settings, feedback):
        """Checks on the basin layers once read (before the discharge table is read)."""

    #: Whether the run keeps each gauge's daily series (set by processAlgorithm before _run).
    _keep_series = True

    def _run(self, tables, settings, reporter):
        """Run the core on the tables read (keeping the daily series when
        :data:`_keep_series`); return its AtlasResult."""
        raise NotImplementedError

    def _write_basins(self, parameters, context, sources, tables, result, outputs):
        """Write the basin layers of ``result`` into ``outputs``."""
        raise NotImplementedError

    #: Outputs styled when they load into the project: output name -> the fields to classify,
    #: the first with a number in it (none: larger polygons drawn first only); see
    #: :func:`styling.style_post_processor`.
    _STYLED_OUTPUTS = {OUTPUT: (styling.RECHARGE_FIELD,)}

    def _prepare(self, parameters, context, gauges):
        """Read what a subclass needs beyond the shared parameters, before any input is read
        (``gauges`` is the gauges' feature source)."""

    def _provenance(self, parameters, context):
        """Where this run's outputs come from (:class:`provenance.Provenance`): the input
        layers' sources and every other parameter's value under its Processing name (the
        names ``qgis_process`` and scripts use), defaults included."""
        from qgis.core import Qgis

        from ..algorithms.provenance import Provenance

        inputs, settings = [], []
        for definition in self.parameterDefinitions():
            name = definition.name()
            if definition.isDestination():
                continue
            value = parameters.get(name)
            if value is None:
                value = definition.defaultValue()
            if name in self._INPUTS:
                layer = self._input_layer(parameters, name, context)
                source = layer.source() if layer is not None else value
                if source:
                    inputs.append((name, str(source)))
            else:
                settings.append((name, "" if value is None else str(value)))
        interface = f"QGIS Processing ({self.id()}), QGIS {Qgis.QGIS_VERSION}"
        return Provenance(interface, inputs, settings)

    def _log_provenance(self, provenance, feedback):
        """The run's version and inputs (with their SHA-256) in the Processing log."""
        feedback.pushInfo(f"Recharge Atlas {provenance.version}, {provenance.interface}")
        for name, path, size, sha in provenance.input_facts():
            facts = f"{size:,} bytes, SHA-256 {sha}" if sha else "not a single file"
            feedback.pushInfo(f"{name}: {path} ({facts})")

    def _summarize(self, result, feedback):
        """The last line of the log: how many gauges were computed, flagged and skipped.

        A gauge is skipped when it has no hydrology at all (no discharge record, no usable
        value, or a failure inside the core); it is flagged when it was computed but its
        ``quality`` names a problem."""
        gauges = result.gauges
        skipped = [gid for gid, one in gauges.items() if one.recession is None]
        flagged = [gid for gid, one in gauges.items() if one.recession is not None and one.quality]
        text = self.tr("Summary: {} gauges: {} computed ({} of them flagged), {} skipped").format(
            len(gauges), len(gauges) - len(skipped), len(flagged), len(skipped)
        )
        if skipped:
            text += " (" + ", ".join(skipped[:10]) + (", …" if len(skipped) > 10 else "") + ")"
        feedback.pushInfo(text)

    # ---------------------------------------------------------------- the work

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802
        self.require_dependencies()
        feedback = feedback or QgsProcessingFeedback()
        parameters = self._completed(parameters)
        self._gpkg_written = set()  # GeoPackages this run has started (_named_destination)

        gauges = self.source(parameters, self.GAUGES, context)
        discharge = (
            self.source(parameters, self.DISCHARGE, context) if self._has(self.DISCHARGE) else None
        )
        basins = self._basin_sources(parameters, context)
        report_path = (
            self.parameterAsFileOutput(parameters, self.REPORT, context)
            if self._has(self.REPORT)
            else ""
        )
        has_classes = self._has(self.CLASSES)
        scheme = self._choice(parameters, self.CLASSES, context) if has_classes else "quantiles"
        classes = self._class_count(parameters, context) if has_classes else _CLASS_COUNT
        self._prepare(parameters, context, gauges)

        from ..algorithms.errors import Cancelled, InputError
        from .feedback import FeedbackReporter, push_warning

        settings = self._settings(parameters, context)
        provenance = self._provenance(parameters, context)
        self._log_provenance(provenance, feedback)
        try:
            self._check_outputs_are_not_inputs(parameters, context)
            settings = settings.resolved()
            if scheme not in MAP_CLASSES:
                raise InputError(self._unknown_choice(self.CLASSES, scheme))
            problem = self._class_count_problem(parameters, context) if has_classes else None
            if problem:
                raise InputError(problem)
            classes = int(classes)
            if report_path and Path(report_path).suffix.lower() not in (".html", ".htm"):
                raise InputError(self._report_suffix_problem(report_path))
            self._explain_settings(settings, feedback, push_warning)
            direct = self._discharge_file(parameters, context, discharge)
            tables = self._read_inputs(gauges, discharge, basins, settings, feedback, direct)
            reporter = FeedbackReporter(feedback, _READ_END, _RUN_END)
            # Daily series only when an output draws or lists them: a large region's run then
            # holds only its tables.
            self._keep_series = bool(report_path) or self._requested(
                parameters, self.DAILY, context
            )
            result = self._run(tables, settings, reporter)
            if getattr(result, "summary", None) is not None:
                from ..algorithms.pipeline import require_records

                require_records(result)
            if report_path:
                self._write_report(
                    result, tables, settings, scheme, classes, report_path, feedback, provenance
                )
        except InputError as exc:
            raise QgsProcessingException(str(exc)) from None
        except Cancelled:
            raise QgsProcessingException(
                self.tr("Run cancelled: no outputs were written.")
            ) from None
        except QgsProcessingException:
            raise
        except Exception as exc:  # a fault of ours: one line, the trace in the log
            raise self._internal_error(exc, feedback) from None

        # Sinks are created only now, so a bad input or a cancel leaves no partial layers.
        feedback.setProgressText(self.tr("Writing the outputs"))
        outputs = {}
        try:
            self._write_basins(parameters, context, basins, tables, result, outputs)
            self._write_tables(parameters, context, result, outputs, feedback)
        except Exception as exc:
            if report_path:  # no report without its layers
                Path(report_path).unlink(missing_ok=True)
            if isinstance(exc, QgsProcessingException):
                raise
            if isinstance(exc, InputError):
                raise QgsProcessingException(str(exc)) from None
            raise self._internal_error(exc, feedback) from None
        if report_path:
            outputs[self.REPORT] = report_path
        feedback.setProgress(100.0)

        for name, fields in self._STYLED_OUTPUTS.items():
            dest_id = outputs.get(name)
            if dest_id and context.willLoadLayerOnCompletion(dest_id):
                context.layerToLoadOnCompletionDetails(dest_id).setPostProcessor(
                    styling.style_post_processor(fields, scheme, classes)
                )
        self._summarize(result, feedback)
        return outputs

    #: The input parameters whose files no output may be written into.
    _INPUTS = ("GAUGES", "DISCHARGE", "CATCHMENTS", "SUBBASINS", "PRECIPITATION_RASTER")
    #: Those of them that are rasters.
    _RASTER_INPUTS = ("PRECIPITATION_RASTER",)

    def _input_layer(self, parameters, name, context):
        """The layer of input parameter ``name`` (vector, or raster for :data:`_RASTER_INPUTS`)."""
        if name in self._RASTER_INPUTS:
            if not parameters.get(name):
                return None
            return self.parameterAsRasterLayer(parameters, name, context)
        return self.parameterAsVectorLayer(parameters, name, context)

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

    def _internal_error(self, exc, feedback):
        """A QgsProcessingException for an unexpected error: one line saying what happened
        (the same words as the command line's), the full trace in the log."""
        import traceback

        from ..algorithms.errors import describe

        trace = "".join(traceback.format_exception(type(exc), exc, exc.__traceback__))
        feedback.reportError(trace, False)
        return QgsProcessingException(
            self.tr(
                "internal error: {}; no output was written. The full trace is in the log; "
                "please report it"
            ).format(describe(exc))
        )

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
        """Whether this algorithm has output ``name`` and the caller asked for it (optional
        outputs may be left unset)."""
        if not self._has(name):
            return False
        return bool(self.parameterAsOutputLayer(parameters, name, context))

    @staticmethod
    def _require_fields(source, names_by_parameter, what):
        """Raise InputError naming a field ``source`` lacks and the parameter that named it."""
        import pandas as pd

        from ..algorithms.discharge import require_columns
        from ..algorithms.errors import InputError

        columns = pd.DataFrame(columns=source.fields().names())
        for parameter, name in names_by_parameter:
            if not name:
                continue
            try:
                require_columns(columns, [name], what)
            except InputError as exc:
                raise InputError(f"{exc} ({parameter})") from None

    #: Keep the gauges' raw attribute rows, for writing the gauges back with their own fields.
    _KEEP_GAUGE_ROWS = False

    def _gauge_fields(self, settings):
        """(parameter, field) pairs the gauges layer must have."""
        return [
            (self.GAUGE_ID_FIELD, settings.gauge_id_field),
            (self.RECESSION_INDEX_FIELD, settings.recession_index_field),
            (self.REPORTED_AREA_FIELD, settings.reported_area_field),
        ]

    def _discharge_file(self, parameters, context, discharge):
        """The discharge table's file when the core may read it in place of QGIS (see
        :mod:`direct_read`), else None."""
        if discharge is None:
            return None
        layer = self.parameterAsVectorLayer(parameters, self.DISCHARGE, context)
        return direct_read.discharge_file(layer, parameters.get(self.DISCHARGE))

    def _read_inputs(self, gauges, discharge, basins, settings, feedback, direct=None):
        """Read the sources into pandas, checking the fields first so errors come early.
        ``discharge`` may be None (an algorithm without hydrology); ``direct`` is the file the
        core may read in its place (:meth:`_discharge_file`)."""
        self._require_fields(gauges, self._gauge_fields(settings), "gauges layer")
        self._check_basin_fields(basins, settings, feedback)
        if discharge is not None:
            wanted = [settings.discharge_gauge_field, settings.date_field, settings.value_field]
            parameters = [self.DISCHARGE_GAUGE_FIELD, self.DATE_FIELD, self.VALUE_FIELD]
            if settings.flag_field:
                wanted.append(settings.flag_field)
                parameters.append(self.FLAG_FIELD)
            self._require_fields(discharge, list(zip(parameters, wanted)), "discharge table")
            wanted = list(dict.fromkeys(wanted))

        tables = {}
        # what, source, fields, geometry, rows
        steps = [("gauges", gauges, None, True, self._KEEP_GAUGE_ROWS)]
        steps += [(what, source, None, True, True) for what, source in basins.items()]
        if discharge is not None:
            steps.append(("discharge", discharge, wanted, False, False))
        for n, (what, source, names, with_geometry, keep_rows) in enumerate(steps):
            feedback.setProgressText(self.tr("Reading the {}").format(what))
            table = None
            if what == "discharge" and direct is not None:
                frame = direct_read.read_discharge(direct, names, source.featureCount())
                if frame is not None:
                    table = conversion.LayerTable(frame, source.fields())
                    from ..algorithms.database import is_database

                    text = (
                        "Discharge table read from the database by one query on the layer's "
                        "connection, as the command line reads it: {} rows"
                        if is_database(direct)
                        else "Discharge table read from its file, as the command line reads "
                        "it: {} rows"
                    )
                    feedback.pushInfo(self.tr(text).format(len(frame)))
            if table is None:
                table = conversion.read_source(
                    source,
                    field_names=names,
                    with_geometry=with_geometry,
                    keep_rows=keep_rows,
                    feedback=feedback,
                    what=what,
                )
                if what == "discharge" and table is not None:
                    feedback.pushInfo(
                        self.tr("Discharge table read through QGIS: {} rows").format(
                            len(table.frame)
                        )
                    )
            if table is None or feedback.isCanceled():
                from ..algorithms.errors import Cancelled

                raise Cancelled("run cancelled")
            tables[what] = table
            if what in basins:
                self._check_basins(tables, settings, feedback)
            feedback.setProgress(_READ_END * (n + 1) / len(steps))
        return tables

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

    def _named_destination(self, parameters, name, geometry):
        """``parameters`` with output ``name`` sent to its own layer (:attr:`LAYER_NAMES`)
        when it is a plain ``.gpkg`` path: several outputs may then share one file, as on the
        command line. A file this run has not yet written is replaced, as QGIS replaces it for
        a plain path; other destinations are left as they are."""
        layer = self.OUTPUT_LAYER if name == self.OUTPUT else self.LAYER_NAMES.get(name)
        value = parameters.get(name)
        definition = value if isinstance(value, QgsProcessingOutputLayerDefinition) else None
        sink = definition.sink.staticValue() if definition is not None else value
        if layer is None or not isinstance(sink, str):
            return parameters
        text = sink.strip()
        if not text.lower().endswith(".gpkg") or "|" in text or ":" in text.split("/")[0]:
            return parameters
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
