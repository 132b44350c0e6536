"""How a gauge's ``quality`` is decided: the plain-words cautions about its record, the method's
fit to it, and the plausibility checks (flow depth, recharge and baseflow against flow, a fair
sample of years, the rise between events). Each rule's limit is a named constant with its
source or "our own rule".
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from . import annual as annual_mod
from .baseflow import baseflow_index, separate_baseflow
from .discharge import GaugeRecord
from .errors import counted, quoted
from .results import GaugeResult
from .settings import Settings
from .units import DISCHARGE_UNITS, canonical_units

#: A reported drainage area differing from the computed one by more than this share is flagged.
AREA_MISMATCH = 0.10


#: Drainage areas the method is commonly applied to, km² (common practice, not a published limit).
USUAL_AREA_KM2 = (3.0, 1300.0)


#: Below this baseflow index a stream is too flashy for the method (our own rule). The index is
#: the Institute of Hydrology (1980) one, by smoothed minima, whatever the chosen method: it has
#: no parameter, so the check does not move with BFImax.
FLASHY_BASEFLOW_INDEX = 0.2


#: Fewer measured events than this in the whole record is flagged (our own rule).
FEW_EVENTS = 10


def _record_quality(record: GaugeRecord, result: GaugeResult, settings: Settings):
    """Plain-language cautions about a gauge's record and the method's fit to it (the
    plausibility checks first: when they fail, nothing else about the gauge can be trusted)."""
    notes = _plausibility_notes(record, result, settings)
    missing_share = 1.0 - record.days_with_value / max(record.days, 1)
    if missing_share > 0.05:
        notes.append(f"{100 * missing_share:.0f}% of days in the record have no value")
    if result.complete_years == 0:
        notes.append("no complete water year: mean annual recharge not computed")
    elif result.complete_years < settings.min_complete_years:
        notes.append(
            f"only {result.complete_years} complete water years (fewer than {settings.min_complete_years})"
        )
    notes.extend(_fair_sample_notes(record, result))
    notes.extend(between_events_notes(result))
    events = result.table("events")
    used = int(np.sum(events["used"])) if len(events) else 0
    if len(events):
        skipped = len(events) - used
        if skipped > 0.1 * len(events):
            notes.append(f"{skipped} of {len(events)} events could not be measured")
    if used < FEW_EVENTS:
        notes.append(f"only {used} events measured (fewer than {FEW_EVENTS})")
    lo, hi = USUAL_AREA_KM2
    if np.isfinite(result.area_km2) and not lo <= result.area_km2 <= hi:
        notes.append(
            f"drainage area {result.area_km2:,.0f} km² is outside the {lo:,.0f}–{hi:,.0f} km² the method is usually applied to"
        )
    flow = record.flow.to_numpy()
    reference = baseflow_index(flow, separate_baseflow(flow, "smoothed_minima"))
    if np.isfinite(reference) and reference < FLASHY_BASEFLOW_INDEX:
        notes.append(
            f"flashy stream (baseflow index {reference:.2f} by smoothed minima, under {FLASHY_BASEFLOW_INDEX}): "
            "the method suits baseflow-dominated streams"
        )
    return notes


#: The rises of the recession between measured events, as a share of the recharge, beyond
#: which a gauge is flagged (our own rule: on invented records where the method's assumptions
#: hold they stay within ±2 %; a term this size puts the recharge off by more than its band).
BETWEEN_EVENTS_SHARE = 0.10


def between_events_notes(result: GaugeResult):
    """A caution when the recession rises (or falls) between measured events by more than
    :data:`BETWEEN_EVENTS_SHARE` of the recharge."""
    term, recharge = result.recharge_between_events_mm_per_year, result.recharge_mm_per_year
    if not (np.isfinite(term) and np.isfinite(recharge) and recharge > 0):
        return []
    share = term / recharge
    if share > BETWEEN_EVENTS_SHARE:
        return [
            f"the recession rises between events by about {term:.0f} mm/yr ({100 * share:.0f}% "
            "of the recharge) that no event measured: storms too small to count as events; "
            "the recharge is likely low by at least that much"
        ]
    if share < -BETWEEN_EVENTS_SHARE:
        return [
            f"the recession falls faster than K between events (about {-term:.0f} mm/yr, "
            f"{-100 * share:.0f}% of the recharge): flow lost from the stream, or K too long"
        ]
    return []


#: A river's mean annual flow depth (mean flow volume over the drainage area) lies in this
#: range, mm/yr (common practice, not a published limit: the driest perennial streams carry
#: about a millimetre a year, the wettest mountain basins a few metres). A gauge outside it is
#: flagged: most often the discharge units are wrong, sometimes the catchment.
FLOW_DEPTH_MM_PER_YEAR = (1.0, 5000.0)


#: A typical river's mean flow depth, mm/yr: about the world's mean runoff (from memory: some
#: 40,000 km³ of river flow a year over some 135 million km² of land). Of the unit mix-ups
#: that would bring a depth from outside the range into it, the one bringing it nearest this
#: is named (our own rule).
TYPICAL_FLOW_DEPTH_MM_PER_YEAR = 300.0


#: A depth this many times beyond the range is "far" beyond it.
FAR_OUTSIDE = 10.0


#: The words every flow-depth note ends with: the command-line option / the QGIS parameter.
UNITS_HINT = "check the discharge units (--units / UNITS)"


#: The plausibility checks, by key (see ``GaugeResult.implausible``), with what the run's
#: summary says of the gauges that fail one.
PLAUSIBILITY_CHECKS = {
    "flow_depth_high": f"have a mean flow depth above what rivers carry: {UNITS_HINT}",
    "flow_depth_low": f"have a mean flow depth below what rivers carry: {UNITS_HINT}",
    "recharge_over_flow": (
        "have more mean annual recharge than flow: check the recession index "
        "(--recession-index / RECESSION_INDEX)"
    ),
    "baseflow_over_flow": (
        "have more baseflow than flow: check the baseflow method "
        "(--baseflow-method / BASEFLOW_METHOD)"
    ),
}


#: Mean annual recharge may exceed the mean flow of the same years by this share before the
#: gauge is flagged (our own rule: on a stream fed wholly by groundwater the two are equal, and
#: the method's estimate is good to about this share, so a small excess is its error).
RECHARGE_OVER_FLOW = 0.10


#: The baseflow index may exceed 1 by this much, rounding only (the filters keep baseflow at
#: or below the flow on every day).
BASEFLOW_OVER_FLOW = 1e-6


#: Seconds in a mean (Julian) year of 365.25 days.
_SECONDS_PER_YEAR = 86400.0 * 365.25


def _log10_mean(values) -> float:
    """log10 of the mean of the finite values (all ≥ 0), with neither overflow nor warnings
    for any size, subnormal numbers included: -inf when they are all zero, NaN when none."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return np.nan
    top = float(v.max())
    if top <= 0.0:
        return -np.inf
    # Scaled by the largest value the sum cannot overflow; log10 of a subnormal is finite.
    return float(np.log10(top)) + float(np.log10(np.mean(v / top)))


def _number(log10_value: float) -> str:
    """A positive number given by its log10, in words for a note: ``177,000``, ``12.3``,
    ``0.18``, ``3.0×10^-298`` (three significant digits at most; never overflows)."""
    if not np.isfinite(log10_value):
        return "0" if log10_value < 0 else "infinity"
    if -2.0 <= log10_value < 9.0:
        value = float(f"{10.0**log10_value:.3g}")
        if value >= 100:
            return f"{value:,.0f}"
        return f"{value:.3g}" if value >= 1 else f"{value:.2g}"
    exponent = math.floor(log10_value)
    mantissa = round(10.0 ** (log10_value - exponent), 1)
    if mantissa >= 10.0:
        mantissa, exponent = mantissa / 10.0, exponent + 1
    return f"{mantissa:.1f}×10^{exponent}"


def _at_least(log10_factor: float) -> str:
    """A factor given by its log10, rounded down (it is a lower bound): ``20,000``, ``10^297``."""
    if log10_factor >= 6.0:
        return f"10^{math.floor(log10_factor)}"
    step = 10.0 ** (math.floor(log10_factor) - 1)  # two significant digits
    value = math.floor(10.0**log10_factor / step) * step
    return f"{value:,.0f}" if value >= 100 else f"{value:.2g}"


def _unit_mix_ups(units):
    """Every other unit read as ``units``: ``(factor, written, read)``, the flow coming out
    ``factor`` times the truth (factors from :data:`units.DISCHARGE_UNITS`, NIST SP 811)."""
    read = canonical_units(units)
    return [
        (DISCHARGE_UNITS[read] / to_m3s, written, read)
        for written, to_m3s in DISCHARGE_UNITS.items()
        if written != read
    ]


def flow_depth_note(flow_m3s, area_km2, units="m3/s"):
    """A gauge's mean annual flow depth checked against what rivers carry.

    The depth is the mean flow over the days with a value, as a volume per year of 365.25
    days, over the drainage area: d = Q̄ · 31,557,600 s / (A · 10⁶ m²) · 10³ mm/m. Outside
    :data:`FLOW_DEPTH_MM_PER_YEAR` (common practice) the gauge is flagged with the likely
    cause: when reading the values in another of the offered units would bring d into the
    range, that unit mix-up is named (the one bringing d nearest
    :data:`TYPICAL_FLOW_DEPTH_MM_PER_YEAR`); otherwise the least factor that would.
    Worked in log10 throughout, so values of any size (1e-300 m³/s, subnormal ones) neither
    overflow nor warn.

    Parameters
    ----------
    flow_m3s : array_like
        Daily flows, m³/s (NaN for days without a value).
    area_km2 : float
        Drainage area; NaN (or not positive) skips the check.
    units : str
        The units the values were read in (names the mix-up).

    Returns
    -------
    tuple of (str, str) or None
        The check's key (``flow_depth_high`` or ``flow_depth_low``) and the note; None when
        the depth is in the range, or cannot be worked out (no area, no value, no flow).

    Examples
    --------
    >>> flow_depth_note([1.0] * 365, 100.0) is None  # 316 mm/yr
    True
    >>> flow_depth_note([1000.0] * 365, 100.0)[1][:60]
    'mean flow depth 316,000 mm/yr is far above what rivers carry'
    """
    area = float(area_km2)
    if not (np.isfinite(area) and area > 0):
        return None
    log_flow_mean = _log10_mean(flow_m3s)
    if not np.isfinite(log_flow_mean):  # no value, or no flow at all (noted elsewhere)
        return None
    depth = log_flow_mean + math.log10(_SECONDS_PER_YEAR) - math.log10(area * 1e3)
    low, high = (math.log10(v) for v in FLOW_DEPTH_MM_PER_YEAR)
    if low <= depth <= high:
        return None
    above = depth > high
    beyond = depth - high if above else low - depth
    typical = math.log10(TYPICAL_FLOW_DEPTH_MM_PER_YEAR)
    best = None
    for factor, written, read in _unit_mix_ups(units):
        corrected = depth - math.log10(factor)
        if (factor > 1.0) == above and low <= corrected <= high:
            if best is None or abs(corrected - typical) < best[0]:
                best = (abs(corrected - typical), factor, written, read)
    lo_text, hi_text = (f"{v:,.0f}" for v in FLOW_DEPTH_MM_PER_YEAR)
    far = "far " if beyond >= math.log10(FAR_OUTSIDE) else ""
    way = "large" if above else "small"
    text = (
        f"mean flow depth {_number(depth)} mm/yr is {far}{'above' if above else 'below'} what "
        f"rivers carry (about {lo_text} to {hi_text} mm/yr): "
    )
    if best is not None:
        _, factor, written, read = best
        times = factor if factor > 1 else 1.0 / factor
        times_text = f"{times:,.0f}" if times >= 100 else f"{times:.3g}"
        text += (
            f"the discharge {'looks' if far else 'may be'} about {times_text} times too {way} "
            "for the drainage area, "
            f"as when values in {written} are read as {read}; {UNITS_HINT}"
        )
    else:
        text += (
            f"the discharge is at least {_at_least(beyond)} times too {way} for the drainage "
            f"area, which no mix-up of the offered units explains; {UNITS_HINT} and the "
            "catchment linked to the gauge"
        )
    return ("flow_depth_high" if above else "flow_depth_low"), text


def _flow_m3_by_water_year(flow: pd.Series, start_month, years) -> np.ndarray:
    """The flow volume (m³) of each water year in ``years``, from every day with a value (as
    the annual table's ``flow_mm``, but needing no area)."""
    q = flow.to_numpy(dtype=float)
    years = np.asarray(years, dtype=np.int64)
    out = np.zeros(years.size)
    if q.size == 0 or years.size == 0:
        return out
    first = flow.index[0]
    if first.tzinfo is not None:
        first = first.tz_localize(None)  # the local day
    day0 = int(np.datetime64(first.to_datetime64(), "D").astype(np.int64))
    # Each day's water year from the calendar the annual table keeps for this date range.
    first_year, day_slot, _ = annual_mod._day_slots(day0, q.size, "year", int(start_month))
    slot = day_slot + (first_year - years[0])
    inside = (slot >= 0) & (slot < years.size)
    volume = np.where(np.isfinite(q), q, 0.0) * 86400.0
    return np.bincount(slot[inside], weights=volume[inside], minlength=years.size)[: years.size]


def _amount(value: float, area_km2: float) -> str:
    """A yearly volume in words: as a depth where there is an area, else in m³."""
    if np.isfinite(area_km2) and area_km2 > 0:
        return f"{_number(_log10_amount(value) - math.log10(area_km2 * 1e3))} mm/yr"
    return f"{_number(_log10_amount(value))} m³/yr"


def _log10_amount(value: float) -> float:
    return math.log10(value) if value > 0 else -math.inf


def water_balance_notes(result: GaugeResult, flow_m3_by_year=None):
    """Recharge and baseflow checked against the flow they are part of.

    Recharge that returns to the stream, and the baseflow, are parts of the flow: over the
    same years neither can exceed it (a single year's recharge may, while the aquifer fills;
    a mean over the complete years may not). Flagged: mean annual recharge over the complete
    water years more than :data:`RECHARGE_OVER_FLOW` above the mean annual flow of the same
    years (on a stream fed wholly by groundwater the two are equal, so the method's own error
    is allowed), and a baseflow index (Σ baseflow / Σ flow) above 1.

    Parameters
    ----------
    result : GaugeResult
        With its ``annual`` table, ``baseflow_index`` and recession index.
    flow_m3_by_year : array_like, optional
        Flow volume of each row of the annual table, m³ (default: the table's ``flow_mm``
        times the area).

    Returns
    -------
    list of (str, str)
        ``(check key, note)`` for each check failed.
    """
    out = []
    annual = result.table("annual")
    area = result.area_km2
    if len(annual):
        if flow_m3_by_year is None:
            flow_m3_by_year = np.asarray(annual["flow_mm"], dtype=float) * area * 1e3
        flow = np.asarray(flow_m3_by_year, dtype=float)
        recharge = np.asarray(annual["recharge_m3"], dtype=float)
        same = np.asarray(annual["complete"], dtype=bool) & np.isfinite(recharge)
        same &= np.isfinite(flow)
        if same.any():
            mean_recharge, mean_flow = float(recharge[same].mean()), float(flow[same].mean())
            if mean_recharge > (1.0 + RECHARGE_OVER_FLOW) * mean_flow:
                k = result.recession
                k_text = (
                    f"the given recession index ({k.days:,.0f} days) is likely far too long"
                    if k is not None and k.source == "given"
                    else f"the recession index ({k.days:,.0f} days) or the events are likely wrong"
                    if k is not None and np.isfinite(k.days)
                    else "the recession index or the events are likely wrong"
                )
                out.append(
                    (
                        "recharge_over_flow",
                        f"mean annual recharge {_amount(mean_recharge, area)} is more than the "
                        f"mean flow of the same {counted(int(same.sum()), 'water year')} "
                        f"({_amount(mean_flow, area)}), which recharge returning to the stream "
                        f"cannot be: {k_text}",
                    )
                )
    bfi = result.baseflow_index
    if np.isfinite(bfi) and bfi > 1.0 + BASEFLOW_OVER_FLOW:
        out.append(
            (
                "baseflow_over_flow",
                f"baseflow index {bfi:.2f} is above 1: the baseflow exceeds the flow, which "
                "cannot be; the baseflow separation went wrong (check the baseflow method, "
                "--baseflow-method / BASEFLOW_METHOD)",
            )
        )
    return out


def _plausibility_notes(record: GaugeRecord, result: GaugeResult, settings: Settings):
    """The plausibility checks of one gauge (:func:`flow_depth_note`,
    :func:`water_balance_notes`): their notes, with the keys of the failed checks kept in
    ``result.implausible``."""
    found = []
    depth = flow_depth_note(record.flow.to_numpy(dtype=float), result.area_km2, settings.units)
    if depth is not None:
        found.append(depth)
    annual = result.table("annual")
    flow = (
        _flow_m3_by_water_year(record.flow, settings.water_year_start, annual["water_year"])
        if len(annual)
        else None
    )
    found.extend(water_balance_notes(result, flow))
    result.implausible = [key for key, _ in found]
    return [note for _, note in found]


#: The complete years' mean flow depth may differ from the whole record's by this share before
#: the gauge is flagged as kept on an unfair sample of its years (our own rule).
UNFAIR_SAMPLE = 0.10


def _fair_sample_notes(record: GaugeRecord, result: GaugeResult):
    """A caution when the water years the mean covers are wetter or drier than the record.

    The mean flow of the complete years is compared with the mean flow over every day with a
    value in the whole record: when a few missing years were the wet (or dry) ones, the mean
    annual recharge of the rest does not represent the gauge.
    """
    annual = result.table("annual")
    if not len(annual) or result.complete_years == 0:
        return []
    complete = np.asarray(annual["complete"], dtype=bool)
    if complete.all():
        return []
    flow = record.flow.to_numpy(dtype=float)
    with_value = flow[np.isfinite(flow)]
    if with_value.size == 0 or not np.isfinite(result.area_km2) or result.area_km2 <= 0:
        return []
    record_mm = with_value.mean() * 86400.0 * 365.25 / (result.area_km2 * 1e3)
    kept = np.asarray(annual["flow_mm"], dtype=float)[complete]
    kept_mm = float(np.mean(kept[np.isfinite(kept)])) if np.isfinite(kept).any() else np.nan
    if not (np.isfinite(kept_mm) and record_mm > 0):
        return []
    change = kept_mm / record_mm - 1.0
    if abs(change) <= UNFAIR_SAMPLE:
        return []
    return [
        f"the {result.complete_years} water years with a complete record are "
        f"{'wetter' if change > 0 else 'drier'} than the whole record (mean flow "
        f"{kept_mm:,.0f} against {record_mm:,.0f} mm/yr): the mean recharge may not represent it"
    ]


#: Values that are not usable numbers (text, negative, infinite, missing-value codes) are
#: flagged when they are more than this share of a gauge's rows (our own rule).
MANY_BAD_VALUES = 0.01


#: Flow is flagged as ephemeral when it is zero on at least this share of the days with a
#: value (our own rule; the method suits perennial streams).
EPHEMERAL_ZERO_SHARE = 0.10


#: A record shorter than this many days is flagged as too short for the method (our own rule:
#: the recession index needs several recessions, the annual sums a water year).
SHORT_RECORD_DAYS = 365


def record_notes(record: GaugeRecord) -> list:
    """Plain-language flags about a gauge's input rows: what was left out or merged, and why.

    They lead the gauge's ``quality``: unreadable dates, values that are not usable numbers
    (when many), missing-value codes that repeat, times given twice with different values, a
    record that is dry, ephemeral or shorter than a year.
    """
    counts = record.counts
    notes = []
    rows = counts.get("rows") or 0
    unreadable = counts.get("unreadable_dates", 0)
    if unreadable:
        example = counts.get("unreadable_date_example")
        notes.append(
            f"{counted(unreadable, 'row')} with a date that could not be read left out"
            + (f" (e.g. {quoted(example)})" if example else "")
        )
    for key, words in (
        ("stray_dates", "dated more than a century from the rest of the record"),
        ("future_dates", "dated in the future"),
    ):
        if counts.get(key):
            examples = counts.get(key.replace("dates", "date_examples")) or []
            more = " …" if counts[key] > len(examples) else ""
            notes.append(
                f"{counted(counts[key], 'row')} {words} ({', '.join(examples)}{more}): a typo?"
            )
    for value, count in counts.get("missing_value_codes", []):
        if count >= 2:
            notes.append(f"{value:g} used as a missing-value code on {count:,} rows (left out)")
    bad = counts.get("non_numeric", 0) + counts.get("negative", 0)
    if bad and bad > MANY_BAD_VALUES * max(rows, 1):
        notes.append(f"{counted(bad, 'value')} that are text, negative or infinite left out")
    implausible = counts.get("implausible", 0)
    if implausible:
        notes.append(
            f"{counted(implausible, 'value')} over 10 million m³/s left out (no river carries "
            "so much: wrong units or a code?)"
        )
    conflicting = counts.get("conflicting_times", 0)
    if conflicting:
        what = ("time", "times") if counts.get("sub_daily") else ("day", "days")
        notes.append(
            f"{counted(conflicting, *what)} given more than once with different values (averaged)"
        )
    flow = record.flow.to_numpy(dtype=float)
    with_value = flow[np.isfinite(flow)]
    if with_value.size:
        zero = int(np.count_nonzero(with_value == 0))
        if zero == with_value.size:
            notes.append("flow is zero on every day with a value (a dry or ephemeral record)")
        elif zero >= EPHEMERAL_ZERO_SHARE * with_value.size:
            notes.append(
                f"flow is zero on {100 * zero / with_value.size:.0f}% of the days with a value: "
                "an ephemeral stream (the method suits perennial streams)"
            )
    if 0 < record.days < SHORT_RECORD_DAYS:
        notes.append(
            f"record only {counted(record.days, 'day')} long: too short for the method "
            "(a year or more)"
        )
    return notes
