"""Processing algorithm ``eventrecharge``: the recharge of every event at every gauge.

A thin shell over :func:`recharge_atlas.algorithms.pipeline.run_gauges`; the event table is the
one ``catchmentrecharge`` writes for the same record and settings, with depths when the gauges
carry their drainage areas.
"""

from __future__ import annotations

from .gauge_run import GaugeAlgorithm


class EventRecharge(GaugeAlgorithm):
    """Recharge of each event by recession-curve displacement (Rorabaugh 1964), at gauges
    without catchment polygons."""

    _GAUGE_FIELDS = (
        "area_km2",
        "recession_index_days",
        "critical_time_days",
        "runoff_end_lag_days",
        "events",
        "recharge_m3_per_year",
        "recharge_mm_per_year",
        "complete_years",
        "quality",
    )
    #: Fields added from the event table, after ``events``.
    EVENT_FIELDS = ("events_skipped", "mean_event_recharge_m3", "mean_event_recharge_mm")
    _STYLED_OUTPUTS = {GaugeAlgorithm.OUTPUT: ("recharge_mm_per_year", "recharge_m3_per_year")}
    _OWN_METHODS = GaugeAlgorithm._GIVEN_INDEX

    def name(self):
        return "eventrecharge"

    def displayName(self):  # noqa: N802 (QGIS API name)
        return self.tr("Event recharge")

    def shortDescription(self):  # noqa: N802
        return self.tr(
            "The groundwater recharge of every event at every gauge by recession-curve "
            "displacement, from daily streamflow alone (no catchment polygons needed)."
        )

    def tags(self):
        return self.tr(
            "groundwater,recharge,event,recession-curve displacement,critical time,"
            "recession index,water year,streamflow,discharge,hydrology,gauge"
        ).split(",")

    def _init_outputs(self):
        self._table_sink(self.EVENTS, self.tr("Recharge events"), True, optional=False)
        self._gauge_sink(self.tr("Gauges with event recharge"), optional=True)

    def _gauge_values(self, result):
        """The core's per-gauge fields, with the events that could not be measured and the
        mean recharge of those that could, per gauge."""
        import numpy as np

        table = super()._gauge_values(result)
        events = result.events
        skipped, mean_m3, mean_mm = {}, {}, {}
        for gid, rows in events.groupby("gauge_id", sort=False):
            used = rows["used"].astype(bool).to_numpy()
            skipped[gid] = int((~used).sum())
            m3 = rows["recharge_m3"].to_numpy(dtype=float)[used]
            mm = rows["recharge_mm"].to_numpy(dtype=float)[used]
            mean_m3[gid] = float(np.nanmean(m3)) if np.isfinite(m3).any() else np.nan
            mean_mm[gid] = float(np.nanmean(mm)) if np.isfinite(mm).any() else np.nan
        ids = table["gauge_id"]
        at = table.columns.get_loc("events") + 1
        table = table.copy()
        table.insert(at, "events_skipped", [skipped.get(g, 0) for g in ids])
        table.insert(at + 1, "mean_event_recharge_m3", [mean_m3.get(g, np.nan) for g in ids])
        table.insert(at + 2, "mean_event_recharge_mm", [mean_mm.get(g, np.nan) for g in ids])
        table["events_skipped"] = table["events_skipped"].astype("int64")
        return table
