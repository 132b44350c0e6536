"""Progress, cancelling and per-gauge warnings of a run: :class:`Reporter` (the command line and
QGIS each pass their own).
"""

from __future__ import annotations


class Reporter:
    """Where the pipeline reports progress and messages. The default says nothing.

    The QGIS plugin passes one that talks to ``QgsProcessingFeedback``; the CLI one prints
    warnings to stderr.
    """

    def progress(self, done: int, total: int, gauge_id: str | None = None) -> None:
        """Called before each gauge (``done`` finished so far) and once at the end."""

    def cancelled(self) -> bool:
        """Return True to stop the run; the pipeline then raises :class:`Cancelled`."""
        return False

    def info(self, text: str) -> None:
        """A plain message."""

    def warning(self, text: str) -> None:
        """A caution about one gauge or catchment, or about most of them (a plausibility
        check most gauges fail); the run goes on."""
