"""The pipeline's Reporter, bound to a QgsProcessingFeedback.

Imported only once the dependency check has passed: it subclasses the core's ``Reporter``.
"""

from __future__ import annotations

from ..algorithms.pipeline import Reporter


def push_warning(feedback, text: str) -> None:
    """A non-fatal warning: ``pushWarning`` where QGIS has it, else a non-fatal error line."""
    if hasattr(feedback, "pushWarning"):
        feedback.pushWarning(text)
    elif hasattr(feedback, "reportError"):
        feedback.reportError(text, False)
    else:
        feedback.pushInfo(text)


class FeedbackReporter(Reporter):
    """Progress, cancel and messages of a run, through Processing's feedback.

    Parameters
    ----------
    feedback : QgsProcessingFeedback
    start, end : float
        The span of the progress bar (percent) that the gauges fill.
    text : str
        The progress text shown for each gauge, with ``{gauge}``, ``{number}`` and ``{total}``.
    """

    def __init__(
        self,
        feedback,
        start: float = 0.0,
        end: float = 100.0,
        text: str = "Gauge {gauge} ({number} of {total})",
    ):
        self.feedback = feedback
        self.start = float(start)
        self.end = float(end)
        self.text = text

    def progress(self, done, total, gauge_id=None):
        share = done / total if total > 0 else 1.0
        self.feedback.setProgress(self.start + (self.end - self.start) * min(max(share, 0.0), 1.0))
        if gauge_id is not None:
            self.feedback.setProgressText(
                self.text.format(gauge=gauge_id, number=done + 1, total=total)
            )

    def cancelled(self):
        return bool(self.feedback.isCanceled())

    def info(self, text):
        self.feedback.pushInfo(text)

    def warning(self, text):
        push_warning(self.feedback, text)
