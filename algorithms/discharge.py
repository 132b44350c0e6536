"""Reading a long discharge table (gauge id, date, value) into one daily series per gauge."""

from __future__ import annotations

import functools
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .errors import InputError
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
        How many input values were missing (``missing``), not numbers (``non_numeric``),
        negative or infinite (``negative``); how many days held several values that were
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

    def one(value):
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

    values = np.asarray(values, dtype=object)
    if values.size == 0:
        return values
    # Ids repeat (one per day in a discharge table): clean each distinct value once.
    codes, uniques = pd.factorize(pd.Series(values, dtype=object), use_na_sentinel=True)
    cleaned = np.array([one(v) for v in uniques] + [None], dtype=object)
    return cleaned[codes]


def require_columns(table: pd.DataFrame, columns, what: str):
    """Raise a short :class:`InputError` naming the missing columns and the ones found."""
    missing = [c for c in columns if c not in table.columns]
    if missing:
        found = ", ".join(str(c) for c in table.columns) or "none"
        names = ", ".join(repr(c) for c in missing)
        raise InputError(f"the {what} has no field {names}; fields found: {found}")


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

    Returns
    -------
    dict of str to GaugeRecord
        Keyed by gauge id text, in order of first appearance.

    Notes
    -----
    Missing, non-numeric, negative and infinite values become missing and are counted. Several
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

    ids = gauge_id_text(table[gauge_field].to_numpy())
    raw = table[value_field]
    dates = table[date_field]
    if pd.api.types.is_datetime64_any_dtype(dates):
        stamps = pd.Series(dates.to_numpy())
    else:
        stamps = pd.to_datetime(pd.Series(dates.to_numpy()), errors="coerce")
    if getattr(stamps.dt, "tz", None) is not None:
        stamps = stamps.dt.tz_localize(None)

    was_missing = raw.isna().to_numpy()
    if pd.api.types.is_numeric_dtype(raw) and not pd.api.types.is_bool_dtype(raw):
        numeric = raw.to_numpy(dtype=float, na_value=np.nan)
    else:
        numeric = pd.to_numeric(pd.Series(raw.to_numpy(), dtype=object), errors="coerce").to_numpy(
            dtype=float, na_value=np.nan
        )
    non_numeric = np.isnan(numeric) & ~was_missing
    values = to_cubic_metres_per_second(numeric, units)
    with np.errstate(invalid="ignore"):
        bad_sign = (~np.isfinite(values) & ~np.isnan(values)) | (values < 0)
    values[bad_sign] = np.nan
    flagged = _flagged(table[flag_field], flag_values) if flag_field else np.zeros(len(table), bool)

    stamp = stamps.to_numpy(dtype="datetime64[ns]")
    has_stamp = ~np.isnat(stamp)
    if len(table) and not has_stamp.any():
        raise InputError(
            f"no value in the date field {date_field!r} could be read as a date", field=date_field
        )
    keep = has_stamp & (ids != None)  # noqa: E711 (element-wise comparison)
    codes, names = pd.factorize(pd.Series(ids[keep], dtype=object), sort=False)
    return _split_gauges(
        [str(n) for n in names],
        codes.astype(np.int64),
        stamp[keep].astype(np.int64),
        values[keep],
        {
            "missing": was_missing[keep],
            "non_numeric": non_numeric[keep],
            "negative": bad_sign[keep],
        },
        flagged[keep],
        float(min_day_coverage),
    )


_NS_PER_DAY = 86_400 * 10**9


def _split_gauges(names, codes, stamps_ns, values, problems, flagged, min_day_coverage):
    """One GaugeRecord per gauge, from the rows of all gauges at once (no loop over rows).

    Rows are sorted by gauge and time; values of one day are averaged (sub-daily days with too
    few values are dropped); each gauge's days are laid on a complete daily range.
    """
    order = np.lexsort((stamps_ns, codes))
    codes, stamps_ns, values, flagged = (
        codes[order],
        stamps_ns[order],
        values[order],
        flagged[order],
    )
    problems = {k: v[order] for k, v in problems.items()}
    day = np.floor_divide(stamps_ns, _NS_PER_DAY)
    n_gauges = len(names)
    problem_counts = {
        k: np.bincount(codes, weights=v.astype(float), minlength=n_gauges).astype(int)
        for k, v in problems.items()
    }

    # Typical step between distinct time stamps of each gauge (sub-daily when under a day).
    distinct = np.ones(codes.size, bool)
    distinct[1:] = (codes[1:] != codes[:-1]) | (stamps_ns[1:] != stamps_ns[:-1])
    d_codes, d_stamps = codes[distinct], stamps_ns[distinct]
    same = d_codes[1:] == d_codes[:-1]
    steps = (
        pd.Series((d_stamps[1:] - d_stamps[:-1])[same] / _NS_PER_DAY)
        .groupby(d_codes[1:][same])
        .median()
    )
    step_of = np.full(n_gauges, np.nan)
    step_of[steps.index.to_numpy(dtype=np.int64)] = steps.to_numpy()

    # Daily means of the usable values: one run of rows per gauge and day.
    new_day = np.ones(codes.size, bool)
    new_day[1:] = (codes[1:] != codes[:-1]) | (day[1:] != day[:-1])
    starts = np.flatnonzero(new_day)
    usable = np.isfinite(values)
    sums = np.add.reduceat(np.where(usable, values, 0.0), starts) if starts.size else np.empty(0)
    counts = (
        np.add.reduceat(usable.astype(np.int64), starts) if starts.size else np.empty(0, np.int64)
    )
    day_flagged = (
        np.maximum.reduceat(flagged.astype(np.int8), starts).astype(bool)
        if starts.size
        else np.empty(0, bool)
    )
    day_code, day_number = codes[starts], day[starts]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)
    sub_daily = step_of[day_code] < 1.0
    expected = np.where(
        sub_daily, np.maximum(np.rint(1.0 / np.where(sub_daily, step_of[day_code], 1.0)), 1.0), 1.0
    )
    short = sub_daily & (counts > 0) & (counts < min_day_coverage * expected)
    mean[short] = np.nan
    averaged = np.bincount(day_code, weights=(counts > 1).astype(float), minlength=n_gauges).astype(
        int
    )
    incomplete = np.bincount(day_code, weights=short.astype(float), minlength=n_gauges).astype(int)

    bounds = np.searchsorted(day_code, np.arange(n_gauges + 1))
    index_of = {}
    records: dict[str, GaugeRecord] = {}
    for g, name in enumerate(names):
        a, b = bounds[g], bounds[g + 1]
        if a == b:
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
            daily = np.full(last - first + 1, np.nan)
            daily[day_number[a:b] - first] = mean[a:b]
            marks = np.zeros(last - first + 1, bool)
            marks[day_number[a:b] - first] = day_flagged[a:b]
            flow = pd.Series(daily, index=index, name="discharge_m3s")
            flags = pd.Series(marks, index=index, name="flagged")
        counts_g = {k: int(v[g]) for k, v in problem_counts.items()}
        counts_g.update(
            {
                "days_averaged": int(averaged[g]),
                "days_incomplete": int(incomplete[g]),
                "days_flagged": int(flags.sum()),
                "sub_daily": bool(step_of[g] < 1.0),
            }
        )
        records[name] = GaugeRecord(name, flow, counts_g, flags)
    return records


def _flagged(codes, flag_values):
    text = pd.Series(codes.to_numpy(), dtype=object).map(
        lambda v: None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip()
    )
    if flag_values is None:
        return (text.notna() & (text != "")).to_numpy()
    wanted = {str(v).strip() for v in flag_values}
    return text.isin(wanted).to_numpy()
