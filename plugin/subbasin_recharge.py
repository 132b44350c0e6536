"""Processing algorithm ``subbasinrecharge``: recharge mapped across a subbasin map.

A thin shell over :func:`recharge_atlas.algorithms.pipeline.run_atlas_subbasins`, the pipeline
``recharge-atlas run --subbasins`` uses too, so both give the same numbers. Basins are
described as non-overlapping subbasins that each name the subbasin they drain into; each gauge
sits at the outlet of the subbasin it lies in. The parameters, tables and report it shares with
``catchmentrecharge`` live in :mod:`recharge_run` and its mixins.
"""

from __future__ import annotations

from qgis.core import (
    QgsProcessingException,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
)

from . import compat, styling
from .recharge_run import RechargeRunAlgorithm

#: Fields the core gives each subbasin, in order (``run_atlas_subbasins``); tests check them.
SUBBASIN_FIELDS = (
    "downstream_gauge",
    "recharge_mm_per_year",
    "recharge_m3_per_year",
    "estimate_source",
    "area_km2",
    "quality",
)


class SubbasinRecharge(RechargeRunAlgorithm):
    OUTPUT_LAYER = "subbasins"
    """Recharge of every subbasin from the gauge downstream of it, by recession-curve
    displacement (Rorabaugh 1964) and incremental areas between nested gauges."""

    SUBBASINS = "SUBBASINS"
    SUBBASIN_ID_FIELD = "SUBBASIN_ID_FIELD"
    DOWNSTREAM_FIELD = "DOWNSTREAM_FIELD"
    CATCHMENTS = "CATCHMENTS"

    _DEFAULT_FIELDS = RechargeRunAlgorithm._DEFAULT_FIELDS + (SUBBASIN_ID_FIELD, DOWNSTREAM_FIELD)
    _STYLED_OUTPUTS = {
        RechargeRunAlgorithm.OUTPUT: (styling.RECHARGE_FIELD,),
        CATCHMENTS: (styling.RECHARGE_FIELD,),
    }

    def name(self):
        return "subbasinrecharge"

    def displayName(self):  # noqa: N802 (QGIS API name)
        return self.tr("Subbasin recharge")

    def shortDescription(self):  # noqa: N802
        return self.tr(
            "Groundwater recharge mapped across subbasins: each subbasin takes the recharge "
            "depth of the area between the gauge downstream of it and the gauges above, from "
            "daily streamflow by recession-curve displacement."
        )

    def tags(self):
        return self.tr(
            "groundwater,recharge,streamflow,discharge,recession index,critical time,"
            "water year,baseflow,hydrology,subbasin,incremental area,nested basins"
        ).split(",")

    def initAlgorithm(self, config=None):  # noqa: N802
        self._init_gauge_parameters()
        self.addParameter(
            QgsProcessingParameterFeatureSource(
                self.SUBBASINS, self.tr("Subbasins"), [compat.SOURCE_POLYGON]
            )
        )
        self._init_field_parameters(
            self.SUBBASINS,
            (
                (self.SUBBASIN_ID_FIELD, self.tr("Subbasin id field"), "subbasin_id"),
                (
                    self.DOWNSTREAM_FIELD,
                    self.tr("Field naming the subbasin each drains into"),
                    "downstream_id",
                ),
            ),
        )
        self._choice_parameter(
            self.UNGAUGED, self.tr("Subbasins with no gauge downstream take"), "donor"
        )
        self._init_unit_parameters()
        self._init_method_parameters(link=False)
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                self.OUTPUT, self.tr("Subbasin recharge"), compat.SOURCE_POLYGON
            )
        )
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                self.CATCHMENTS,
                self.tr("Gauged basins built from the subbasins"),
                compat.SOURCE_POLYGON,
                optional=True,
                createByDefault=True,
            )
        )
        self._init_table_outputs()

    # ---------------------------------------------------------------- basins

    def _basin_sources(self, parameters, context):
        return {"subbasins": self.source(parameters, self.SUBBASINS, context)}

    def _basin_settings(self, parameters, context):
        return {
            "subbasin_id_field": self.field_name(parameters, self.SUBBASIN_ID_FIELD, context)
            or "subbasin_id",
            "downstream_field": self.field_name(parameters, self.DOWNSTREAM_FIELD, context)
            or "downstream_id",
        }

    def _check_basin_fields(self, sources, settings, feedback):
        self._require_fields(
            sources["subbasins"],
            [
                (self.SUBBASIN_ID_FIELD, settings.subbasin_id_field),
                (self.DOWNSTREAM_FIELD, settings.downstream_field),
            ],
            "subbasins layer",
        )

    def _check_basins(self, tables, settings, feedback):
        """The drainage network (unique ids, no loops) is checked as soon as the subbasins are
        read, before the discharge table, so a bad network stops the run at once. The core
        reads it again when it runs: this is its own check, called early."""
        from ..algorithms.errors import InputError
        from ..algorithms.subbasins import read_network

        try:
            read_network(
                tables["subbasins"].frame, settings.subbasin_id_field, settings.downstream_field
            )
        except InputError as exc:
            parameter = (
                self.SUBBASIN_ID_FIELD
                if exc.field == settings.subbasin_id_field
                else self.DOWNSTREAM_FIELD
            )
            raise InputError(f"{exc} ({parameter})") from None

    def _run(self, tables, settings, reporter):
        from ..algorithms.pipeline import run_atlas_subbasins

        return run_atlas_subbasins(
            tables["gauges"].frame,
            tables["subbasins"].frame,
            tables["discharge"].frame,
            settings,
            reporter,
            keep_series=self._keep_series,
        )

    def _write_basins(self, parameters, context, sources, tables, result, outputs):
        """The subbasins as they came in (fields and geometries, repaired ones repaired) with
        the recharge fields; and, when asked for, the gauged basins the core built."""
        table = tables["subbasins"]
        subbasins = result.subbasins
        if subbasins is None or len(subbasins) != len(table.rows):
            raise QgsProcessingException("the pipeline returned a different number of subbasins")
        crs = sources["subbasins"].sourceCrs()
        kept = [c for c in subbasins.columns if c not in SUBBASIN_FIELDS]
        outputs[self.OUTPUT] = self._write_polygons(
            parameters, self.OUTPUT, context, subbasins, crs, keep=table, keep_names=kept
        )
        if self._requested(parameters, self.CATCHMENTS, context):
            dest = self._write_polygons(
                parameters, self.CATCHMENTS, context, result.catchments, crs
            )
            if dest is not None:
                outputs[self.CATCHMENTS] = dest
