"""Computing every gauge: gauge groups run here, in worker processes or on a Dask cluster
(:mod:`parallel`), their results packed for the trip back; rows handed to a table sink group
by group; the tally of read, computed and skipped gauges.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .errors import InputError, counted, describe
from .hydrology import _gauge_hydrology
from .inputs import _records
from .progress import Reporter
from .quality import record_notes
from .results import GaugeResult, _stack
from .tables import pack_tables, unpack_tables


def _gauge_group(payload):
    """The hydrology of a group of gauges (run here or in a worker process).

    The payload's items carry their daily records, or None when a forked worker reads them
    from the records it inherited. A worker packs the group's results (see
    :func:`_pack_group`) so they travel back cheaply.
    """
    from .parallel import shared

    items, settings, keep_series, packed = payload  # settings resolved by compute_gauges
    inherited = shared()
    out = []
    for gid, record, area, given in items:
        if record is None and inherited is not None:
            record = inherited.get(gid)
        failure = None
        if record is None:
            result = GaugeResult(gid, area, quality=["no discharge record for this gauge"])
        else:
            try:
                result = _gauge_hydrology(record, area, settings, given, keep_series)
            except Exception as exc:  # one bad gauge never spoils the run
                failure = describe(exc)
                result = GaugeResult(
                    gid, area, quality=[f"could not be computed (internal error: {failure})"]
                )
            result.quality[:0] = record_notes(record)
        out.append((gid, result, failure))
    return _pack_group(out) if packed else out


#: Marks a gauge group's results packed by :func:`_pack_group`.
_PACKED = "packed gauge group"


def _pack_group(out):
    """A gauge group's results with each kind of table joined across its gauges.

    Pickling a few long arrays costs a fraction of pickling many short ones; this is what makes
    the workers' results cheap to send and to receive. :func:`_unpack_group` restores them
    exactly (same values, same dtypes).
    """
    results = [result for _, result, _ in out]
    tables = {
        name: pack_tables([result.tables.get(name) for result in results])
        for name in {name for result in results for name in result.tables}
    }
    has_tables = [list(result.tables) for result in results]
    segments = pack_tables(
        [None if r.recession is None else r.recession.segment_columns for r in results]
    )
    for result in results:
        result.tables = {}
        if result.recession is not None:
            result.recession.segment_columns = None
    return (_PACKED, out, has_tables, tables, segments)


def _unpack_group(group):
    """The ``(gauge id, result, failure)`` list of a gauge group, packed or not."""
    if not (isinstance(group, tuple) and group and group[0] == _PACKED):
        return group
    _, out, has_tables, tables, segments = group
    unpacked = {name: unpack_tables(packed) for name, packed in tables.items()}
    for i, ((_, result, _), names) in enumerate(zip(out, has_tables)):
        result.tables = {name: unpacked[name][i] for name in names}
    for (_, result, _), columns in zip(out, unpack_tables(segments)):
        if result.recession is not None:
            result.recession.segment_columns = columns
    return out


def compute_gauges(
    gauge_ids,
    records,
    area_of,
    settings,
    reporter,
    given_k,
    unlinked_note=None,
    workers=None,
    scheduler=None,
    keep_series=True,
):
    """The hydrology of every gauge; one that fails is flagged and the run goes on.

    Parameters
    ----------
    gauge_ids : list of str
    records : dict of str to GaugeRecord
    area_of : dict of str to float
        Drainage area of each linked gauge (km²).
    settings : Settings
    reporter : Reporter
    given_k : dict of str to float
        Recession index given per gauge.
    unlinked_note : callable, optional
        Gives the quality note for a gauge without an area.
    workers : int, optional
        Processes to use (default ``settings.workers``); gauges go out in groups.
    scheduler : str, optional
        Address of a Dask distributed scheduler (default ``settings.dask_scheduler``).
    keep_series : bool
        Keep each gauge's daily flow and baseflow in its result (for the daily table and the
        report); without them a large run holds only its tables.

    Returns
    -------
    results : dict of str to GaugeResult
        In the order of ``gauge_ids``; identical whatever the workers or scheduler.
    failed : int
    """
    from .parallel import group_size, groups, map_groups

    settings = settings.resolved()  # once here, not once per gauge group
    workers = settings.workers if workers is None else workers
    scheduler = settings.dask_scheduler if scheduler is None else scheduler
    total = len(gauge_ids)
    serial = int(workers or 1) <= 1 and not scheduler
    # One gauge at a time when serial, so progress and cancel follow every gauge.
    batches = groups(gauge_ids, 1 if serial else group_size(total, workers, scheduler))
    # Payloads name their gauges; the records go along only where workers cannot inherit them.
    payloads = [
        (
            [(gid, None, area_of.get(gid, np.nan), given_k.get(gid)) for gid in batch],
            settings,
            keep_series,
            not serial,
        )
        for batch in batches
    ]

    def pack(payload, all_records):
        items, group_settings, keep, packed = payload
        return (
            [(gid, all_records.get(gid), area, given) for gid, _, area, given in items],
            group_settings,
            keep,
            packed,
        )

    results: dict[str, GaugeResult] = {}
    failed = 0
    done = 0
    reporter.progress(0, total, gauge_ids[0] if gauge_ids else None)
    for group in map_groups(
        _gauge_group,
        payloads,
        workers,
        scheduler,
        reporter.cancelled,
        shared_data=records,
        pack=pack,
    ):
        for gid, result, failure in _unpack_group(group):
            if failure is not None:
                failed += 1
                reporter.warning(f"gauge {gid}: could not be computed ({failure})")
            if unlinked_note is not None and gid not in area_of:
                result.quality.insert(0, unlinked_note(gid))
            results[gid] = result
            done += 1
        reporter.progress(done, total, gauge_ids[done] if done < total else None)
    unknown = sorted(set(records) - set(gauge_ids))
    if unknown and any(gid in records for gid in gauge_ids):  # else the run stops: one error
        shown = ", ".join(unknown[:5]) + (" …" if len(unknown) > 5 else "")
        reporter.warning(f"{len(unknown)} gauge ids in the discharge table match no gauge: {shown}")
    return results, failed


class _Offset(Reporter):
    """Passes progress on as part of a larger whole (one gauge group of many)."""

    def __init__(self, reporter, before, total):
        self.reporter, self.before, self.total = reporter, before, total

    def progress(self, done, total, gauge_id=None):
        self.reporter.progress(self.before + done, self.total, gauge_id)

    def cancelled(self):
        return self.reporter.cancelled()

    def info(self, text):
        self.reporter.info(text)

    def warning(self, text):
        self.reporter.warning(text)


def _compute_in_groups(
    discharge, gauge_ids, area_of, settings, reporter, given_k, unlinked, keep_series, sink=None
):
    """:func:`compute_gauges` over the whole discharge table, or over it group by group.

    ``discharge`` is one table, or an iterable of tables each holding every row of its gauges
    (see :func:`files.discharge_groups`): then only one group's daily records are in memory at
    a time. With a ``sink`` (see :func:`run_atlas`) each group's :data:`SINK_TABLES` go there
    as soon as the group is done.
    """
    chunks = [discharge] if isinstance(discharge, pd.DataFrame) else discharge
    wanted = set(gauge_ids)
    results: dict[str, GaugeResult] = {}
    failed = 0
    tally = _Tally()
    grouped = not isinstance(discharge, pd.DataFrame)
    tally.grouped = grouped
    for chunk in chunks:
        try:
            records = _records(chunk, settings, tally.left_out)
        except InputError as exc:
            if grouped and exc.row is not None:  # a row of the group, not of the file
                exc.row = None
                exc.args = (str(exc),)
            raise
        tally.add(len(chunk), records, wanted)
        del chunk  # the records hold the group's flows now; its table is not needed
        here = [gid for gid in gauge_ids if gid in records and gid not in results]
        extra = {gid: record for gid, record in records.items() if gid not in wanted}
        part, lost = compute_gauges(
            here,
            {**extra, **{g: records[g] for g in here}},
            area_of,
            settings,
            _Offset(reporter, len(results), len(gauge_ids)),
            given_k,
            unlinked,
            keep_series=keep_series,
        )
        results.update(part)
        failed += lost
        if sink is not None:
            _to_sink(part, sink)
        del records  # before the next group is read, not after
    missing = [gid for gid in gauge_ids if gid not in results]
    if missing:
        rest, _ = compute_gauges(
            missing,
            {},
            area_of,
            settings,
            _Offset(reporter, len(results), len(gauge_ids)),
            given_k,
            unlinked,
            keep_series=keep_series,
        )
        results.update(rest)
    if not tally.rows:
        raise InputError("the discharge table has no rows")
    if tally.matched or not tally.unmatched:  # else the run stops with one error
        tally.report(reporter)
    return {gid: results[gid] for gid in gauge_ids}, failed, tally


#: Tables a run can hand to a table sink group by group (``annual`` stays: the nesting and
#: the per-year maps need it whole, and it is small).
SINK_TABLES = ("events", "periods", "segments", "master_recession")


def _to_sink(results, sink):
    """Hand these gauges' :data:`SINK_TABLES` to ``sink(name, frame)`` (one frame per table,
    the gauges in order) and let the gauges' own copies go (the recession's segment columns
    too: they are the segments table's)."""
    for name in SINK_TABLES:
        sink(name, _stack(results, name, share=False))
    for result in results.values():
        result.kept_event_figures = result.event_figures()
        for name in SINK_TABLES:
            result.tables.pop(name, None)
        if result.recession is not None:
            result.recession.segment_columns = None


class _Tally:
    """What reading the discharge table left out or merged, over all its gauge groups: said
    once in the run's log, and the gauge ids it holds that match no gauge."""

    COUNTS = (
        ("unreadable_dates", "rows with an unreadable date left out"),
        ("repeated_rows", "rows repeating a date (or time) already given merged"),
        ("conflicting_times", "of them with a different value (averaged)"),
        ("missing_value_code", "missing-value codes such as -999 left out"),
        ("non_numeric", "values that are not numbers left out"),
        ("negative", "negative or infinite values left out"),
        ("implausible", "values over 10 million m³/s left out"),
        ("dates_with_offset", "time-zone offsets ignored (clock time as written)"),
    )

    def __init__(self):
        self.rows = 0
        self.totals = {name: 0 for name, _ in self.COUNTS}
        self.unmatched = []
        self.matched = 0
        self.order = None
        self.left_out = {}
        self.grouped = False

    def add(self, rows, records, wanted):
        self.rows += int(rows)
        for gid, record in records.items():
            for name in self.totals:
                self.totals[name] += int(record.counts.get(name) or 0)
            self.order = self.order or record.counts.get("date_order")
            if gid in wanted:
                self.matched += 1
            else:
                self.unmatched.append(gid)

    def report(self, reporter):
        parts = [f"{self.totals[name]:,} {text}" for name, text in self.COUNTS if self.totals[name]]
        if self.left_out.get("rows_without_id"):
            reporter.warning(
                f"discharge table: {counted(self.left_out['rows_without_id'], 'row')} without "
                "a gauge id left out"
                + ("" if self.grouped else f" (the first: row {self.left_out['row_without_id']})")
            )
        if self.order:
            parts.append(f"dates with the year last read {self.order}")
        if parts:
            reporter.info(f"discharge table: {'; '.join(parts)}")
