"""Typed empty tables, so a run with no rows still hands on every column with its type.

A table chained into another tool (a QGIS model, a script) needs its columns even when a run
gives it no rows. Column types follow the names used throughout the result tables.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: Whole-number columns of the result tables.
INTEGER_COLUMNS = {
    "event",
    "peaks_merged",
    "water_year",
    "days",
    "days_missing",
    "days_zero_or_flagged",
    "events",
    "events_skipped",
    "close_events",
    "fully_measured_years",
    "segments",
    "catchment_row",
    "recession_segments",
    "complete_years",
    "incremental_years",
}
#: True/false columns.
BOOLEAN_COLUMNS = {"used", "anchor_in_gap", "complete", "close_to_next", "all_events_measured"}
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
    "recharge_trend",
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


class ColumnTable:
    """A table kept as numpy columns; a pandas DataFrame is built only when asked for.

    The per-gauge work makes many small tables; building a DataFrame for each costs more
    than the arithmetic. Tables of many gauges are stacked column by column (:func:`stack`).
    """

    __slots__ = ("columns", "order", "_frame")

    def __init__(self, columns: dict, order=None):
        self.columns = columns
        self.order = list(order) if order is not None else list(columns)
        self._frame = None

    def __len__(self):
        return len(next(iter(self.columns.values()))) if self.columns else 0

    def __getitem__(self, name):
        return self.columns[name]

    def __contains__(self, name):
        return name in self.columns

    def frame(self) -> pd.DataFrame:
        """The table as a DataFrame (built once, then kept)."""
        if self._frame is None:
            if len(self) == 0:
                self._frame = empty_table(self.order)
            else:
                # A copy: some columns are shared, read-only arrays (cached calendars).
                self._frame = pd.DataFrame({c: self.columns[c] for c in self.order}, copy=True)
        return self._frame

    @classmethod
    def empty(cls, order):
        return cls({c: np.empty(0, dtype=column_dtype(c)) for c in order}, order)


def stack(tables, keys, key_name, order, share=False) -> pd.DataFrame:
    """One DataFrame of many tables, each row led by its table's key (e.g. the gauge id).

    The DataFrame holds the joined columns themselves (no second copy). With ``share`` each
    table's columns of numbers, dates and flags then become views of the joined ones, so the
    tables' own arrays are let go and a run holds its results once, not twice. (Columns of
    text are left as they are: pandas keeps its own copy of those.)
    """
    parts = [(key, t) for key, t in zip(keys, tables) if t is not None and len(t)]
    if not parts:
        return empty_table([key_name, *order])
    keys = np.empty(len(parts), dtype=object)
    keys[:] = [key for key, _ in parts]  # as they are (np.array would make tuples rows)
    data = {key_name: keys.repeat([len(t) for _, t in parts])}
    for c in order:
        data[c] = np.concatenate([np.asarray(t.columns[c]) for _, t in parts])
    frame = pd.DataFrame(data, copy=False)
    if share:
        ends = np.cumsum([len(t) for _, t in parts])
        starts = np.concatenate(([0], ends[:-1]))
        for c in order:
            joined = data[c]
            if joined.dtype == object:
                continue
            for (_, t), a, b in zip(parts, starts, ends):
                t.columns[c] = joined[a:b]
        for _, t in parts:
            t._frame = None
    return frame


def pack_tables(tables):
    """Many tables of one kind as one set of columns, to send between processes.

    Pickling a few long arrays costs far less than pickling many short ones, so a worker packs
    its gauge group's tables before returning them. ``tables`` is a list of
    :class:`ColumnTable` (or None); :func:`unpack_tables` gives the same list back, every
    column with its values and dtype unchanged. A column whose dtype differs between the
    tables is sent as it is (joining it would change a type).
    """
    present = [t for t in tables if t is not None]
    if not present:
        return ("as_is", list(tables))
    names = list(present[0].columns)
    order = present[0].order
    if any(list(t.columns) != names or t.order != order for t in present):
        return ("as_is", list(tables))
    lengths = np.array([-1 if t is None else len(t) for t in tables], dtype=np.int64)
    columns = {}
    for name in names:
        parts = [t.columns[name] for t in present]
        arrays = all(isinstance(p, np.ndarray) and p.ndim == 1 for p in parts)
        same = arrays and len({p.dtype for p in parts}) == 1
        columns[name] = np.concatenate(parts) if same else ("parts", parts)
    return ("packed", names, order, lengths, columns)


def unpack_tables(packed):
    """The list of tables :func:`pack_tables` packed (columns are views of the joined arrays)."""
    if packed[0] == "as_is":
        return packed[1]
    _, names, order, lengths, columns = packed
    present = lengths >= 0
    ends = np.cumsum(lengths[present]).tolist()
    spans = list(zip([0] + ends[:-1], ends))
    split = {}
    for name, joined in columns.items():
        if isinstance(joined, tuple):
            split[name] = joined[1]
        else:  # slices, as np.split gives them, without its cost per piece
            split[name] = [joined[a:b] for a, b in spans]
    out = []
    k = 0
    for is_present in present:
        if not is_present:
            out.append(None)
            continue
        out.append(ColumnTable({name: split[name][k] for name in names}, order))
        k += 1
    return out
