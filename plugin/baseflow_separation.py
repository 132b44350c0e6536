"""Processing algorithm ``baseflowseparation``: daily baseflow and the baseflow index.

A thin shell over :func:`recharge_atlas.algorithms.pipeline.run_gauges`, so the baseflow is
the one the recharge algorithms put in their water balance for the same settings.
"""

from __future__ import annotations

from .gauge_run import GaugeAlgorithm


class BaseflowSeparation(GaugeAlgorithm):
    """Daily baseflow by the Eckhardt (2005) filter, the Lyne & Hollick (1979) filter in three
    passes (Nathan & McMahon 1990) or smoothed minima (Institute of Hydrology 1980), and the
    baseflow index Σ baseflow / Σ flow of every gauge."""

    _GAUGE_FIELDS = (
        "area_km2",
        "recession_index_days",
        "baseflow_index",
        "baseflow_mm_per_year",
        "quality",
    )
    _STYLED_OUTPUTS = {GaugeAlgorithm.OUTPUT: ("baseflow_index",)}

    def name(self):
        return "baseflowseparation"

    def displayName(self):  # noqa: N802 (QGIS API name)
        return self.tr("Baseflow separation")

    def group(self):
        return self.tr("Recession and baseflow")

    def groupId(self):  # noqa: N802
        return "recession"

    def shortDescription(self):  # noqa: N802
        return self.tr(
            "Splits each gauge's daily discharge into baseflow and quickflow with a published "
            "filter and gives the baseflow index of every gauge."
        )

    def tags(self):
        return self.tr(
            "groundwater,baseflow,baseflow index,baseflow separation,digital filter,"
            "recession index,streamflow,discharge,hydrology,gauge"
        ).split(",")

    def initAlgorithm(self, config=None):  # noqa: N802
        self._init_gauge_inputs(water_year=True)
        self._init_method_parameters(
            names=(
                self.BASEFLOW_METHOD,
                self.BFI_MAX,
                self.RECESSION_INDEX,
                self.RECESSION_INDEX_FIELD,
                self.RUNOFF_END_LAG,
                self.MIN_SEGMENT_DAYS,
                self.FLAG_FIELD,
                self.FLAG_VALUES,
                self.CLASSES,
                self.CLASS_COUNT,
                self.WORKERS,
            ),
            basic=(self.BASEFLOW_METHOD, self.BFI_MAX, self.RECESSION_INDEX),
        )
        self._gauge_sink(self.tr("Gauges with baseflow index"))
        self._table_sink(self.DAILY, self.tr("Daily discharge and baseflow"), True)
