"""Reading the dates of a discharge table: ISO, compact, day-first or month-first text, with or
without a time and an offset, and the dates a record can hold (:func:`read_dates`)."""

from __future__ import annotations

import datetime as _dt
import re
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import InputError, quoted

_TIME = r"(?:(?:T|\s+)(?P<H>\d{1,2}):(?P<M>\d{2})(?::(?P<S>\d{2}(?:[.,]\d+)?))?)?"
_ZONE = r"\s*(?P<Z>Z|UTC|GMT|[+-]\d{2}(?::?\d{2})?)?"
#: Year first: 2020-01-31, 2020/01/31, 2020.01.31, with or without a time and an offset.
_YEAR_FIRST = (
    r"^(?P<y>\d{4})(?P<sep>[-/.])(?P<m>\d{1,2})(?P=sep)(?P<d>\d{1,2})" + _TIME + _ZONE + r"$"
)
#: Year first without separators: 20200131 (a time may follow).
_COMPACT = r"^(?P<y>\d{4})(?P<m>\d{2})(?P<d>\d{2})" + _TIME + _ZONE + r"$"
#: Day and month before a four-digit year: 31/01/2020 or 01/31/2020.
_YEAR_LAST = (
    r"^(?P<a>\d{1,2})(?P<sep>[-/.])(?P<b>\d{1,2})(?P=sep)(?P<y>\d{4})" + _TIME + _ZONE + r"$"
)
#: Units a column typed as dates may keep (pandas 2 and later read Parquet dates in µs).
_TICK_UNITS = ("s", "ms", "us", "ns")
#: The years a date may fall in. Daily records are held at nanosecond resolution (the only
#: one pandas 1.5, QGIS's, has), which spans 1677-09-21 to 2262-04-11: a date outside it
#: would wrap around by about 584 years and land inside the record, so it is refused instead.
FIRST_YEAR, LAST_YEAR = 1678, 2261
_FIRST_DAY = np.datetime64(f"{FIRST_YEAR}-01-01", "s")
_END_DAY = np.datetime64(f"{LAST_YEAR + 1}-01-01", "s")


def _outside(seconds) -> np.ndarray:
    """Which of these datetime64 values (any unit, NaT counted as inside) fall outside the
    years :data:`FIRST_YEAR` to :data:`LAST_YEAR`."""
    values = np.asarray(seconds)
    with np.errstate(invalid="ignore"):
        out = (values < _FIRST_DAY.astype(values.dtype)) | (values >= _END_DAY.astype(values.dtype))
    return out & ~np.isnat(values)


_MONTH_NAME = re.compile(
    r"\b(jan|feb|mar|apr|may|jun|jul|aug|sep|oct|nov|dec)[a-z]*\b", re.IGNORECASE
)


@dataclass
class DateReading:
    """How the values of a date field were read.

    Attributes
    ----------
    stamps : numpy.ndarray of datetime64
        One per row; NaT where the row has no date or one that could not be read. In
        nanoseconds, or in the column's own unit when it came typed as dates (no copy).
    unreadable : numpy.ndarray of bool
        Rows holding a value that could not be read as a date (empty cells are not counted).
    offset : numpy.ndarray of bool
        Rows whose time carried a time-zone offset (or Z); the offset is ignored.
    with_offset : int
        How many rows did.
    order : str or None
        For dates written with the year last: ``"day first"`` or ``"month first"``, as the
        table showed; None when it has none.
    ambiguous : str or None
        A value like ``01/02/2020`` that could not be read because nothing in the table says
        whether the day or the month comes first.
    out_of_range : numpy.ndarray of bool or None
        Rows holding a real date outside the years :data:`FIRST_YEAR` to :data:`LAST_YEAR`
        (NaT in ``stamps``): :func:`tidy_discharge` refuses them with the row named.
    """

    stamps: np.ndarray
    unreadable: np.ndarray
    offset: np.ndarray
    with_offset: int = 0
    order: str | None = None
    ambiguous: str | None = None
    out_of_range: np.ndarray | None = None


def read_dates(values) -> DateReading:
    """Read a column of dates (or dates and times) the way a hydrologist writes them.

    Each distinct value is read on its own, so one table may mix forms:

    * year first: ``2020-01-31``, ``2020/01/31``, ``2020.01.31``, ``20200131``;
    * day and month before a four-digit year: ``31/01/2020`` or ``01/31/2020``. Which comes
      first is decided once for the table: the day, if some value has a first number over 12;
      the month, if some value has a second number over 12. A table showing both is refused
      (:class:`InputError`); values the table leaves open (``01/02/2020`` with no other hint)
      are not read;
    * with the month's name and a four-digit year: ``31 Jan 2020``, ``January 31, 2020``;
    * date and time values already typed as such (Parquet, GeoPackage, QGIS).

    A time may follow (``2020-01-31 06:15``, ``2020-01-31T06:15:00``; ``24:00`` is the end of
    the day written and stays on it). A time-zone offset
    (``+02:00``, ``Z``) is ignored: each value keeps the clock time written, so it falls on the
    calendar day printed in the table (gauges publish daily values by their local day).

    Returns
    -------
    DateReading
    """
    column = values if isinstance(values, pd.Series) else pd.Series(values)
    if pd.api.types.is_datetime64_any_dtype(column):
        stamps = column
        if getattr(stamps.dt, "tz", None) is not None:
            stamps = stamps.dt.tz_localize(None)  # the clock time as written
        none = np.zeros(len(column), dtype=bool)
        native = stamps.to_numpy()
        if native.dtype.kind != "M" or np.datetime_data(native.dtype)[0] not in _TICK_UNITS:
            native = stamps.to_numpy(dtype="datetime64[ns]")
        far = _outside(native)
        if far.any():
            native = native.copy()
            native[far] = np.datetime64("NaT")
        return DateReading(native, none, none, out_of_range=far)
    with warnings.catch_warnings():  # pandas 1.5 warns of a change to come for mixed objects
        warnings.simplefilter("ignore", FutureWarning)
        codes, uniques = pd.factorize(column, use_na_sentinel=True)
    parsed, bad, offset, order, ambiguous, far = _read_distinct(list(uniques))
    codes = np.asarray(codes)
    has = codes >= 0
    stamps = np.full(codes.size, np.datetime64("NaT"), dtype="datetime64[ns]")
    stamps[has] = parsed[codes[has]]
    unreadable = np.zeros(codes.size, dtype=bool)
    unreadable[has] = bad[codes[has]]
    with_offset = np.zeros(codes.size, dtype=bool)
    if offset.any():
        with_offset[has] = offset[codes[has]]
    out_of_range = np.zeros(codes.size, dtype=bool)
    if far.any():
        out_of_range[has] = far[codes[has]]
    return DateReading(
        stamps,
        unreadable,
        with_offset,
        int(np.count_nonzero(with_offset)),
        order,
        ambiguous,
        out_of_range,
    )


#: A distinct date value that cannot be a date whatever its form (a boolean, a fraction).
_NOT_A_DATE = object()
#: A distinct value typed as a date, outside the years :data:`FIRST_YEAR` to :data:`LAST_YEAR`.
_OUT_OF_RANGE = object()


def _text_of(value):
    """A distinct value of a date column as text to read, a Timestamp, None (an empty cell)
    or :data:`_NOT_A_DATE`."""
    if value is None or value is pd.NaT:
        return None
    if isinstance(value, (pd.Timestamp, _dt.datetime, _dt.date, np.datetime64)):
        year = getattr(value, "year", None)
        if isinstance(value, np.datetime64) and not np.isnat(value):
            year = int(value.astype("datetime64[Y]").astype(np.int64)) + 1970
        if year is not None and not FIRST_YEAR <= year <= LAST_YEAR:
            return _OUT_OF_RANGE
        try:
            stamp = pd.Timestamp(value)
        except (ValueError, OverflowError):
            return _NOT_A_DATE
        if stamp is pd.NaT:
            return None
        return stamp.tz_localize(None) if stamp.tzinfo is not None else stamp
    if isinstance(value, (bool, np.bool_)):
        return _NOT_A_DATE
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        if np.isnan(value):
            return None
        return str(int(value)) if float(value).is_integer() and abs(value) < 1e9 else _NOT_A_DATE
    return str(value).strip() or None


def _read_distinct(uniques):
    """Read the distinct values of a date column (see :func:`read_dates`)."""
    n = len(uniques)
    parsed = np.full(n, np.datetime64("NaT"), dtype="datetime64[ns]")
    bad = np.zeros(n, dtype=bool)
    offset = np.zeros(n, dtype=bool)
    far = np.zeros(n, dtype=bool)
    texts = [_text_of(v) for v in uniques]
    far[[i for i, t in enumerate(texts) if t is _OUT_OF_RANGE]] = True
    typed = [i for i, t in enumerate(texts) if isinstance(t, pd.Timestamp)]
    if typed:
        parsed[typed] = np.array([texts[i].asm8 for i in typed], dtype="datetime64[ns]")
    rows = [i for i, t in enumerate(texts) if isinstance(t, str)]
    order = ambiguous = None
    if rows and _plain_iso(texts, rows, parsed, far):
        rows = []  # all read (the common case, kept fast)
    if rows:
        text = pd.Series([texts[i] for i in rows], index=rows, dtype=object)
        found = pd.Series(False, index=rows)
        for pattern in (_YEAR_FIRST, _COMPACT):
            parts = text[~found].str.extract(pattern)
            hit = parts["y"].notna()
            if hit.any():
                _assemble(parts[hit], parts[hit]["m"], parts[hit]["d"], parsed, offset, far)
                found[hit[hit].index] = True
        parts = text[~found].str.extract(_YEAR_LAST)
        hit = parts["y"].notna()
        if hit.any():
            parts = parts[hit]
            first, second = parts["a"].astype(int), parts["b"].astype(int)
            day_first, month_first = bool((first > 12).any()), bool((second > 12).any())
            if day_first and month_first:
                a = parts.index[(first > 12).to_numpy()][0]
                b = parts.index[(second > 12).to_numpy()][0]
                raise InputError(
                    f"the dates mix day/month/year ({quoted(texts[a])}) and month/day/year "
                    f"({quoted(texts[b])}); write them as year-month-day (2020-01-31)"
                )
            if day_first or month_first:
                order = "day first" if day_first else "month first"
                day, month = (parts["a"], parts["b"]) if day_first else (parts["b"], parts["a"])
                _assemble(parts, month, day, parsed, offset, far)
                found[parts.index] = True
            else:
                ambiguous = texts[parts.index[0]]
        rest = [i for i in text.index[~found.to_numpy()] if _MONTH_NAME.search(texts[i])]
        for i in rest:
            year = re.search(r"\b\d{4}\b", texts[i])
            if not year:
                continue
            if not FIRST_YEAR <= int(year.group()) <= LAST_YEAR:
                far[i] = True
                continue
            try:
                stamp = pd.Timestamp(texts[i])
            except (ValueError, OverflowError, TypeError):
                continue
            if stamp is pd.NaT:
                continue
            parsed[i] = (stamp.tz_localize(None) if stamp.tzinfo is not None else stamp).asm8
        bad[rows] = np.isnat(parsed[rows]) & ~far[rows]
    for i, t in enumerate(texts):
        if t is _NOT_A_DATE:
            bad[i] = True
    return parsed, bad, offset, order, ambiguous, far


def _plain_iso(texts, rows, parsed, far) -> bool:
    """Read the values at ``rows`` at once when every one is a plain ISO 8601 date or date and
    time (``2020-01-31``, ``2020-01-31 06:15``, ``2020-01-31T06:15:00``); False (nothing
    read) when one is anything else, for the general reader to take."""
    lengths = (10, 16, 19)
    for i in rows:
        t = texts[i]
        if (
            len(t) not in lengths
            or t[4] != "-"
            or t[7] != "-"
            or (len(t) > 10 and t[10] not in "T ")
        ):
            return False
    try:
        values = np.array([texts[i] for i in rows], dtype="datetime64[s]")
    except ValueError:
        return False
    outside = _outside(values)
    if outside.any():
        far[np.asarray(rows)[outside]] = True
        values[outside] = np.datetime64("NaT")
    parsed[rows] = values.astype("datetime64[ns]")
    return True


def _assemble(parts, month, day, parsed, offset, far):
    """Fill ``parsed`` (at the index of ``parts``) from the captured pieces of a pattern;
    mark in ``far`` the dates whose year lies outside :data:`FIRST_YEAR`–:data:`LAST_YEAR`."""
    years = parts["y"].astype(int).to_numpy()
    outside = (years < FIRST_YEAR) | (years > LAST_YEAR)
    numbers = {
        "year": np.where(outside, 2000, years),
        "month": month.astype(int).to_numpy(),
        "day": day.astype(int).to_numpy(),
    }
    hour = parts["H"].fillna("0").astype(int).to_numpy()
    minute = parts["M"].fillna("0").astype(int).to_numpy()
    second = parts["S"].fillna("0").str.replace(",", ".", regex=False).astype(float).to_numpy()
    dates = pd.to_datetime(pd.DataFrame(numbers), errors="coerce").to_numpy(dtype="datetime64[ns]")
    # 24:00 is the end of the day written (some exports stamp daily means so): read it as the
    # day's last millisecond, so the value stays on that day. Other times lie within the day.
    end_of_day = (hour == 24) & (minute == 0) & (second == 0)
    valid = ((hour < 24) | end_of_day) & (minute < 60) & (second < 61)
    seconds = np.where(end_of_day, 86_400.0 - 1e-3, hour * 3600.0 + minute * 60.0 + second)
    stamps = dates + (seconds * 1e9).astype(np.int64).astype("timedelta64[ns]")
    stamps[~valid | outside] = np.datetime64("NaT")
    index = parts.index.to_numpy()
    far[index[outside & ~np.isnat(dates)]] = True
    parsed[index] = stamps
    offset[index] = parts["Z"].notna().to_numpy()
