"""What every Recharge Atlas Processing algorithm shares: translation, help, dependency checks."""

from __future__ import annotations

import re
from functools import cache
from pathlib import Path

from qgis.core import QgsProcessingAlgorithm, QgsProcessingException
from qgis.PyQt.QtCore import QCoreApplication

from . import compat, dependencies

HELP_DIR = Path(__file__).resolve().parent / "help"
#: Snippets that several helps share, each included where a help says ``<!-- include: NAME -->``.
SHARED_HELP_DIR = HELP_DIR / "shared"
_INCLUDE = re.compile(r"<!--\s*include:\s*([a-z_]+)\s*-->")
_COMMENT = re.compile(r"<!--.*?-->", re.S)


def _read(path: Path) -> str:
    try:
        return path.read_text(encoding="utf-8")
    except OSError:
        return ""


def _folded(text: str) -> str:
    return re.sub(r"\s*\n\s*", " ", text).strip()


@cache
def shared_help(name: str) -> str:
    """The shared help snippet ``plugin/help/shared/<name>.html``, its comments left out and
    its line breaks folded ("" when absent)."""
    return _folded(_COMMENT.sub("", _read(SHARED_HELP_DIR / f"{name}.html")))


@cache
def help_text(name: str) -> str:
    """The HTML help of algorithm ``name`` from ``plugin/help/<name>.html`` ("" when absent).

    Each ``<!-- include: NAME -->`` is replaced by the shared snippet
    ``plugin/help/shared/NAME.html`` (the cautions every algorithm states live in
    ``shared/cautions.html``). Line breaks are folded into spaces: the Processing dialog
    shows each one as a new line, while the files keep short lines for reading and review.
    """
    text = _read(HELP_DIR / f"{name}.html")
    return _folded(_INCLUDE.sub(lambda match: shared_help(match.group(1)), text))


_WHAT_IT_DOES = re.compile(r"<h3>What it does</h3>\s*(<p>.*?</p>)", re.S)


@cache
def short_help(name: str) -> str:
    """The short help of algorithm ``name``: its "What it does" paragraph and the cautions in
    brief (``shared/cautions_short.html``). The dialog shows it beside the parameters and
    ``qgis_process help`` prints it; the full page is behind :func:`help_page`."""
    found = _WHAT_IT_DOES.search(_read(HELP_DIR / f"{name}.html"))
    first = _folded(found.group(1)) if found else ""
    return (first + " " + shared_help("cautions_short")).strip()


def help_page(name: str) -> Path | None:
    """The full help of algorithm ``name`` as a page of its own, for the Help button.

    The help file's includes are resolved (see :func:`help_text`), so the page is written once
    per version into a folder of the temporary directory (the plugin's own folder may be
    read-only). None when there is no help or nothing can be written.
    """
    import tempfile

    body = help_text(name)
    if not body:
        return None
    from ..algorithms.provenance import tool_version

    folder = Path(tempfile.gettempdir()) / f"recharge-atlas-help-{tool_version()}"
    page = folder / f"{name}.html"
    text = (
        '<!DOCTYPE html><html><head><meta charset="utf-8">'
        f"<title>Recharge Atlas: {name}</title></head><body>{body}</body></html>\n"
    )
    try:
        if not page.is_file() or page.read_text(encoding="utf-8") != text:
            folder.mkdir(parents=True, exist_ok=True)
            page.write_text(text, encoding="utf-8")
    except OSError:
        return None
    return page


class RechargeAtlasAlgorithm(QgsProcessingAlgorithm):
    """Base class: subclasses declare ``name``, ``displayName``, parameters and the work."""

    def tr(self, text: str) -> str:
        return QCoreApplication.translate("RechargeAtlas", text)

    def createInstance(self):  # noqa: N802 (QGIS API name)
        return type(self)()

    def shortHelpString(self) -> str:  # noqa: N802
        return short_help(self.name())

    def helpUrl(self) -> str:  # noqa: N802
        """The full help page (a local file: see :func:`help_page`)."""
        from qgis.PyQt.QtCore import QUrl

        page = help_page(self.name())
        return QUrl.fromLocalFile(str(page)).toString() if page is not None else ""

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
