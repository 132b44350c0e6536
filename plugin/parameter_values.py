"""How the algorithms read their parameters' values: defaults filled in, labels, core ids and
indexes of choices read alike, each value checked by the core's own rules before the run, and
the core's Settings built from them.

:class:`ParameterValues` is a mixin of :class:`recharge_run.RechargeRunAlgorithm`.
"""

from __future__ import annotations

from pathlib import Path

from . import compat
from .choices import _BFI_MAX, _option_text, choice_id, unit_labels
from .parameter_declarations import ParameterDeclarations as _P


class ParameterValues:
    """Completing, checking and reading the parameters of :class:`ParameterDeclarations` (a
    mixin of a ``QgsProcessingAlgorithm``)."""

    #: Field parameters whose defaults apply when left empty. They are declared optional
    #: because QGIS 3.22 (processing.run, qgis_process) rejects a missing mandatory field
    #: parameter even when it has a default; the command line's defaults should hold for
    #: scripts too.
    _DEFAULT_FIELDS = (_P.GAUGE_ID_FIELD, _P.DATE_FIELD, _P.VALUE_FIELD)

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
        _P.WATER_YEAR_START: "water_year_start",
        _P.RECESSION_INDEX: "recession_index_days",
        _P.RUNOFF_END_LAG: "runoff_end_lag_days",
        _P.MIN_SEGMENT_DAYS: "min_segment_days",
        _P.BASEFLOW_METHOD: "baseflow_method",
        _P.BFI_MAX: "bfi_max",
        _P.PERIOD: "period",
        _P.LINK: "link",
        _P.LINK_TOLERANCE: "link_tolerance_m",
        _P.OVERLAP_TOLERANCE: "overlap_tolerance",
        _P.UNGAUGED: "ungauged",
        _P.WORKERS: "workers",
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
