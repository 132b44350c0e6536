"""How the algorithms read their input layers: the input parameters and their layers, the
fields each layer must have (checked before anything is read), and the gauges, basins and
discharge table read into pandas (through QGIS, or by the core from the discharge file itself:
:mod:`direct_read`).

:class:`SourceReading` is a mixin of :class:`recharge_run.RechargeRunAlgorithm`.
"""

from __future__ import annotations

from . import conversion, direct_read
from .progress import _READ_END


class SourceReading:
    """Reading the input layers (a mixin of a ``QgsProcessingAlgorithm``)."""

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
                frame = direct_read.read_discharge(direct, names, source.featureCount)
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
