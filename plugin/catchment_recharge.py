"""Processing algorithm ``catchmentrecharge``: recharge for every gauged catchment.

A thin shell over :func:`recharge_atlas.algorithms.pipeline.run_atlas`, the pipeline the
command line uses too, so both give the same numbers. The parameters, tables and report it
shares with ``subbasinrecharge`` live in :mod:`recharge_run` and its mixins (declared in
:mod:`parameter_declarations`, written by :mod:`sink_writing`); the catchment parameters and the
linking it shares with ``linkcheck`` and ``rechargereport`` in :class:`CatchmentAlgorithm`.
"""

from __future__ import annotations

from qgis.core import (
    QgsProcessingException,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterRasterLayer,
)

from . import compat, styling
from .recharge_run import RechargeRunAlgorithm


class CatchmentAlgorithm(RechargeRunAlgorithm):
    """Base of the algorithms whose basins are catchment polygons, one per gauge (nested ones
    overlap): the CATCHMENTS parameters and how gauges find their catchments."""

    CATCHMENTS = "CATCHMENTS"
    CATCHMENT_GAUGE_FIELD = "CATCHMENT_GAUGE_FIELD"
    INCREMENTAL_AREAS = "INCREMENTAL_AREAS"
    PRECIPITATION_FIELD = "PRECIPITATION_FIELD"
    PRECIPITATION_RASTER = "PRECIPITATION_RASTER"

    #: The precipitation raster of this run (set by :meth:`_prepare`), or None.
    _precipitation_raster = None

    def _init_precipitation_parameters(self):
        """Mean annual precipitation (mm/yr) by a field of the catchments or a raster: the
        catchments then get the share of precipitation that recharges (advanced)."""
        self.add_advanced(
            QgsProcessingParameterField(
                self.PRECIPITATION_FIELD,
                self.tr("Mean annual precipitation field in the catchments (mm/yr)"),
                parentLayerParameterName=self.CATCHMENTS,
                type=compat.FIELD_NUMERIC,
                optional=True,
            )
        )
        self.add_advanced(
            QgsProcessingParameterRasterLayer(
                self.PRECIPITATION_RASTER,
                self.tr("or a raster of mean annual precipitation (mm/yr)"),
                optional=True,
            )
        )

    def _given_raster(self, parameters, context):
        if not self._has(self.PRECIPITATION_RASTER) or not parameters.get(
            self.PRECIPITATION_RASTER
        ):
            return None
        return self.parameterAsRasterLayer(parameters, self.PRECIPITATION_RASTER, context)

    def _init_catchment_parameters(self):
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

    def _init_catchment_run_inputs(self):
        """The inputs of a recharge run on catchments: the gauges and discharge table, the
        catchments, the units and water year, and every method parameter."""
        self._init_gauge_parameters()
        self._init_catchment_parameters()
        self._init_unit_parameters()
        self._init_method_parameters(link=True)

    def _basin_sources(self, parameters, context):
        return {"catchments": self.source(parameters, self.CATCHMENTS, context)}

    def _basin_settings(self, parameters, context):
        from ..algorithms.precipitation import RASTER_FIELD

        field = self.field_name(parameters, self.CATCHMENT_GAUGE_FIELD, context)
        settings = {"catchment_gauge_field": field or None}
        if self._has(self.PRECIPITATION_FIELD):
            rain = self.field_name(parameters, self.PRECIPITATION_FIELD, context) or None
            self._precipitation_both = bool(rain and parameters.get(self.PRECIPITATION_RASTER))
            settings["precipitation_field"] = (
                RASTER_FIELD if parameters.get(self.PRECIPITATION_RASTER) else rain
            )
        return settings

    #: Both a precipitation field and a raster were given (refused when the inputs are read).
    _precipitation_both = False

    def _prepare(self, parameters, context, gauges):
        self._precipitation_raster = self._given_raster(parameters, context)
        self._precipitation_asked = bool(
            self._has(self.PRECIPITATION_RASTER) and parameters.get(self.PRECIPITATION_RASTER)
        )

    def _check_basins(self, tables, settings, feedback):
        """The raster's mean under each catchment, into the field the core reads."""
        if self._precipitation_raster is None:
            return
        from ..algorithms.precipitation import RASTER_FIELD
        from .precipitation import zonal_means

        feedback.setProgressText(self.tr("Precipitation under each catchment"))
        frame = tables["catchments"].frame
        frame[RASTER_FIELD] = zonal_means(self._precipitation_raster, frame, feedback)

    def _check_basin_fields(self, sources, settings, feedback):
        """By id, the catchments need the gauge id field; by location they need none (the
        gauges then need points with a CRS, which the core checks). A precipitation field must
        be there; a precipitation raster must be readable."""
        from ..algorithms.errors import InputError

        catchments = sources["catchments"]
        if self._precipitation_both:
            raise InputError(
                "give the precipitation as a field (PRECIPITATION_FIELD) or as a raster "
                "(PRECIPITATION_RASTER), not both"
            )
        if getattr(self, "_precipitation_asked", False) and self._precipitation_raster is None:
            raise InputError("the precipitation raster could not be read (PRECIPITATION_RASTER)")
        if self._precipitation_raster is None and settings.precipitation_field:
            self._require_fields(
                catchments,
                [(self.PRECIPITATION_FIELD, settings.precipitation_field)],
                "catchments layer",
            )
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
            keep_series=self._keep_series,
        )

    def _write_basins(self, parameters, context, sources, tables, result, outputs):
        """The catchments as they came in (fields and geometries), with the core's fields
        added and the polygons the core repaired written repaired; and, when asked for, the
        incremental areas between nested gauges."""
        from ..algorithms.pipeline import CATCHMENT_FIELDS

        table = tables["catchments"]
        if len(result.catchments) != len(table.rows):
            raise QgsProcessingException("the pipeline returned a different number of catchments")
        crs = sources["catchments"].sourceCrs()
        kept = [c for c in result.catchments.columns if c not in CATCHMENT_FIELDS]
        outputs[self.OUTPUT] = self._write_polygons(
            parameters,
            self.OUTPUT,
            context,
            result.catchments,
            crs,
            keep=table,
            keep_names=kept,
        )
        if self._requested(parameters, self.INCREMENTAL_AREAS, context):
            dest = self._write_polygons(
                parameters, self.INCREMENTAL_AREAS, context, result.incremental_areas(), crs
            )
            if dest is not None:
                outputs[self.INCREMENTAL_AREAS] = dest


class CatchmentRecharge(CatchmentAlgorithm):
    """Mean annual, annual and event recharge by recession-curve displacement (Rorabaugh 1964)."""

    _STYLED_OUTPUTS = {
        RechargeRunAlgorithm.OUTPUT: (styling.RECHARGE_FIELD,),
        CatchmentAlgorithm.INCREMENTAL_AREAS: ("incremental_recharge_mm_per_year",),
    }

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
        self._init_catchment_run_inputs()
        self._init_precipitation_parameters()
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                self.OUTPUT, self.tr("Catchment recharge"), compat.SOURCE_POLYGON
            )
        )
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                self.INCREMENTAL_AREAS,
                self.tr("Recharge of the areas between nested gauges"),
                compat.SOURCE_POLYGON,
                optional=True,
                createByDefault=False,
            )
        )
        self._init_table_outputs()
