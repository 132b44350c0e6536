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
    _GROUP_ID = "recession"
    _OWN_METHODS = (
        GaugeAlgorithm.BASEFLOW_METHOD,
        GaugeAlgorithm.BFI_MAX,
        *GaugeAlgorithm._GIVEN_INDEX,
    )
    _BASIC_METHODS = (
        GaugeAlgorithm.BASEFLOW_METHOD,
        GaugeAlgorithm.BFI_MAX,
        GaugeAlgorithm.RECESSION_INDEX,
    )

    def name(self):
        return "baseflowseparation"

    def displayName(self):  # noqa: N802 (QGIS API name)
        return self.tr("Baseflow separation")

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

    def _init_outputs(self):
        self._gauge_sink(self.tr("Gauges with baseflow index"))
        self._table_sink(self.DAILY, self.tr("Daily discharge and baseflow"), True)
