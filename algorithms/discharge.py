"""Reading a long discharge table (gauge id, date, value) into one daily series per gauge."""

from __future__ import annotations

import contextlib
import datetime as _dt
import functools
import importlib
import re
import threading
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

# read_dates and its bounds stay importable from here, as before the dates had a module
from .dates import (  # noqa: F401
    _TICK_UNITS,
    FIRST_YEAR,
    LAST_YEAR,
    DateReading,
    read_dates,
)
from .errors import InputError, counted, listed, quoted
from .units import canonical_units, to_cubic_metres_per_second

#: Default share of a day's expected sub-daily values needed for a daily mean (our own rule).
MIN_DAY_COVERAGE = 0.75


@dataclass
class GaugeRecord:
    """The daily discharge record of one gauge.

    Attributes
    ----------
    gauge_id : str
        The gauge id, as text.
    flow : pandas.Series
        Daily mean discharge in m³/s on a complete daily ``DatetimeIndex`` from the first to the
        last dated value; days without a usable value are NaN.
    counts : dict
        How many input rows the gauge had (``rows``); how many values were missing
        (``missing``), not numbers (``non_numeric``), negative or infinite (``negative``),
        impossibly large (``implausible``, over :data:`MAX_DISCHARGE_M3S`) or
        missing-value codes such as -999 (``missing_value_code``, the codes in
        ``missing_value_codes``); how many rows had a date that could not be read
        (``unreadable_dates``, one of them in ``unreadable_date_example``) and how many a
        time-zone offset (``dates_with_offset``, ignored); how many rows repeated a time
        already given (``repeated_rows``) and at how many times the values differed
        (``conflicting_times``, averaged); how many days held several values that were
        averaged (``days_averaged``), sub-daily days with too few values (``days_incomplete``)
        and flagged days (``days_flagged``); and whether the record is sub-daily.
    flagged : pandas.Series of bool
        Days the user flagged through a quality-code column: kept in the flow, not used by the
        method.
    """

    gauge_id: str
    flow: pd.Series
    counts: dict = field(default_factory=dict)
    flagged: pd.Series | None = None

    def __post_init__(self):
        if self.flagged is None:
            self.flagged = pd.Series(False, index=self.flow.index, name="flagged")

    @property
    def days(self) -> int:
        return int(self.flow.size)

    @functools.cached_property
    def days_with_value(self) -> int:
        return int(np.count_nonzero(np.isfinite(self.flow.to_numpy(dtype=float))))

    def __repr__(self):
        if self.flow.empty:
            return f"GaugeRecord({self.gauge_id!r}, empty)"
        return (
            f"GaugeRecord({self.gauge_id!r}, {self.flow.index[0]:%Y-%m-%d}..{self.flow.index[-1]:%Y-%m-%d}, "
            f"{self.days_with_value}/{self.days} days with a value)"
        )


def gauge_id_text(values) -> np.ndarray:
    """Gauge ids as clean text: ``1001``, ``1001.0`` and ``' 1001 '`` all become ``'1001'``.

    Returns an object array; missing ids become ``None``. Text ids keep their leading zeros.
    """
    codes, names = gauge_id_codes(values)
    return np.array(list(names) + [None], dtype=object)[codes]


def _clean_id(value):
    """One gauge id as clean text (see :func:`gauge_id_text`), None when missing."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, (float, np.floating)):
        if np.isnan(value):
            return None
        if float(value).is_integer():
            return str(int(value))
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    text = str(value).strip()
    return text or None


def gauge_id_codes(values):
    """Gauge ids as numbers: ``(codes, names)`` with ``names[codes[i]]`` the clean text of row
    ``i`` (see :func:`gauge_id_text`) and −1 where the id is missing.

    Names come in order of first appearance. Each distinct value is cleaned once and the rows
    are never turned into Python strings one by one, so a column of millions of ids (one per
    day) costs one integer array.
    """
    if isinstance(values, (pd.Series, pd.Index)):
        column = values
    else:
        column = pd.Series(np.asarray(values, dtype=object), dtype=object)
    if len(column) == 0:
        return np.empty(0, dtype=np.int32), []
    raw_codes, uniques = pd.factorize(column, use_na_sentinel=True)
    names: dict[str, int] = {}
    remap = np.full(len(uniques) + 1, -1, dtype=np.int32)  # the last entry: missing (−1)
    for k, value in enumerate(uniques):
        text = _clean_id(value)
        if text is not None:
            remap[k] = names.setdefault(text, len(names))
    return remap[np.asarray(raw_codes)], list(names)  # int32: half the memory of int64


#: Key of ``DataFrame.attrs`` where the file reader says why a layer has no attribute fields
#: (a shapefile without its .dbf), for the messages about a missing field.
NO_FIELDS_REASON = "recharge_atlas_no_fields_reason"


def require_columns(table: pd.DataFrame, columns, what: str, file=None):
    """Raise a short :class:`InputError` naming the missing columns and the ones found."""
    missing = [c for c in columns if c not in table.columns]
    if missing:
        names = ", ".join(quoted(c) for c in missing)
        why = getattr(table, "attrs", {}).get(NO_FIELDS_REASON)
        error = InputError(
            f"the {what} has no field {names}; "
            + (why if why else f"fields found: {listed(table.columns)}"),
            file=file,
        )
        error.missing_field = (what, missing[0])  # the shells name the option that gave it
        raise error


#: Text that marks a missing value (compared in lower case, without spaces around).
MISSING_MARKERS = ("", "-", "na", "n/a", "nan", "null", "none", "#n/a", "<na>")
#: Missing-value codes written as numbers: nines, negative or positive (our own list, from
#: common practice in gauge exports). Negative ones are left out like any negative value; a
#: positive one only where it repeats and stands far above the gauge's other flows.
MISSING_VALUE_CODES = (-999999.0, -99999.0, -9999.0, -999.0, -99.0, -9.0)
POSITIVE_MISSING_VALUE_CODES = (999.0, 9999.0, 99999.0, 999999.0)
#: A positive code is read as missing only where it stands this many times above the gauge's
#: median flow (our own rule).
CODE_ABOVE_MEDIAN = 10.0
#: Discharges above this (m³/s) are left out as impossible: some thirty times the largest flood
#: any river is known to have carried (our own bound; it also keeps yearly volumes finite).
MAX_DISCHARGE_M3S = 1.0e7


def _huge_page_switch():
    """numpy's switch for asking the kernel for huge pages on large arrays (a private function
    of numpy's, in 1.24 and 2.x); None where this numpy has none."""
    for name in ("numpy._core.multiarray", "numpy.core.multiarray"):
        try:
            return getattr(importlib.import_module(name), "_set_madvise_hugepage", None)
        except ImportError:
            continue
    return None


_HUGE_PAGE_SWITCH = _huge_page_switch()
_pages_lock = threading.Lock()
_pages_users = [0, None]  # blocks inside, and numpy's setting before the first of them


@contextlib.contextmanager
def plain_pages():
    """Within the block, numpy does not ask for huge pages for its large arrays.

    Tidying makes about ten short-lived arrays as long as the table, each written once. On
    Linux with transparent huge pages in "madvise" mode numpy asks for huge pages for every
    array of 4 MB or more, and the kernel then clears (and may first compact memory for) a
    whole 2 MB page at each first touch. On the benchmark's 2-core machine, tidying 2,000
    gauges × 30 years took 2.2 s with the request and 1.15 s without it. Switching the request
    off for a whole run made the computation and the writing slower, so only tidying does.
    Blocks may overlap across threads: the first one in switches, the last one out restores.
    Where numpy has no such switch, nothing changes.
    """
    if _HUGE_PAGE_SWITCH is None:
        yield
        return
    with _pages_lock:
        if _pages_users[0] == 0:
            _pages_users[1] = _HUGE_PAGE_SWITCH(False)
        _pages_users[0] += 1
    try:
        yield
    finally:
        with _pages_lock:
            _pages_users[0] -= 1
            if _pages_users[0] == 0:
                _HUGE_PAGE_SWITCH(bool(_pages_users[1]))


@plain_pages()
def tidy_discharge(
    table: pd.DataFrame,
    *,
    gauge_field: str = "gauge_id",
    date_field: str = "date",
    value_field: str = "discharge",
    units: str = "m3/s",
    flag_field: str | None = None,
    flag_values=None,
    min_day_coverage: float = MIN_DAY_COVERAGE,
    left_out: dict | None = None,
) -> dict[str, GaugeRecord]:
    """Split a long discharge table into one daily series per gauge, in m³/s.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per gauge and date (or date and time, for sub-daily records).
    gauge_field, date_field, value_field : str
        Column names for the gauge id, the date and the discharge value.
    units : str
        Units of the values: ``m3/s``, ``L/s``, ``ft3/s`` (or ``cfs``) or ``ML/d``.
    flag_field : str, optional
        A quality-code column. Days carrying a flagged code are kept in the flow but not used by
        the method (recession segments, events, anchors).
    flag_values : iterable of str, optional
        The codes that flag a value; when not given, any non-empty code flags it.
    min_day_coverage : float
        For sub-daily records, the share of a day's expected values needed for a daily mean
        (e.g. 0.75: at least 72 of 96 quarter-hour values); other days become missing.
    left_out : dict, optional
        Receives the rows that belong to no gauge: ``rows_without_id`` (an empty or blank
        gauge id; such rows are left out) and ``row_without_id`` (the first, counted from 1).

    Returns
    -------
    dict of str to GaugeRecord
        Keyed by gauge id text, in order of first appearance.

    Raises
    ------
    InputError
        When a field is missing, when the table has rows but no date or no value in it can be
        read, or when its dates mix day-first and month-first forms.

    Notes
    -----
    Dates are read by :func:`read_dates`; rows whose date cannot be read are left out and
    counted. Missing, non-numeric, negative, infinite and impossibly large values (over
    :data:`MAX_DISCHARGE_M3S`) become missing and are counted;
    so are missing-value codes (:data:`MISSING_VALUE_CODES`, and a positive code of nines that
    repeats far above the gauge's median flow). Rows with the same gauge and time are merged:
    equal values silently (counted), different ones averaged and counted as conflicting. Several
    values on one day are averaged into the daily mean. A record is taken as sub-daily when the
    typical step between its time stamps is shorter than a day; the expected count of values a
    day is then one day over that step.
    """
    if not isinstance(table, pd.DataFrame):
        raise TypeError(f"table must be a pandas DataFrame, not {type(table).__name__}")
    units = canonical_units(units)
    if not 0.0 <= float(min_day_coverage) <= 1.0:
        raise InputError(
            f"minimum day coverage was {min_day_coverage!r}; expected a share between 0 and 1"
        )
    require_columns(
        table,
        [gauge_field, date_field, value_field] + ([flag_field] if flag_field else []),
        "discharge table",
    )

    id_codes, id_names = gauge_id_codes(table[gauge_field])
    raw = table[value_field]
    try:
        dates = read_dates(table[date_field])
    except InputError as exc:
        raise exc.located(field=date_field) from None
    if dates.out_of_range is not None and dates.out_of_range.any():
        row = int(np.flatnonzero(dates.out_of_range)[0])
        gauge = id_names[id_codes[row]] if id_codes[row] >= 0 else None
        raise InputError(
            f"the date {quoted(_cell_text(table[date_field].iloc[row]))} lies outside the years "
            f"{FIRST_YEAR} to {LAST_YEAR} that a record can hold (a typo?): correct or remove it"
            + (
                f" ({counted(far, 'such row')})"
                if (far := int(dates.out_of_range.sum())) > 1
                else ""
            ),
            field=date_field,
            gauge=gauge,
            row=row + 1,
        )
    stamp = dates.stamps
    has_stamp = ~np.isnat(stamp)
    if len(table) and not has_stamp.any():
        raise InputError(_no_dates_message(table[date_field], dates), field=date_field)

    was_missing = np.array(raw.isna().to_numpy(), dtype=bool)  # a copy: marked below
    if pd.api.types.is_numeric_dtype(raw) and not pd.api.types.is_bool_dtype(raw):
        numeric = raw.to_numpy(dtype=float, na_value=np.nan)
    else:
        numeric = _text_to_numbers(raw)
        texts = np.flatnonzero(np.isnan(numeric) & ~was_missing)
        if texts.size:  # blanks and markers such as "n/a" are missing values, not bad ones
            words = pd.Series(raw.to_numpy()[texts], dtype=object).astype(str).str.strip()
            was_missing[texts[words.str.lower().isin(MISSING_MARKERS).to_numpy()]] = True
    non_numeric = np.isnan(numeric) & ~was_missing
    if len(table) and not (has_stamp & ~np.isnan(numeric)).any() and non_numeric.any():
        raise InputError(_no_numbers_message(raw, non_numeric), field=value_field)
    _refuse_decimal_commas(raw, non_numeric, int(np.count_nonzero(~was_missing)), value_field)
    code = _among(numeric, MISSING_VALUE_CODES)
    values = to_cubic_metres_per_second(numeric, units)
    with np.errstate(invalid="ignore"):
        bad_sign = ((~np.isfinite(values) & ~np.isnan(values)) | (values < 0)) & ~code
        implausible = np.isfinite(values) & (values > MAX_DISCHARGE_M3S) & ~code
    values[bad_sign | code | implausible] = np.nan
    flagged = _flagged(table[flag_field], flag_values) if flag_field else np.zeros(len(table), bool)

    # Rows with a gauge id, and of them those with a date. When every row qualifies (the usual
    # table) they are taken as slices: views, no copies of millions of values.
    named = id_codes >= 0
    if left_out is not None and not named.all():
        unnamed = np.flatnonzero(~named)
        left_out["rows_without_id"] = left_out.get("rows_without_id", 0) + int(unnamed.size)
        left_out.setdefault("row_without_id", int(unnamed[0]) + 1)
    positions = _rows_where(named)
    gauge_of_row, names = id_codes[positions], id_names
    n_gauges = len(names)
    keep = has_stamp[positions]
    if isinstance(positions, slice) and keep.all():
        kept = positions
        codes = gauge_of_row
    else:
        kept = _row_numbers(positions, named.size)[keep]
        codes = gauge_of_row[keep]
    values = values[kept]
    positive = _positive_codes(codes, numeric[kept], values, n_gauges)
    values[positive] = np.nan
    is_code = code[kept] | positive
    problems = {
        "missing": was_missing[kept],
        "non_numeric": non_numeric[kept],
        "negative": bad_sign[kept],
        "implausible": implausible[kept],
        "missing_value_code": is_code,
    }
    # Counted per gauge now, and the row-length marks let go before the records are made.
    problem_counts = {
        k: np.bincount(codes[v], minlength=n_gauges).astype(int) for k, v in problems.items()
    }
    del problems, was_missing, non_numeric, bad_sign, implausible, code, named, has_stamp, keep
    records = _split_gauges(
        [str(n) for n in names],
        codes,
        *_ticks(stamp[kept]),
        values,
        problem_counts,
        flagged[kept],
        float(min_day_coverage),
    )
    rows = np.bincount(gauge_of_row, minlength=n_gauges)
    unreadable = dates.unreadable[positions]
    unread = np.bincount(gauge_of_row[unreadable], minlength=n_gauges)
    examples = _first_of_each(
        gauge_of_row[unreadable],
        np.flatnonzero(unreadable) if isinstance(positions, slice) else positions[unreadable],
        table[date_field],
    )
    offsets = (
        np.bincount(gauge_of_row[dates.offset[positions]], minlength=n_gauges)
        if dates.with_offset
        else np.zeros(n_gauges, int)
    )
    code_values = _code_values(codes, numeric[kept], is_code)
    for g, record in enumerate(records.values()):
        record.counts.update(
            {
                "rows": int(rows[g]),
                "unreadable_dates": int(unread[g]),
                "unreadable_date_example": examples.get(g),
                "dates_with_offset": int(offsets[g]),
                "date_order": dates.order,
                "missing_value_codes": code_values.get(g, []),
            }
        )
    return records


#: Text values are turned into numbers this many at a time (each is a Python string while it is
#: read: a slice at a time bounds that memory).
_TEXT_SLICE = 1 << 17


def _text_to_numbers(column):
    """Values of a text (or mixed) column as floats, NaN where one is not a number."""
    parts = [
        pd.to_numeric(
            pd.Series(column.iloc[i : i + _TEXT_SLICE].to_numpy(), dtype=object), errors="coerce"
        ).to_numpy(dtype=float, na_value=np.nan)
        for i in range(0, len(column), _TEXT_SLICE)
    ]
    return np.concatenate(parts) if parts else np.empty(0)


def _rows_where(mask):
    """The rows where ``mask`` holds: all of them as a slice (indexing gives views), or their
    numbers."""
    return slice(None) if mask.all() else np.flatnonzero(mask)


def _row_numbers(rows, n):
    """Row numbers of ``rows`` (a slice of all ``n`` rows, or numbers already)."""
    return np.arange(n) if isinstance(rows, slice) else rows


def _ticks(stamps):
    """Time stamps as int64 ticks (a view, no copy) and how many ticks make a day."""
    stamps = np.asarray(stamps)
    unit = np.datetime_data(stamps.dtype)[0]
    if unit not in _TICK_UNITS:
        stamps, unit = stamps.astype("datetime64[ns]"), "ns"
    return stamps.view(np.int64), int(np.timedelta64(1, "D") // np.timedelta64(1, unit))


def _cell_text(value):
    """A cell of the date column as the user wrote it (typed dates as their ISO text)."""
    if isinstance(value, (_dt.date, pd.Timestamp)):
        return value.isoformat()
    return str(value).strip()


def _first_of_each(groups, positions, column):
    """The value of ``column`` at the first position of each group: {group: text}."""
    if not groups.size:
        return {}
    first_groups, first = np.unique(groups, return_index=True)
    values = column.iloc[positions[first]].tolist()
    return {int(g): str(v).strip() for g, v in zip(first_groups, values)}


def _among(numeric, codes):
    """``np.isin(numeric, codes)`` for a few codes of one sign (the missing-value codes): only
    the rows beyond the nearest code to zero are compared, usually a handful (measured: 22
    million rows 47 → 14 ms)."""
    codes = np.asarray(codes, dtype=float)
    with np.errstate(invalid="ignore"):
        beyond = numeric <= codes.max() if codes.max() < 0 else numeric >= codes.min()
    rows = np.flatnonzero(beyond)
    out = np.zeros(numeric.shape, dtype=bool)
    out[rows] = np.isin(numeric[rows], codes)
    return out


def _positive_codes(codes, numeric, values, n_gauges):
    """Rows holding a positive missing-value code (9999, ...): the same code on two rows or
    more of one gauge, standing :data:`CODE_ABOVE_MEDIAN` times above the gauge's median."""
    candidate = _among(numeric, POSITIVE_MISSING_VALUE_CODES)
    if not candidate.any():
        return candidate
    others = ~candidate & np.isfinite(values)
    median = np.full(n_gauges, np.nan)
    if others.any():
        by_gauge = pd.Series(values[others]).groupby(codes[others]).median()
        median[by_gauge.index.to_numpy(dtype=np.int64)] = by_gauge.to_numpy()
    pairs = pd.DataFrame({"gauge": codes[candidate], "value": numeric[candidate]})
    repeats = pairs.groupby(["gauge", "value"]).size()
    repeated = {key for key, count in repeats.items() if count >= 2}
    rows = np.flatnonzero(candidate)
    out = np.zeros(codes.size, dtype=bool)
    for row in rows:
        g = int(codes[row])
        if (g, numeric[row]) not in repeated:
            continue
        level = median[g]
        if not np.isfinite(level) or values[row] > CODE_ABOVE_MEDIAN * level:
            out[row] = True
    return out


def _code_values(codes, numeric, is_code):
    """The missing-value codes each gauge used, with how many rows: {gauge: [(code, rows)]}."""
    if not is_code.any():
        return {}
    pairs = pd.DataFrame({"gauge": codes[is_code], "value": numeric[is_code]})
    out = {}
    for (g, value), count in pairs.groupby(["gauge", "value"]).size().items():
        out.setdefault(int(g), []).append((float(value), int(count)))
    return out


def _first_filled(column, mask=None):
    """(row number counted from 1, value) of the first non-empty cell of ``column`` (where
    ``mask`` is True, when given); (None, None) when there is none."""
    values = column.to_numpy(dtype=object)
    for position, value in enumerate(values):
        if mask is not None and not mask[position]:
            continue
        if value is None or value is pd.NaT or (isinstance(value, float) and np.isnan(value)):
            continue
        if str(value).strip():
            return position + 1, value
    return None, None


def _no_dates_message(column, dates):
    if dates.ambiguous is not None:
        return (
            f"no date could be read: dates like {quoted(dates.ambiguous)} may be day/month or "
            "month/day and nothing in the table tells which; write them as 2020-01-31"
        )
    row, value = _first_filled(column)
    if row is None:
        return "the date field is empty in every row"
    return (
        f"no value of the date field could be read as a date (row {row}: {quoted(value)}); "
        "write dates as 2020-01-31"
    )


#: Values written with a decimal comma (``1,5``): when they are this share of the values given
#: or more, the table is refused rather than read with them left out (our own rule: one stray
#: value is counted like any text, a table written so is a fault of the whole table).
DECIMAL_COMMA_SHARE = 0.01
_DECIMAL_COMMA = r"\s*[-+]?\d+,\d+\s*"


def _refuse_decimal_commas(column, non_numeric, given, field):
    """:class:`InputError` when many values are numbers with a decimal comma. A table saved
    with ``;`` between fields and decimal commas has whole numbers read and the rest left
    out: every gauge would lose most of its days without a clear word."""
    rows = np.flatnonzero(non_numeric)
    if not rows.size or rows.size < DECIMAL_COMMA_SHARE * max(given, 1):
        return
    texts = pd.Series(column.to_numpy()[rows], dtype=object).astype(str)
    comma = texts.str.fullmatch(_DECIMAL_COMMA).to_numpy(dtype=bool)
    if np.count_nonzero(comma) >= DECIMAL_COMMA_SHARE * max(given, 1):
        first = int(np.argmax(comma))
        raise InputError(
            f"the discharge field has {counted(int(comma.sum()), 'value')} with a decimal "
            f"comma (row {rows[first] + 1}: {quoted(texts.iloc[first])}); decimal commas are "
            "not read: write 1.5, not 1,5",
            field=field,
        )


def _no_numbers_message(column, non_numeric):
    row, value = _first_filled(column, non_numeric)
    text = f"no value of the discharge field is a number (row {row}: {quoted(value)})"
    if re.fullmatch(_DECIMAL_COMMA, str(value)):
        text += "; decimal commas are not read: write 1.5, not 1,5"
    return text


def _by_gauge_and_time(codes, ticks):
    """The stable order that sorts rows by gauge, then time; None when they already are.

    Exports usually come sorted, each gauge's rows in one block in time order (gauge codes
    number the gauges as they first appear, so the blocks are then in code order too): the
    check saves a sort of every row.
    """
    if codes.size < 2:
        return None
    same = codes[1:] == codes[:-1]
    if (codes[1:] >= codes[:-1]).all() and ((ticks[1:] >= ticks[:-1]) | ~same).all():
        return None
    return np.lexsort((ticks, codes))


def _median_steps(codes, ticks, per_day, n_gauges):
    """Median step between the successive time stamps of each gauge, in days (NaN with fewer
    than two); rows are sorted by gauge and time, one per time."""
    bounds = np.searchsorted(codes, np.arange(n_gauges + 1, dtype=codes.dtype))
    out = np.full(n_gauges, np.nan)
    for g in range(n_gauges):  # one gauge's steps at a time: no row-length temporary
        a, b = bounds[g], bounds[g + 1]
        if b - a >= 2:
            out[g] = float(np.median(np.diff(ticks[a:b]))) / per_day
    return out


def _split_gauges(names, codes, ticks, per_day, values, problem_counts, flagged, min_day_coverage):
    """One GaugeRecord per gauge, from the rows of all gauges at once (no loop over rows).

    ``ticks`` are the rows' time stamps as int64, ``per_day`` of them to a day. Rows are sorted
    by gauge and time; values of one day are averaged (sub-daily days with too few values are
    dropped); each gauge's days are laid on a complete daily range. ``problem_counts`` holds the
    counts of each kind of problem row per gauge (they go into each record's counts).
    """
    order = _by_gauge_and_time(codes, ticks)
    if order is not None:
        codes, ticks, values, flagged = (
            codes[order],
            ticks[order],
            values[order],
            flagged[order],
        )
    # Days since 1970 fit in int32; written straight into it (no row-length int64 temporary).
    day = np.empty(ticks.size, np.int32)
    np.floor_divide(ticks, per_day, out=day, casting="unsafe")
    n_gauges = len(names)

    # Typical step between distinct time stamps of each gauge (sub-daily when under a day).
    distinct = np.ones(codes.size, bool)
    distinct[1:] = (codes[1:] != codes[:-1]) | (ticks[1:] != ticks[:-1])
    # Rows repeating a time already given: merged (their mean is the day's value), counted,
    # and counted as conflicting where their values differ.
    if not distinct.all():
        runs = np.flatnonzero(distinct)
        length = np.diff(np.append(runs, codes.size))
        with np.errstate(invalid="ignore"):
            high = np.fmax.reduceat(values, runs)
            low = np.fmin.reduceat(values, runs)
            differ = (length > 1) & (high - low > 1e-6 * np.maximum(np.abs(high), 1e-12))
        run_code = codes[runs]
        repeated = np.bincount(run_code, weights=length - 1, minlength=n_gauges).astype(int)
        conflicting = np.bincount(run_code, weights=differ, minlength=n_gauges).astype(int)
        # One value per time from here on (the mean of its usable values), so a time given
        # twice weighs no more than any other in its day's mean.
        usable = np.isfinite(values)
        total = np.add.reduceat(np.where(usable, values, 0.0), runs)
        given = np.add.reduceat(usable.astype(np.int64), runs)
        with np.errstate(invalid="ignore", divide="ignore"):
            values = np.where(given > 0, total / np.maximum(given, 1), np.nan)
        flagged = np.maximum.reduceat(flagged.astype(np.int8), runs).astype(bool)
        codes, ticks, day = run_code, ticks[runs], day[runs]
    else:
        repeated = conflicting = np.zeros(n_gauges, dtype=int)
    step_of = _median_steps(codes, ticks, per_day, n_gauges)

    # Daily means of the usable values: one run of rows per gauge and day.
    new_day = np.ones(codes.size, bool)
    new_day[1:] = (codes[1:] != codes[:-1]) | (day[1:] != day[:-1])
    usable = np.isfinite(values)
    if new_day.all():  # one value a day (the usual table): the rows are the days
        counts = usable  # 1 or 0 values a day (True/False count as such below)
        day_flagged, day_code, day_number = flagged, codes, day
        mean = values  # this function's own array (a copy of the table's), set in place below
    else:
        starts = np.flatnonzero(new_day)
        sums = np.add.reduceat(np.where(usable, values, 0.0), starts)
        counts = np.add.reduceat(usable.astype(np.int64), starts)
        day_flagged = np.maximum.reduceat(flagged.astype(np.int8), starts).astype(bool)
        day_code, day_number = codes[starts], day[starts]
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)
        del sums, starts
    del usable, new_day
    # Sub-daily gauges: a day needs its share of the values expected in a day.
    sub_daily = step_of < 1.0  # per gauge (NaN: not sub-daily)
    if sub_daily.any():
        expected = np.where(
            sub_daily, np.maximum(np.rint(1.0 / np.where(sub_daily, step_of, 1.0)), 1.0), 1.0
        )
        short = (
            sub_daily[day_code] & (counts > 0) & (counts < min_day_coverage * expected[day_code])
        )
        mean[short] = np.nan
        incomplete = np.bincount(day_code[short], minlength=n_gauges).astype(int)
    else:
        incomplete = np.zeros(n_gauges, dtype=int)
    averaged = np.bincount(day_code[counts > 1], minlength=n_gauges).astype(int)

    bounds = np.searchsorted(day_code, np.arange(n_gauges + 1, dtype=day_code.dtype))
    index_of = {}
    records: dict[str, GaugeRecord] = {}
    for g, name in enumerate(names):
        a, b = bounds[g], bounds[g + 1]
        if a == b:
            marks = np.zeros(0, bool)
            flow = pd.Series(
                [], dtype=float, index=pd.DatetimeIndex([], name="date"), name="discharge_m3s"
            )
            flags = pd.Series([], dtype=bool, index=flow.index, name="flagged")
        else:
            first, last = int(day_number[a]), int(day_number[b - 1])
            key = (first, last)
            index = index_of.get(key)
            if index is None:
                index = pd.date_range(
                    np.datetime64(first, "D"), np.datetime64(last, "D"), freq="D", name="date"
                )
                index_of[key] = index
            if b - a == last - first + 1:  # a row for every day (sorted, one a day): slices
                # of this function's own arrays, which no other record shares
                daily, marks = mean[a:b], day_flagged[a:b]
            else:  # days without a row are missing
                daily = np.full(last - first + 1, np.nan)
                daily[day_number[a:b] - first] = mean[a:b]
                marks = np.zeros(last - first + 1, bool)
                marks[day_number[a:b] - first] = day_flagged[a:b]
            # No copy (pandas 3 would copy by default).
            flow = pd.Series(daily, index=index, name="discharge_m3s", copy=False)
            flags = pd.Series(marks, index=index, name="flagged", copy=False)
        counts_g = {k: int(v[g]) for k, v in problem_counts.items()}
        if a < b:
            counts_g.update(_stray_days(day_number[a:b]))
        counts_g.update(
            {
                "repeated_rows": int(repeated[g]),
                "conflicting_times": int(conflicting[g]),
                "days_averaged": int(averaged[g]),
                "days_incomplete": int(incomplete[g]),
                "days_flagged": int(np.count_nonzero(marks)),
                "sub_daily": bool(step_of[g] < 1.0),
            }
        )
        records[name] = GaugeRecord(name, flow, counts_g, flags)
    return records


#: A day more than this many days from every day of the rest of a gauge's record is taken for
#: a typo and named in a caution (a century: our own rule).
STRAY_GAP_DAYS = 36_525


def _stray_days(days) -> dict:
    """Days of one gauge (sorted day numbers since 1970) that stand apart: more than
    :data:`STRAY_GAP_DAYS` from the main part of the record (the largest run of days with no
    such gap), or after today. Returns counts and a few of the dates for the gauge's caution
    (nothing when there are none)."""
    first, last = int(days[0]), int(days[-1])
    today = int(np.datetime64("today", "D").astype(np.int64))
    out = {}
    if last - first > STRAY_GAP_DAYS:
        cuts = np.flatnonzero(np.diff(days) > STRAY_GAP_DAYS) + 1
        if cuts.size:
            bounds = np.concatenate(([0], cuts, [days.size]))
            main = int(np.argmax(np.diff(bounds)))
            apart = np.ones(days.size, bool)
            apart[bounds[main] : bounds[main + 1]] = False
            out["stray_dates"] = int(apart.sum())
            out["stray_date_examples"] = _day_texts(days[apart])
    if last > today:
        future = days > today
        out["future_dates"] = int(future.sum())
        out["future_date_examples"] = _day_texts(days[future])
    return out


def _day_texts(days, shown=3):
    """The first few of these day numbers as ISO dates."""
    return [str(np.datetime64(int(d), "D")) for d in days[:shown]]


def _flagged(codes, flag_values):
    text = pd.Series(codes.to_numpy(), dtype=object).map(
        lambda v: None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip()
    )
    if flag_values is None:
        return (text.notna() & (text != "")).to_numpy()
    wanted = {str(v).strip() for v in flag_values}
    return text.isin(wanted).to_numpy()
