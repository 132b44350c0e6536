"""Processing algorithm ``rechargereport``: the HTML report of a catchment recharge run.

The same run as ``catchmentrecharge`` (:func:`recharge_atlas.algorithms.pipeline.run_atlas`,
the same parameters), written as one self-contained HTML page by the core's
:func:`recharge_atlas.algorithms.report.write_report` instead of layers. The page is written
atomically after the run, so a cancelled or failed run leaves none.
"""

from __future__ import annotations

from qgis.core import QgsProcessingParameterFileDestination

from .catchment_recharge import CatchmentAlgorithm


class RechargeReport(CatchmentAlgorithm):
    """One HTML page with the map, the cautions and, per gauge, the hydrograph with each
    event's construction, the recession-segment fit, the annual table and the flags."""

    _STYLED_OUTPUTS = {}

    def name(self):
        return "rechargereport"

    def displayName(self):  # noqa: N802 (QGIS API name)
        return self.tr("Recharge report")

    def group(self):
        return self.tr("Reports")

    def groupId(self):  # noqa: N802
        return "reports"

    def shortDescription(self):  # noqa: N802
        return self.tr(
            "Runs catchment recharge and writes the results as one self-contained HTML page: "
            "map, cautions, and per gauge the hydrograph with every event, the recession fit "
            "and the annual table."
        )

    def tags(self):
        return self.tr(
            "groundwater,recharge,report,html,map,hydrograph,recession index,water year,"
            "catchment,hydrology"
        ).split(",")

    def initAlgorithm(self, config=None):  # noqa: N802
        self._init_catchment_run_inputs()
        self.addParameter(
            QgsProcessingParameterFileDestination(
                self.REPORT,
                self.tr("Report (HTML page)"),
                fileFilter=self.tr("HTML files (*.html *.htm)"),
            )
        )

    def _write_basins(self, parameters, context, sources, tables, result, outputs):
        """No layers: the report is the output."""
