"""How the algorithms declare their parameters: the parameter ids and the builders of their
definitions (inputs, units, the method parameters, the table outputs and the report).

:class:`ParameterDeclarations` is a mixin of :class:`recharge_run.RechargeRunAlgorithm`; each
algorithm's ``initAlgorithm`` calls the builders for the parameters it uses, so every algorithm
declares a parameter with the same label, default and flags.
"""

from __future__ import annotations

from qgis.core import (
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
)

from . import compat
from .choices import (
    _BFI_MAX,
    _CLASS_COUNT,
    _LINK_TOLERANCE_M,
    _MAX_CLASSES,
    _MIN_SEGMENT_DAYS,
    _OVERLAP_TOLERANCE,
    _PERIOD_CHOICES,
    BASEFLOW_METHODS,
    LINK_METHODS,
    MAP_CLASSES,
    UNGAUGED_CHOICES,
    unit_labels,
)


class ParameterDeclarations:
    """The parameter ids (upper-case constants whose value is the same string) and the builders
    that add their definitions (a mixin of a ``QgsProcessingAlgorithm``)."""

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

    def _has(self, name) -> bool:
        """Whether this algorithm declares parameter ``name``."""
        return self.parameterDefinition(name) is not None

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
        self._init_field_parameters(
            self.DISCHARGE,
            (
                (
                    self.DISCHARGE_GAUGE_FIELD,
                    self.tr("Gauge id field in the discharge table"),
                    "gauge_id",
                ),
                (self.DATE_FIELD, self.tr("Date field"), "date"),
                (self.VALUE_FIELD, self.tr("Discharge field"), "discharge"),
            ),
        )

    def _init_field_parameters(self, parent, fields):
        """An optional field parameter of any type in layer parameter ``parent`` for each
        ``(name, label, default)`` of ``fields``, in that order (optional so that the default
        holds when left empty: see ``ParameterValues._DEFAULT_FIELDS``)."""
        for name, label, default in fields:
            self.addParameter(
                QgsProcessingParameterField(
                    name,
                    label,
                    defaultValue=default,
                    parentLayerParameterName=parent,
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
