"""What the algorithms that work on gauges alone share (no catchments, no subbasins).

``recessionindex``, ``baseflowseparation`` and ``eventrecharge`` run the hydrology of every
gauge with :func:`recharge_atlas.algorithms.pipeline.run_gauges`, the function behind the
catchment algorithms too, so the recession index, events and baseflow are the very numbers
``catchmentrecharge`` gives. They differ in the parameters they show and the outputs they
write: each writes the gauge points back, their own fields kept, with the core's per-gauge
fields (:meth:`AtlasResult.gauge_table`) it is about, plus some of the shared tables.

Depths need a drainage area: with AREA_FIELD (km²) the gauges give it; without, volumes are
still computed, depths stay empty and the runoff-end lag N is that of a 100 km² basin unless
RUNOFF_END_LAG is given.
"""

from __future__ import annotations

from qgis.core import QgsProcessingParameterFeatureSink

from . import compat, conversion
from .recharge_run import RechargeRunAlgorithm

_R = RechargeRunAlgorithm


class GaugeAlgorithm(RechargeRunAlgorithm):
    """Base of the gauge algorithms. Subclasses name the method parameters they show before
    :data:`_RECORD_METHODS` (:data:`_OWN_METHODS`), declare their outputs
    (:meth:`_init_outputs`), :data:`_GAUGE_FIELDS` and, if needed, :meth:`_gauge_values`."""

    OUTPUT_LAYER = "gauges"

    #: The core's per-gauge fields (``AtlasResult.gauge_table``) the gauge points get, in order,
    #: after ``gauge_id``.
    _GAUGE_FIELDS: tuple = ()
    _KEEP_GAUGE_ROWS = True
    #: Set from the parameters when the algorithm runs (see :meth:`_prepare`).
    _area_field = None
    _gauge_crs = None

    #: The toolbox group: the base's ("recharge") or "recession".
    _GROUP_ID = "recharge"
    #: Whether the algorithm takes the water year's first month (WATER_YEAR_START).
    _WATER_YEAR = True
    #: The algorithm's own method parameters, shown first, and those of them shown outside
    #: "Advanced parameters" (all others are advanced).
    _OWN_METHODS: tuple = ()
    _BASIC_METHODS: tuple = ()
    #: The recession index the user may give: one for all gauges, or a field of the gauges.
    _GIVEN_INDEX = (_R.RECESSION_INDEX, _R.RECESSION_INDEX_FIELD)
    #: The method parameters every gauge algorithm shows after its own: how the record is cut
    #: and read, the map classes and the processes.
    _RECORD_METHODS = (
        _R.RUNOFF_END_LAG,
        _R.MIN_SEGMENT_DAYS,
        _R.FLAG_FIELD,
        _R.FLAG_VALUES,
        _R.CLASSES,
        _R.CLASS_COUNT,
        _R.WORKERS,
    )

    def group(self):
        if self.groupId() == "recession":
            return self.tr("Recession and baseflow")
        return super().group()

    def groupId(self):  # noqa: N802 (QGIS API name)
        return self._GROUP_ID

    # ---------------------------------------------------------------- declaring parameters

    def initAlgorithm(self, config=None):  # noqa: N802
        """The gauge inputs, the method parameters and the outputs (:meth:`_init_outputs`)."""
        self._init_gauge_inputs(water_year=self._WATER_YEAR)
        self._init_method_parameters(
            names=(*self._OWN_METHODS, *self._RECORD_METHODS), basic=self._BASIC_METHODS
        )
        self._init_outputs()

    def _init_outputs(self):
        """Declare the outputs (the gauge points with :meth:`_gauge_sink`, the tables)."""
        raise NotImplementedError

    def _init_gauge_inputs(self, water_year=True):
        """GAUGES, its id and area fields, the discharge table and its fields, UNITS and (when
        ``water_year``) WATER_YEAR_START."""
        self._init_gauge_layer_parameters()
        self._init_area_parameter()
        self._init_discharge_parameters()
        self._init_unit_parameters(water_year=water_year)

    def _gauge_sink(self, label, optional=False):
        """OUTPUT: the gauge points with the fields of :data:`_GAUGE_FIELDS`."""
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                self.OUTPUT, label, compat.SOURCE_POINT, optional=optional, createByDefault=True
            )
        )

    # ---------------------------------------------------------------- hooks of the base

    def _prepare(self, parameters, context, gauges):
        self._area_field = self.field_name(parameters, self.AREA_FIELD, context) or None
        self._gauge_crs = gauges.sourceCrs()

    def _gauge_fields(self, settings):
        return [*super()._gauge_fields(settings), (self.AREA_FIELD, self._area_field)]

    def _basin_sources(self, parameters, context):
        return {}

    def _basin_settings(self, parameters, context):
        return {}

    def _check_basin_fields(self, sources, settings, feedback):
        if self._area_field:
            feedback.pushInfo(
                self.tr("Drainage areas (km²) from the gauges' field {}").format(self._area_field)
            )
        else:
            feedback.pushInfo(
                self.tr(
                    "No drainage area field (AREA_FIELD): volumes only, depths left empty, and "
                    "the runoff-end lag N is that of a 100 km² basin unless RUNOFF_END_LAG is "
                    "given"
                )
            )

    def _run(self, tables, settings, reporter):
        from ..algorithms.pipeline import run_gauges

        return run_gauges(
            tables["gauges"].frame,
            tables["discharge"].frame,
            settings,
            reporter,
            area_field=self._area_field,
            keep_series=self._keep_series,
        )

    def _write_basins(self, parameters, context, sources, tables, result, outputs):
        """The gauge points, when asked for (the name is the base's: the layer the run maps)."""
        if not self._requested(parameters, self.OUTPUT, context):
            return
        dest = self._write_gauges(parameters, self.OUTPUT, context, tables["gauges"], result)
        if dest is not None:
            outputs[self.OUTPUT] = dest

    # ---------------------------------------------------------------- the gauge points

    def _gauge_values(self, result):
        """One row per gauge id: ``gauge_id`` and the fields of :data:`_GAUGE_FIELDS`."""
        return result.gauge_table()[["gauge_id", *self._GAUGE_FIELDS]]

    def _write_gauges(self, parameters, name, context, table, result):
        """The gauges as they came in (fields and points), each with its gauge's values.

        Rows are matched by the gauge id as the core reads it (``1001.0`` is ``1001``). A row
        without an id gets no values and the quality "no gauge id"; rows that repeat an id
        share that gauge's values. Input fields named like an added field give way to it.
        """
        import pandas as pd

        from ..algorithms.discharge import gauge_id_text

        values = self._gauge_values(result).set_index("gauge_id")
        ids = list(gauge_id_text(table.frame[result.settings.gauge_id_field].to_numpy()))
        added = values.reindex(pd.Index(ids, dtype=object))
        added.index = table.frame.index
        if added.isna().all(axis=1).any():  # rows without values: whole numbers stay whole
            for column, dtype in values.dtypes.items():
                if pd.api.types.is_integer_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype):
                    added[column] = added[column].astype("Int64")
        if "quality" in added.columns:
            added["quality"] = [
                "no gauge id" if gid is None else quality
                for gid, quality in zip(ids, added["quality"])
            ]
        added.insert(0, "gauge_id", ids)
        geometry_name = table.frame.geometry.name
        kept = [c for c in table.frame.columns if c != geometry_name and c not in added.columns]
        frame = pd.concat([table.frame[kept], added], axis=1)
        fields, rows = conversion.frame_fields(frame, keep=table, keep_names=kept)
        return self._write(
            parameters,
            name,
            context,
            fields,
            rows,
            table.wkb_type,
            self._gauge_crs,
            table.geometries,
        )
