"""Typed empty tables, so a run with no rows still hands on every column with its type.

A table chained into another tool (a QGIS model, a script) needs its columns even when a run
gives it no rows. Column types follow the names used throughout the result tables.
"""

from __future__ import annotations

import pandas as pd

#: Whole-number columns of the result tables.
INTEGER_COLUMNS = {
    "event",
    "peaks_merged",
    "water_year",
    "days",
    "days_missing",
    "events",
    "events_skipped",
    "segments",
    "catchment_row",
    "recession_segments",
    "complete_years",
    "incremental_years",
}
#: True/false columns.
BOOLEAN_COLUMNS = {"used", "anchor_in_gap", "complete"}
#: Text columns.
TEXT_COLUMNS = {
    "gauge_id",
    "note",
    "period",
    "quality",
    "link",
    "method",
    "catchment",
    "estimate_source",
    "downstream_gauge",
    "upstream_gauges",
}


def column_dtype(name: str) -> str:
    """The dtype of a result column, from its name."""
    if name.endswith("_date") or name == "date":
        return "datetime64[ns]"
    if name in INTEGER_COLUMNS:
        return "int64"
    if name in BOOLEAN_COLUMNS:
        return "bool"
    if name in TEXT_COLUMNS:
        return "object"
    return "float64"


def empty_table(columns) -> pd.DataFrame:
    """A table with no rows and the given columns, each with its type."""
    return pd.DataFrame({c: pd.Series(dtype=column_dtype(c)) for c in columns})
