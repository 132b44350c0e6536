"""Processing algorithm ``linkcheck``: how gauges link to catchments and how the basins nest,
before any hydrology.

A thin shell over :func:`recharge_atlas.algorithms.pipeline.check_links`, the linking and
nesting ``catchmentrecharge`` does first, so a layer that passes here links the same way there.
It reads no discharge and takes seconds, so it is the place to fix ids, tolerances and polygons
before a long run.
"""

from __future__ import annotations

from dataclasses import dataclass

from qgis.core import QgsProcessingException, QgsProcessingParameterFeatureSink

from . import compat
from .catchment_recharge import CatchmentAlgorithm
from .progress import _READ_END, _RUN_END

#: Fields the core gives the catchments (``check_links``), in order; tests check them.
LINK_FIELDS = (
    "gauge_id",
    "area_km2",
    "incremental_area_km2",
    "downstream_gauge",
    "upstream_gauges",
    "quality",
)


@dataclass
class LinkCheck:
    """What ``check_links`` returns, by name: the catchments layer and the links table."""

    catchments: object
    links: object


class LinkCheckAlgorithm(CatchmentAlgorithm):
    """Links gauges to catchments (by id or by location) and finds the nesting of the gauged
    basins and their incremental areas, without reading any discharge."""

    _STYLED_OUTPUTS = {CatchmentAlgorithm.OUTPUT: ()}  # larger basins drawn first

    def name(self):
        return "linkcheck"

    def displayName(self):  # noqa: N802 (QGIS API name)
        return self.tr("Check gauge links and nesting")

    def group(self):
        return self.tr("Basins")

    def groupId(self):  # noqa: N802
        return "basins"

    def shortDescription(self):  # noqa: N802
        return self.tr(
            "Which catchment each gauge drains, which gauged basins lie inside which and the "
            "areas between them, checked before any hydrology runs."
        )

    def tags(self):
        return self.tr(
            "catchment,basin,gauge,outlet,link,nested basins,incremental area,drainage area,"
            "check,hydrology"
        ).split(",")

    def initAlgorithm(self, config=None):  # noqa: N802
        self._init_gauge_layer_parameters()
        self._init_catchment_parameters()
        self._init_method_parameters(
            names=(self.LINK, self.LINK_TOLERANCE, self.OVERLAP_TOLERANCE), link=True
        )
        self.addParameter(
            QgsProcessingParameterFeatureSink(
                self.OUTPUT,
                self.tr("Catchments with links and nesting"),
                compat.SOURCE_POLYGON,
            )
        )
        self._table_sink(self.LINKS, self.tr("How gauges link to basins"), True)

    def _run(self, tables, settings, reporter):
        from ..algorithms.errors import Cancelled
        from ..algorithms.pipeline import check_links

        feedback = reporter.feedback
        feedback.setProgressText(self.tr("Linking gauges to catchments"))
        layer, links = check_links(
            tables["gauges"].frame, tables["catchments"].frame, settings, reporter
        )
        if feedback.isCanceled():
            raise Cancelled("run cancelled")
        feedback.setProgress(_READ_END + 0.9 * (_RUN_END - _READ_END))
        return LinkCheck(layer, links)

    def _write_basins(self, parameters, context, sources, tables, result, outputs):
        """The catchments as they came in (fields and geometries; repaired ones repaired)
        with the link and nesting fields."""
        table = tables["catchments"]
        if len(result.catchments) != len(table.rows):
            raise QgsProcessingException("the link check returned a different number of rows")
        kept = [c for c in result.catchments.columns if c not in LINK_FIELDS]
        outputs[self.OUTPUT] = self._write_polygons(
            parameters,
            self.OUTPUT,
            context,
            result.catchments,
            sources["catchments"].sourceCrs(),
            keep=table,
            keep_names=kept,
        )

    def _summarize(self, result, feedback):
        """The last line of the log: gauges linked and not, catchments with and without a
        gauge, gauges nested in another's basin."""
        links = result.links
        status = links["link"].value_counts()
        linked = int(status.get("linked", 0))
        rows = {int(r) for r in links["catchment_row"] if int(r) >= 0}
        nested = int(result.catchments["downstream_gauge"].notna().sum())
        feedback.pushInfo(
            self.tr(
                "Summary: {} gauges: {} linked, {} not linked ({} unlinked, {} ambiguous, {} on "
                "several catchments); {} of {} catchments have a gauge; {} gauged basins lie "
                "inside another"
            ).format(
                len(links),
                linked,
                len(links) - linked,
                int(status.get("unlinked", 0)),
                int(status.get("ambiguous", 0)),
                int(status.get("several catchments", 0)),
                len(rows),
                len(result.catchments),
                nested,
            )
        )
