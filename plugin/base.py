"""What every Recharge Atlas Processing algorithm shares: translation, help, dependency checks."""

from __future__ import annotations

import re
from functools import cache
from pathlib import Path

from qgis.core import QgsProcessingAlgorithm, QgsProcessingException
from qgis.PyQt.QtCore import QCoreApplication

from . import compat, dependencies

HELP_DIR = Path(__file__).resolve().parent / "help"


@cache
def help_text(name: str) -> str:
    """The HTML help of algorithm ``name`` from ``plugin/help/<name>.html`` ("" when absent).

    Line breaks are folded into spaces: the Processing dialog shows each one as a new line,
    while the file keeps short lines for reading and review.
    """
    path = HELP_DIR / f"{name}.html"
    try:
        text = path.read_text(encoding="utf-8")
    except OSError:
        return ""
    return re.sub(r"\s*\n\s*", " ", text).strip()


class RechargeAtlasAlgorithm(QgsProcessingAlgorithm):
    """Base class: subclasses declare ``name``, ``displayName``, parameters and the work."""

    def tr(self, text: str) -> str:
        return QCoreApplication.translate("RechargeAtlas", text)

    def createInstance(self):  # noqa: N802 (QGIS API name)
        return type(self)()

    def shortHelpString(self) -> str:  # noqa: N802
        return help_text(self.name())

    def canExecute(self):  # noqa: N802
        """``(False, message)`` when a package the core needs is missing (GUI only)."""
        return dependencies.check()

    def require_dependencies(self) -> None:
        """Raise the :meth:`canExecute` message: headless runs never call canExecute."""
        ok, message = dependencies.check()
        if not ok:
            raise QgsProcessingException(message)

    def add_advanced(self, parameter):
        """Add ``parameter`` under the dialog's "Advanced parameters"."""
        parameter.setFlags(parameter.flags() | compat.PARAMETER_ADVANCED)
        return self.addParameter(parameter)

    def source(self, parameters, name, context):
        """The feature source of parameter ``name``; a clear error when it cannot be opened."""
        source = self.parameterAsSource(parameters, name, context)
        if source is None:
            raise QgsProcessingException(self.invalidSourceError(parameters, name))
        return source

    def field_name(self, parameters, name, context) -> str:
        """The single field chosen in field parameter ``name`` ("" when none, or when this
        algorithm has no such parameter)."""
        if self.parameterDefinition(name) is None:
            return ""
        fields = self.parameterAsFields(parameters, name, context)
        return fields[0] if fields else ""
