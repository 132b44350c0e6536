"""How the progress bar is shared between the stages of a run: reading the inputs (to
``_READ_END`` percent), running the core (to ``_RUN_END``), drawing the report (to
``_REPORT_END``) and writing the outputs (to 100)."""

from __future__ import annotations

_READ_END, _RUN_END, _REPORT_END = 15.0, 85.0, 90.0
