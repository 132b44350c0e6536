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
    stamps = pd.to_datetime(pd.Series(table[date_field].to_numpy()), errors="coerce")
    if getattr(stamps.dt, "tz", None) is not None:
        stamps = stamps.dt.tz_localize(None)

    numeric = pd.to_numeric(pd.Series(raw.to_numpy(), dtype=object), errors="coerce").astype(float)
    was_missing = pd.Series(raw.isna().to_numpy())
    non_numeric = numeric.isna() & ~was_missing
    values = to_cubic_metres_per_second(numeric.to_numpy(), units)
    bad_sign = (~np.isfinite(values) & ~np.isnan(values)) | (values < 0)
    values[bad_sign] = np.nan

    frame = pd.DataFrame(
        {
            "gauge": ids,
            "stamp": stamps.to_numpy(),
            "q": values,
            "missing": was_missing.to_numpy(),
            "non_numeric": non_numeric.to_numpy(),
            "negative": bad_sign,
            "flagged": _flagged(table[flag_field], flag_values) if flag_field else False,
        }
    )
    if frame["stamp"].isna().all() and len(frame):
        raise InputError(
            f"no value in the date field {date_field!r} could be read as a date", field=date_field
        )
    frame = frame[frame["gauge"].notna() & frame["stamp"].notna()]
    frame["date"] = frame["stamp"].dt.floor("D")

    records: dict[str, GaugeRecord] = {}
    for gauge, rows in frame.groupby("gauge", sort=False):
        records[str(gauge)] = _one_gauge(str(gauge), rows, float(min_day_coverage))
    return records


def _flagged(codes, flag_values):
    text = pd.Series(codes.to_numpy(), dtype=object).map(
        lambda v: None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip()
    )
    if flag_values is None:
        return (text.notna() & (text != "")).to_numpy()
    wanted = {str(v).strip() for v in flag_values}
    return text.isin(wanted).to_numpy()


def _one_gauge(gauge, rows, min_day_coverage):
    usable = rows[np.isfinite(rows["q"].to_numpy())]
    per_day = usable.groupby("date", sort=True)["q"]
    daily = per_day.mean()
    count = per_day.size()
    step = _typical_step_days(rows["stamp"])
    incomplete = 0
    if step is not None and step < 1.0:
        expected = max(int(round(1.0 / step)), 1)
        short = count < min_day_coverage * expected
        incomplete = int(short.sum())
        daily = daily[~short]
    flagged_days = rows.loc[rows["flagged"].to_numpy(bool), "date"].unique()
    all_days = rows["date"]
    if all_days.empty:
        flow = pd.Series([], dtype=float, index=pd.DatetimeIndex([], name="date"))
    else:
        full = pd.date_range(all_days.min(), all_days.max(), freq="D", name="date")
        flow = daily.reindex(full).astype(float)
    flow.name = "discharge_m3s"
    flagged = pd.Series(flow.index.isin(flagged_days), index=flow.index, name="flagged")
    counts = {
        "missing": int(rows["missing"].sum()),
        "non_numeric": int(rows["non_numeric"].sum()),
        "negative": int(rows["negative"].sum()),
        "days_averaged": int((count > 1).sum()),
        "days_incomplete": incomplete,
        "days_flagged": int(flagged.sum()),
        "sub_daily": bool(step is not None and step < 1.0),
    }
    return GaugeRecord(gauge, flow, counts, flagged)


def _typical_step_days(stamps):
    """Median step between distinct time stamps, in days (None with fewer than two)."""
    unique = np.unique(stamps.to_numpy(dtype="datetime64[ns]"))
    if unique.size < 2:
        return None
    steps = np.diff(unique).astype("timedelta64[s]").astype(float) / 86400.0
    return float(np.median(steps))
