"""Reading a long discharge table (gauge id, date, value) into one daily series per gauge."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .errors import InputError
from .units import canonical_units, to_cubic_metres_per_second


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
        negative or infinite (``negative``), and how many days held several values that were
        averaged (``days_averaged``).
    """

    gauge_id: str
    flow: pd.Series
    counts: dict = field(default_factory=dict)

    @property
    def days(self) -> int:
        return int(self.flow.size)

    @property
    def days_with_value(self) -> int:
        return int(self.flow.notna().sum())

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
) -> dict[str, GaugeRecord]:
    """Split a long discharge table into one daily series per gauge, in m³/s.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per gauge and date.
    gauge_field, date_field, value_field : str
        Column names for the gauge id, the date and the discharge value.
    units : str
        Units of the values: ``m3/s``, ``L/s``, ``ft3/s`` (or ``cfs``) or ``ML/d``.

    Returns
    -------
    dict of str to GaugeRecord
        Keyed by gauge id text, in order of first appearance.

    Notes
    -----
    Missing, non-numeric, negative and infinite values become missing days and are counted.
    Several values on one day (sub-daily data) are averaged into the daily mean.
    """
    if not isinstance(table, pd.DataFrame):
        raise TypeError(f"table must be a pandas DataFrame, not {type(table).__name__}")
    units = canonical_units(units)
    require_columns(table, [gauge_field, date_field, value_field], "discharge table")

    ids = gauge_id_text(table[gauge_field].to_numpy())
    raw = table[value_field]
    dates = pd.to_datetime(pd.Series(table[date_field].to_numpy()), errors="coerce")
    if getattr(dates.dt, "tz", None) is not None:
        dates = dates.dt.tz_localize(None)
    dates = dates.dt.floor("D")

    numeric = pd.to_numeric(pd.Series(raw.to_numpy(), dtype=object), errors="coerce").astype(float)
    was_missing = pd.Series(raw.isna().to_numpy())
    non_numeric = numeric.isna() & ~was_missing
    values = to_cubic_metres_per_second(numeric.to_numpy(), units)
    bad_sign = ~np.isfinite(values) & ~np.isnan(values) | (values < 0)
    values[bad_sign] = np.nan

    frame = pd.DataFrame(
        {
            "gauge": ids,
            "date": dates.to_numpy(),
            "q": values,
            "missing": was_missing.to_numpy(),
            "non_numeric": non_numeric.to_numpy(),
            "negative": bad_sign,
        }
    )
    if frame["date"].isna().all() and len(frame):
        raise InputError(
            f"no value in the date field {date_field!r} could be read as a date", field=date_field
        )
    frame = frame[frame["gauge"].notna() & frame["date"].notna()]

    records: dict[str, GaugeRecord] = {}
    for gauge, rows in frame.groupby("gauge", sort=False):
        per_day = rows.groupby("date", sort=True)["q"]
        daily = per_day.mean()
        several = int((per_day.size() > 1).sum())
        if daily.empty:
            flow = pd.Series([], dtype=float, index=pd.DatetimeIndex([], name="date"))
        else:
            full = pd.date_range(daily.index[0], daily.index[-1], freq="D", name="date")
            flow = daily.reindex(full).astype(float)
        flow.name = "discharge_m3s"
        counts = {
            "missing": int(rows["missing"].sum()),
            "non_numeric": int(rows["non_numeric"].sum()),
            "negative": int(rows["negative"].sum()),
            "days_averaged": several,
        }
        records[str(gauge)] = GaugeRecord(str(gauge), flow, counts)
    return records
