"""Reading the long discharge table into daily series."""

import numpy as np
import pandas as pd
import pytest

from recharge_atlas.algorithms.discharge import gauge_id_text, tidy_discharge
from recharge_atlas.algorithms.errors import InputError


def _table(**columns):
    return pd.DataFrame(columns)


def test_daily_series_per_gauge_in_cubic_metres_per_second():
    table = _table(
        gauge_id=["A", "A", "A", "B"],
        date=["2020-01-01", "2020-01-02", "2020-01-04", "2020-01-01"],
        discharge=["100", "200", "300", "50"],
    )
    records = tidy_discharge(table, units="cfs")
    a = records["A"].flow
    assert list(a.index.strftime("%Y-%m-%d")) == [
        "2020-01-01",
        "2020-01-02",
        "2020-01-03",
        "2020-01-04",
    ]
    assert a.iloc[0] == pytest.approx(100 * 0.028316846592)  # NIST SP 811
    assert np.isnan(a.iloc[2])  # a day absent from the table is a missing day
    assert records["B"].days == 1


def test_bad_values_become_missing_and_are_counted():
    table = _table(
        gauge_id=["A"] * 6,
        date=pd.date_range("2020-01-01", periods=6).astype(str),
        discharge=["1.0", "", "abc", "-5", "inf", "2.0"],
    )
    table.loc[1, "discharge"] = None
    record = tidy_discharge(table)["A"]
    counts = {k: record.counts[k] for k in ("missing", "non_numeric", "negative", "days_averaged")}
    assert counts == {"missing": 1, "non_numeric": 1, "negative": 2, "days_averaged": 0}
    assert record.days_with_value == 2


def test_sub_daily_values_are_averaged_into_daily_means():
    table = _table(
        gauge_id=["A"] * 4,
        date=["2020-01-01 00:00", "2020-01-01 12:00", "2020-01-02 06:00", "2020-01-02 18:00"],
        discharge=[1.0, 3.0, 5.0, 7.0],
    )
    record = tidy_discharge(table)["A"]
    assert list(record.flow) == [2.0, 6.0]
    assert record.counts["days_averaged"] == 2


def test_missing_columns_are_named_with_those_found():
    with pytest.raises(
        InputError, match=r"no field 'flow'.*fields found: gauge_id, date, discharge"
    ):
        tidy_discharge(
            _table(gauge_id=["A"], date=["2020-01-01"], discharge=[1.0]), value_field="flow"
        )


def test_unparseable_dates_are_an_input_error():
    with pytest.raises(InputError, match="could be read as a date"):
        tidy_discharge(_table(gauge_id=["A"], date=["yesterday"], discharge=[1.0]))


def test_gauge_ids_compare_as_text():
    assert list(gauge_id_text([1001, 1001.0, " 1001 ", "01001", None, float("nan")])) == [
        "1001",
        "1001",
        "1001",
        "01001",
        None,
        None,
    ]


def test_quarter_hourly_days_need_enough_values():
    stamps = pd.date_range("2020-01-01", periods=3 * 96, freq="15min")
    table = _table(
        gauge_id="A", date=stamps.astype(str), discharge=np.arange(stamps.size, dtype=float)
    )
    table = table.drop(index=range(96 + 10, 96 + 40))  # day 2 keeps 66 of 96 values (< 75 %)
    record = tidy_discharge(table)["A"]
    assert record.counts["sub_daily"] and record.counts["days_incomplete"] == 1
    assert record.flow.iloc[0] == pytest.approx(np.arange(96).mean())
    assert np.isnan(record.flow.iloc[1]) and np.isfinite(record.flow.iloc[2])


def test_quality_codes_flag_days_without_removing_them():
    table = _table(
        gauge_id=["A"] * 4,
        date=pd.date_range("2020-01-01", periods=4).astype(str),
        discharge=[1.0, 2.0, 3.0, 4.0],
        code=["", "E", None, "P"],
    )
    any_code = tidy_discharge(table, flag_field="code")["A"]
    assert list(any_code.flagged) == [False, True, False, True]
    assert list(any_code.flow) == [1.0, 2.0, 3.0, 4.0]
    only_e = tidy_discharge(table, flag_field="code", flag_values=["E"])["A"]
    assert list(only_e.flagged) == [False, True, False, False]


@pytest.mark.parametrize(
    "arrangement", ["sorted", "gauge blocks reversed", "shuffled", "repeats at the end"]
)
def test_row_order_does_not_change_the_records(arrangement):
    """Sorted exports skip the sort; any other order of rows gives the same daily records."""
    rng = np.random.default_rng(3)
    days = pd.date_range("2001-01-01", periods=40, freq="D")
    rows = []
    for gauge in ("B7", "A1", "C3"):
        for i, day in enumerate(days):
            rows.append((gauge, day, 1.0 + i + rng.random()))
            if i % 7 == 0:  # a second reading that day, a quarter later
                rows.append((gauge, day + pd.Timedelta(hours=6), 2.0 + rng.random()))
    table = pd.DataFrame(rows, columns=["gauge_id", "date", "discharge"])
    expected = tidy_discharge(table)
    if arrangement == "gauge blocks reversed":
        table = pd.concat([table[table.gauge_id == g] for g in ("C3", "A1", "B7")])
    elif arrangement == "shuffled":
        table = table.sample(frac=1.0, random_state=5)
    elif arrangement == "repeats at the end":
        table = pd.concat([table, table[table.gauge_id == "B7"].iloc[[3, 9]]])
    got = tidy_discharge(table.reset_index(drop=True))
    assert set(got) == set(expected)
    for gauge, record in expected.items():
        pd.testing.assert_series_equal(got[gauge].flow, record.flow)
    if arrangement == "repeats at the end":
        assert got["B7"].counts["repeated_rows"] == 2


@pytest.mark.parametrize("unit", ["s", "ms", "us", "ns"])
def test_typed_dates_in_any_unit_give_the_same_records(unit):
    """Dates typed as such are read in their own unit (no copy): daily and quarter-hourly
    records, repeated times and gaps come out as from the same dates written as text."""
    daily = pd.date_range("2019-12-30", periods=6, freq="D")
    quarter = pd.date_range("2020-01-01", periods=2 * 96, freq="15min")
    stamps = np.concatenate([daily.to_numpy(), daily[:2].to_numpy(), quarter.to_numpy()])
    values = np.arange(stamps.size, dtype=float)
    values[3] = np.nan
    ids = ["D"] * (daily.size + 2) + ["Q"] * quarter.size
    text = tidy_discharge(
        pd.DataFrame({"gauge_id": ids, "date": pd.Series(stamps).astype(str), "discharge": values})
    )
    typed = tidy_discharge(
        pd.DataFrame(
            {"gauge_id": ids, "date": stamps.astype(f"datetime64[{unit}]"), "discharge": values}
        )
    )
    assert list(typed) == list(text) == ["D", "Q"]
    for gid in text:
        pd.testing.assert_series_equal(typed[gid].flow, text[gid].flow)
        pd.testing.assert_series_equal(typed[gid].flagged, text[gid].flagged)
        assert typed[gid].counts == text[gid].counts
    assert text["Q"].counts["sub_daily"] and text["D"].counts["repeated_rows"] == 2


class _Switch:
    """Stands in for numpy's huge-page switch: records each call, returns the old setting."""

    def __init__(self, setting=True):
        self.setting, self.calls = setting, []

    def __call__(self, enabled):
        self.calls.append(enabled)
        old, self.setting = self.setting, enabled
        return old


def test_tidying_asks_for_plain_pages_and_restores_the_setting(monkeypatch):
    from recharge_atlas.algorithms import discharge

    switch = _Switch(True)
    monkeypatch.setattr(discharge, "_HUGE_PAGE_SWITCH", switch)
    seen = []
    real = discharge._split_gauges

    def split(*args):
        seen.append(switch.setting)
        return real(*args)

    monkeypatch.setattr(discharge, "_split_gauges", split)
    table = _table(gauge_id=["A", "A"], date=["2020-01-01", "2020-01-02"], discharge=[1.0, 2.0])
    tidy_discharge(table)
    assert seen == [False] and switch.setting is True and switch.calls == [False, True]
    with pytest.raises(InputError):  # restored after an error too
        tidy_discharge(table, units="furlongs")
    with pytest.raises(InputError):
        tidy_discharge(_table(gauge_id=["A"], date=["not a date"], discharge=[1.0]))
    assert switch.setting is True


def test_plain_page_blocks_that_overlap_restore_once_at_the_end(monkeypatch):
    from recharge_atlas.algorithms import discharge

    switch = _Switch(True)
    monkeypatch.setattr(discharge, "_HUGE_PAGE_SWITCH", switch)
    outer = discharge.plain_pages()
    outer.__enter__()
    with discharge.plain_pages():
        assert switch.setting is False
    assert switch.setting is False  # the outer block is still inside
    outer.__exit__(None, None, None)
    assert switch.setting is True and switch.calls == [False, True]
    monkeypatch.setattr(discharge, "_HUGE_PAGE_SWITCH", None)  # a numpy without the switch
    with discharge.plain_pages():
        pass


def test_the_huge_page_switch_is_found_on_this_numpy():
    """Both library sets the project supports have it (numpy 1.24 and 2.x); if a future numpy
    drops it, tidying still works and this test says why it got slower."""
    from recharge_atlas.algorithms import discharge

    assert callable(discharge._HUGE_PAGE_SWITCH)


def test_missing_value_codes_are_found_as_numpy_isin_finds_them():
    """The shortcut compares only rows beyond the code nearest zero; it must agree with
    ``np.isin`` everywhere, signed zeros, infinities, NaN and near misses included."""
    from recharge_atlas.algorithms.discharge import (
        MISSING_VALUE_CODES,
        POSITIVE_MISSING_VALUE_CODES,
        _among,
    )

    rng = np.random.default_rng(7)
    edges = [0.0, -0.0, np.nan, np.inf, -np.inf, -9.0000001, 998.9999, 1e300, -1e300, -8.9]
    pool = np.array(list(MISSING_VALUE_CODES) + list(POSITIVE_MISSING_VALUE_CODES) + edges)
    for _ in range(100):
        n = int(rng.integers(0, 200))
        values = np.where(rng.random(n) < 0.5, rng.choice(pool, n), rng.normal(0, 1e4, n))
        for codes in (MISSING_VALUE_CODES, POSITIVE_MISSING_VALUE_CODES):
            assert np.array_equal(_among(values, codes), np.isin(values, codes))
