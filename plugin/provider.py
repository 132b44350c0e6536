"""The Processing provider ``recharge_atlas``."""

from __future__ import annotations

import configparser
from pathlib import Path

from qgis.core import QgsProcessingProvider
from qgis.PyQt.QtGui import QIcon

from .baseflow_separation import BaseflowSeparation
from .catchment_recharge import CatchmentRecharge
from .event_recharge import EventRecharge
from .link_check import LinkCheckAlgorithm
from .recession_index import RecessionIndex
from .recharge_report import RechargeReport
from .subbasin_recharge import SubbasinRecharge

PLUGIN_DIR = Path(__file__).resolve().parent
ICON = PLUGIN_DIR / "icon.svg"
METADATA = PLUGIN_DIR.parent / "metadata.txt"

#: Algorithm classes the provider offers.
ALGORITHMS = (
    CatchmentRecharge,
    SubbasinRecharge,
    EventRecharge,
    RecessionIndex,
    BaseflowSeparation,
    LinkCheckAlgorithm,
    RechargeReport,
)


def plugin_version() -> str:
    """The version from metadata.txt, the only place it lives ("" when unreadable)."""
    parser = configparser.ConfigParser(interpolation=None)
    try:
        parser.read(METADATA, encoding="utf-8")
        return parser.get("general", "version", fallback="")
    except (OSError, configparser.Error):
        return ""


class RechargeAtlasProvider(QgsProcessingProvider):
    """Lists the Recharge Atlas algorithms. They load whether or not pandas and friends import;
    each one checks for them when it runs."""

    def id(self):
        return "recharge_atlas"

    def name(self):
        return "Recharge Atlas"

    def longName(self):  # noqa: N802 (QGIS API name)
        version = plugin_version()
        return f"Recharge Atlas {version}".strip()

    def versionInfo(self):  # noqa: N802
        return plugin_version()

    def icon(self):
        return QIcon(str(ICON))

    def svgIconPath(self):  # noqa: N802
        return str(ICON)

    def loadAlgorithms(self):  # noqa: N802
        for algorithm in ALGORITHMS:
            self.addAlgorithm(algorithm())
