"""Processing algorithm ``catchmentrecharge``: recharge for every gauged catchment.

A thin shell over :func:`recharge_atlas.algorithms.pipeline.run_atlas`, the pipeline the
command line uses too, so both give the same numbers. The parameters, tables and report it
shares with ``subbasinrecharge`` live in :mod:`recharge_run`.
"""

from __future__ import annotations

from qgis.core import (
    QgsProcessingException,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
)

from . import compat
from .recharge_run import RechargeRunAlgorithm


class CatchmentRecharge(RechargeRunAlgorithm):
    """Mean annual, annual and event recharge by recession-curve displacement (Rorabaugh 1964)."""

    CATCHMENTS = "CATCHMENTS"
    CATCHMENT_GAUGE_FIELD = "CATCHMENT_GAUGE_FIELD"

    def name(self):
        return "catchmentrecharge"

    def displayName(self):  # noqa: N802 (QGIS API name)
        return self.tr("Catchment recharge")

    def shortDescription(self):  # noqa: N802
        return self.tr(
            "Groundwater recharge for each gauged catchment from daily streamflow, by "
            "recession-curve displacement; adds mean annual recharge to the catchment polygons."
        )

    def tags(self):
        return self.tr(
            "groundwater,recharge,streamflow,discharge,recession index,critical time,"
            "water year,baseflow,hydrology,catchment,nested basins"
        ).split(",")

    def initAlgorithm(self, config=None):  # noqa: N802
        self._init_gauge_parameters()
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
        self._init_unit_parameters()
        self._init_method_parameters(link=True)
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                self.OUTPUT, self.tr("Catchment recharge"), compat.SOURCE_POLYGON
            )
        )
        self._init_table_outputs()

    # ---------------------------------------------------------------- basins

    def _basin_sources(self, parameters, context):
        return {"catchments": self.source(parameters, self.CATCHMENTS, context)}

    def _basin_settings(self, parameters, context):
        field = self.field_name(parameters, self.CATCHMENT_GAUGE_FIELD, context)
        return {"catchment_gauge_field": field or None}

    def _check_basin_fields(self, sources, settings, feedback):
        """By id, the catchments need the gauge id field; by location they need none (the
        gauges then need points with a CRS, which the core checks)."""
        catchments = sources["catchments"]
        field = settings.catchment_gauge_field
        if settings.link_method(catchments.fields().names()) == "id":
            self._require_fields(
                catchments, [(self.CATCHMENT_GAUGE_FIELD, field)], "catchments layer"
            )
            feedback.pushInfo(self.tr("Gauges link to catchments by the field {}").format(field))
        elif settings.link == "auto":
            feedback.pushInfo(
                self.tr(
                    "The catchments have no field {}: each gauge links by location to the "
                    "smallest catchment it is the outlet of"
                ).format(field)
            )
        else:
            feedback.pushInfo(
                self.tr(
                    "Each gauge links by location to the smallest catchment it is the outlet of"
                )
            )
            if settings.catchment_field_given:
                feedback.pushInfo(
                    self.tr("The catchments' field {} is not used (LINK)").format(field)
                )

    def _run(self, tables, settings, reporter):
        from ..algorithms.pipeline import run_atlas

        return run_atlas(
            tables["gauges"].frame,
            tables["catchments"].frame,
            tables["discharge"].frame,
            settings,
            reporter,
        )

    def _write_basins(self, parameters, context, sources, tables, result, outputs):
        """The catchments as they came in (fields and geometries), with the core's fields
        added and the polygons the core repaired written repaired."""
        from ..algorithms.pipeline import CATCHMENT_FIELDS

        table = tables["catchments"]
        if len(result.catchments) != len(table.rows):
            raise QgsProcessingException("the pipeline returned a different number of catchments")
        kept = [c for c in result.catchments.columns if c not in CATCHMENT_FIELDS]
        outputs[self.OUTPUT] = self._write_polygons(
            parameters,
            self.OUTPUT,
            context,
            result.catchments,
            sources["catchments"].sourceCrs(),
            keep=table,
            keep_names=kept,
        )
