"""Processing algorithm ``recessionindex``: the recession index K of every gauge.

A thin shell over :func:`recharge_atlas.algorithms.pipeline.run_gauges`; the K it writes is the
K every other algorithm uses for the same record and settings.
"""

from __future__ import annotations

from .gauge_run import GaugeAlgorithm


class RecessionIndex(GaugeAlgorithm):
    """Recession index K (days per log cycle) from recession segments of the daily record, with
    its interval, the critical time Tc = 0.2144·K (Rorabaugh 1964) and the master recession
    curve."""

    _GAUGE_FIELDS = (
        "area_km2",
        "recession_index_days",
        "recession_index_low",
        "recession_index_high",
        "recession_segments",
        "critical_time_days",
        "runoff_end_lag_days",
        "quality",
    )
    _STYLED_OUTPUTS = {GaugeAlgorithm.OUTPUT: ("recession_index_days",)}
    _GROUP_ID = "recession"
    _WATER_YEAR = False

    def name(self):
        return "recessionindex"

    def displayName(self):  # noqa: N802 (QGIS API name)
        return self.tr("Recession index")

    def shortDescription(self):  # noqa: N802
        return self.tr(
            "The recession index K of each gauge (days for groundwater discharge to fall "
            "tenfold) from recession segments of its daily record, with its interval, the "
            "critical time and the master recession curve."
        )

    def tags(self):
        return self.tr(
            "groundwater,recession index,recession constant,master recession curve,"
            "critical time,streamflow,discharge,hydrology,gauge"
        ).split(",")

    def _init_outputs(self):
        self._gauge_sink(self.tr("Gauges with recession index"))
        self._table_sink(self.SEGMENTS, self.tr("Recession segments"), True)
        self._table_sink(self.MASTER_RECESSION, self.tr("Recession index by flow level"), True)
