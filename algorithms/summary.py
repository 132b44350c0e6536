"""The run's summary: counts of gauges computed, flagged and skipped, the plausibility line, and
the one clear error when no gauge has a usable record (with hints on mismatched ids).
"""

from __future__ import annotations

import itertools

from .errors import InputError, quoted
from .quality import PLAUSIBILITY_CHECKS
from .results import AtlasResult


def _summary(results, failed, tally=None):
    """Counts of a run. A gauge is skipped when it has no hydrology at all (no discharge
    record, no usable value, or a failure inside the computation); it is flagged when it was
    computed but its quality is not ok. ``with_record`` counts the gauges the discharge table
    holds rows for; ``unmatched_ids`` lists (some of) the table's gauge ids that match no
    gauge, ``unmatched`` how many there are. ``implausible`` counts the gauges failing each
    plausibility check, and ``plausibility`` is the line said when most gauges fail one (see
    :func:`_plausibility_line`; empty otherwise)."""
    skipped = sum(1 for r in results.values() if r.recession is None)
    flagged = sum(1 for r in results.values() if r.recession is not None and r.quality)
    implausible = {}
    for result in results.values():
        for key in result.implausible:
            implausible[key] = implausible.get(key, 0) + 1
    summary = {
        "gauges": len(results),
        "computed": len(results) - skipped,
        "flagged": flagged,
        "skipped": skipped,
        "failed": failed,
        "implausible": implausible,
        "plausibility": _plausibility_line(implausible, len(results)),
    }
    if tally is not None:
        summary.update(
            {
                "with_record": tally.matched,
                "unmatched": len(tally.unmatched),
                "unmatched_ids": tally.unmatched[:5],
                "unmatched_all": tally.unmatched[:10_000],
            }
        )
    return summary


def _plausibility_line(implausible, gauges):
    """One line for the run's summary when most gauges (more than half, and at least 2) fail
    the same plausibility check, e.g. ``5 of 6 gauges have a mean flow depth above what rivers
    carry: check the discharge units (--units / UNITS)``: a fault of the whole input (most
    often its units) rather than of a gauge. The check failed by the most gauges is named
    (the first in :data:`PLAUSIBILITY_CHECKS` on a tie); empty when there is none."""
    most = [
        (count, -order, key)
        for order, key in enumerate(PLAUSIBILITY_CHECKS)
        if (count := implausible.get(key, 0)) >= 2 and count > gauges / 2
    ]
    if not most:
        return ""
    count, _, key = max(most)
    return f"{count} of {gauges} gauges {PLAUSIBILITY_CHECKS[key]}"


def _some(ids, total, shown=3):
    """A few ids and how many there are: ``'a', 'b', 'c' … (12)``."""
    text = ", ".join(quoted(i) for i in ids[:shown])
    return text + (f" … ({total})" if total > shown else "")


def require_records(result: AtlasResult) -> None:
    """Raise :class:`InputError` when no gauge of the run has a row in the discharge table,
    or none has a single usable value.

    The run itself goes on in those cases (every gauge flagged "no discharge record" or "no
    usable discharge values"), so a script can still look at its links; the command line and
    the QGIS algorithms call this before writing anything, as a result without any hydrology is
    almost always a wrong field, or a gauge id written differently in the two files (``0123``
    and ``123``).
    """
    problem = _records_problem(result.summary, result.gauges, result.settings)
    if problem is not None:
        raise problem


def _records_problem(summary, gauges, settings):
    """The :class:`InputError` :func:`require_records` raises for a run, or None. The runs
    check it before their per-gauge cautions: when the run is going to stop, the error is
    said alone, not after a caution for every gauge."""
    if summary.get("with_record") and not summary.get("computed") and not summary.get("failed"):
        return InputError(
            "no gauge has a usable discharge value: the field is empty (or holds only missing "
            "values) in every row",
            field=settings.value_field if settings is not None else None,
        )
    if summary.get("with_record", 1) or not summary.get("gauges"):
        return None
    if summary.get("unmatched"):
        theirs = _some(summary["unmatched_ids"], summary["unmatched"])
        ours = _some(list(gauges), len(gauges))
        message = (
            f"no gauge id of the discharge table matches the gauges layer: "
            f"the table has {theirs}, the layer {ours}"
        ) + _id_hint(summary.get("unmatched_all", summary["unmatched_ids"]), list(gauges))
    else:
        message = "the discharge table holds no row with a gauge id and a readable date"
    field = settings.discharge_gauge_field if settings is not None else None
    return InputError(message, field=field)


#: Ways two spellings of one gauge id commonly differ, and how to make them alike.
_ID_DIFFERENCES = (
    ("leading zeros", lambda text: text.lstrip("0") or "0"),
    ("letter case", str.casefold),
    ("spaces", lambda text: "".join(text.split())),
)


def _id_hint(theirs, ours) -> str:
    """``'; they match when leading zeros are ignored (...)'`` when ignoring one or more of
    :data:`_ID_DIFFERENCES` makes some ids of the two sides meet; empty otherwise."""
    ours = [str(g) for g in ours]
    theirs = [str(g) for g in theirs]
    for size in (1, 2, 3):
        for chosen in itertools.combinations(_ID_DIFFERENCES, size):

            def alike(text, chosen=chosen):
                for _, change in chosen:
                    text = change(text)
                return text

            if {alike(g) for g in ours} & {alike(g) for g in theirs}:
                words = " and ".join(name for name, _ in chosen)
                advice = (
                    "; ids read as numbers lose their leading zeros: keep the column as text"
                    if chosen[0][0] == "leading zeros"
                    else ""
                )
                verb = "is" if words == "letter case" else "are"
                return f"; some match when {words} {verb} ignored{advice}"
    return ""


def _summary_text(summary):
    text = f"{summary['gauges']} gauges: {summary['computed']} computed ({summary['flagged']} flagged), {summary['skipped']} skipped"
    if summary["failed"]:
        text += f" ({summary['failed']} of them failed)"
    return text
