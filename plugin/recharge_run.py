"""What every Recharge Atlas algorithm that reads gauges shares: running the core.

``catchmentrecharge`` and ``subbasinrecharge`` differ only in how basins are described (total
drainage areas, or a subbasin map). Both take the same gauges, discharge table, units and
method parameters, and write the same tables, so those are declared, read, checked and written
once, by the mixins of :class:`RechargeRunAlgorithm`:

- :mod:`parameter_declarations`: the parameter ids and the builders of their definitions;
- :mod:`parameter_values`: the values read, completed and checked, and the core's Settings;
- :mod:`source_reading`: the input layers read into pandas;
- :mod:`sink_writing`: the report, the tables and every other sink written;

with the choices and defaults the dialogs show in :mod:`choices` and the progress bar's stages
in :mod:`progress`. This module runs them in order (:meth:`RechargeRunAlgorithm.processAlgorithm`).
The rest of the toolbox is built on the same machinery: the gauge algorithms
(``recessionindex``, ``baseflowseparation``, ``eventrecharge``; :mod:`gauge_run`) run without
basins, ``linkcheck`` without discharge, and ``rechargereport`` writes only the page. Each
declares only the parameters it uses
(:meth:`~parameter_declarations.ParameterDeclarations._init_method_parameters`); the others keep
the core's defaults. The core is imported only when an algorithm runs, so the provider loads
and lists the algorithms even when pandas, scipy or geopandas are missing.
"""

from __future__ import annotations

from pathlib import Path

from qgis.core import QgsProcessingException, QgsProcessingFeedback

from . import styling
from .base import RechargeAtlasAlgorithm
from .choices import (
    _CLASS_COUNT,
    BASEFLOW_METHODS,
    LINK_METHODS,
    MAP_CLASSES,
    PERIODS,
    UNGAUGED_CHOICES,
    baseflow_method_id,
    choice_id,
    unit_labels,
)
from .parameter_declarations import ParameterDeclarations
from .parameter_values import ParameterValues
from .progress import _READ_END, _RUN_END
from .sink_writing import SinkWriting, table_fields
from .source_reading import SourceReading

#: Kept importable from here, where they were declared before the split.
__all__ = [
    "BASEFLOW_METHODS",
    "LINK_METHODS",
    "MAP_CLASSES",
    "PERIODS",
    "UNGAUGED_CHOICES",
    "RechargeRunAlgorithm",
    "baseflow_method_id",
    "choice_id",
    "table_fields",
    "unit_labels",
]


class RechargeRunAlgorithm(
    SinkWriting, SourceReading, ParameterValues, ParameterDeclarations, RechargeAtlasAlgorithm
):
    """Base of the algorithms: read the parameters and sources, run the core, write the sinks.

    Subclasses declare their parameters in ``initAlgorithm`` with the builders of
    :class:`ParameterDeclarations`, and
    implement :meth:`_basin_sources`, :meth:`_basin_settings`, :meth:`_check_basin_fields`,
    :meth:`_run` and :meth:`_write_basins`; :meth:`_prepare`, :meth:`_gauge_fields` and
    :meth:`_summarize` may be overridden.
    """

    def group(self):
        return self.tr("Recharge")

    def groupId(self):  # noqa: N802 (QGIS API name)
        return "recharge"

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
    _STYLED_OUTPUTS = {ParameterDeclarations.OUTPUT: (styling.RECHARGE_FIELD,)}

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
