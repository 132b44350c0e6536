"""Families of synthetic "hard records" with known truth, and how a run is scored on them.

Each family is a set of invented gauges whose daily flow breaks one assumption of the
recession-curve displacement method (Rorabaugh 1964) in a way real records do. The truth comes
from the generator's own recharge pulses, never from the pipeline.

How the flow is made (all families)
-----------------------------------
* Storm rain (mm) falls on some days; how the storm days are placed is what several families
  change. A factor per water year makes wet and dry years.
* Recharge is *not* proportional to quickflow, storm by storm, so no method can pass by
  reading the runoff alone::

      recharge = e(season) · w(wetness) · (rain − 6 mm)+     (2 mm for small_storms)
      quickflow = 0.022 · rain^1.5 · (0.3 + 0.7 wetness²)

  with ``e`` 0.08 in summer to 0.50 in mid-January, ``w = 0.35 + 0.65 wetness`` and
  ``wetness = API / (API + 40 mm)``, API the antecedent rain index (rain before the day, decaying
  by 7 % a day).
* Recharge arrives at noon of the storm day as an instantaneous, uniform pulse (the method's
  assumption). Groundwater flow is the pulse train convolved with the daily-mean response of an
  ideal strip aquifer (Rorabaugh 1960; Glover 1964; see
  :func:`recharge_atlas.algorithms.analytic.strip_aquifer_daily_response`), whose recession
  index is ``K = 0.933 a²S/T``.
* Quickflow is each storm's runoff spread by a kernel that ends within the runoff-end lag
  ``N = A^0.2`` days (A in mi²; Linsley, Kohler & Paulhus), unless the family says otherwise.
* Flow (m³/s) carries multiplicative log-normal gauging noise and is rounded to 3 significant
  figures.

The truth of a gauge is its mean annual recharge over the water years (starting in October)
whose record is complete: at most 2 % of the days missing, zero or flagged (the method cannot
use those days either), plus a per-year table.

The families (:data:`FAMILIES`) and what each breaks are described on :class:`Family`
instances. Run ``python benchmarks/hard_records.py`` to score the method on them.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .generate import _convolve, _gw_kernel, _round_significant, water_year_of

#: First month of the water year used for the truth.
WATER_YEAR_START = 10
#: A water year is complete when at most this share of its days is missing, zero or flagged.
MAX_UNUSABLE_SHARE = 0.02
#: A gauge is "off" when recharge or K is wrong by more than this share.
OFF = 0.15
#: Square kilometres in a square mile (NIST SP 811).
SQUARE_MILE_KM2 = 2.589988110336


@dataclass(frozen=True)
class Family:
    """One kind of hard record: what it breaks (``doc``) and the generator's knobs.

    Attributes
    ----------
    name, doc : str
    k_range : tuple of float
        True recession index K (days), drawn uniformly.
    storms : str
        ``seasonal`` (independent storm days, more in winter), ``clustered`` (wet spells),
        ``pairs`` (storms often followed by another 3–8 days later) or ``small`` (many small
        storms).
    noise : float
        Standard deviation of the multiplicative gauging noise.
    runoff_lags : tuple of float
        Quickflow lasts this many runoff-end lags N (drawn uniformly).
    slow_tail : bool
        Quickflow has a slowly receding tail over its whole duration.
    ice : bool
        Winter gaps of 30–70 days in some years, flagged or missing.
    loss : bool
        The channel loses a steady flow to the ground: flow is clipped at zero.
    units_factor : float
        The flow is written multiplied by this (1000: litres per second for m³/s).
    quick_scale : float
        Multiplies the quickflow.
    threshold : float
        Rain (mm) a storm needs before it recharges.
    """

    name: str
    doc: str
    k_range: tuple = (30.0, 90.0)
    storms: str = "seasonal"
    noise: float = 0.02
    runoff_lags: tuple = (0.6, 1.0)
    slow_tail: bool = False
    ice: bool = False
    loss: bool = False
    units_factor: float = 1.0
    quick_scale: float = 1.0
    threshold: float = 6.0


FAMILIES = {
    f.name: f
    for f in (
        Family(
            "well_behaved",
            "The control: independent storms, K 30–90 days, quickflow over within N days, 2 % "
            "noise, complete records. The method's assumptions hold; it should be within ±10 %.",
        ),
        Family(
            "wet_clustered",
            "Storms in wet spells: in winter, storm days 2–6 days apart for 3–8 weeks. Peaks come "
            "before the previous event's critical time and recessions rarely settle, so events "
            "must be measured as composites and K from few clean segments (K 20–60 days).",
            k_range=(20.0, 60.0),
            storms="clustered",
        ),
        Family(
            "fast_aquifer",
            "K 10–25 days: the critical time (0.2144 K) is 2–5 days, close to the runoff-end lag, "
            "so readings at Tc carry quickflow and segments are short.",
            k_range=(10.0, 25.0),
        ),
        Family(
            "slow_runoff",
            "Quickflow lasts 2–4 times N with a slowly receding tail, and there is more of it "
            "(1.5 times): readings after N days or at Tc and segments that start there still "
            "carry runoff (recharge too high, K too low) unless the record's own runoff-end lag "
            "is found.",
            runoff_lags=(2.0, 4.0),
            slow_tail=True,
            quick_scale=1.5,
        ),
        Family(
            "ice_gaps",
            "Winter gaps of 30–70 days in about half the years (ice): flagged days with "
            "ice-affected values, or missing values. Storms fall inside the gaps, so rises are "
            "hidden and the recession after a gap starts from an unseen state.",
            ice=True,
        ),
        Family(
            "zero_flow",
            "An intermittent stream: the channel loses a steady flow, so discharge is groundwater "
            "plus runoff minus the loss, clipped at zero. It dries in the dry seasons of dry "
            "years and rises out of zero; recessions bend down near zero (K too low).",
            loss=True,
        ),
        Family(
            "small_storms",
            "Many small storms whose rises are only 10–30 % of the flow, with 5 % noise: rises "
            "near the noise, and recessions cut short by frequent small events.",
            storms="small",
            noise=0.05,
            quick_scale=0.15,
            threshold=2.0,
        ),
        Family(
            "close_pairs",
            "Storms often in pairs 3–8 days apart: the second peak comes before (or near) the "
            "first event's critical time, so each event alone is unreliable (the pair's sum "
            "should still be right).",
            storms="pairs",
        ),
        Family(
            "units_mistake",
            "Well-behaved flow written in L/s while the run is told m³/s (1000 times too large). "
            "Its truth is the m³/s truth; the gauge must end up flagged.",
            units_factor=1000.0,
        ),
    )
}


@dataclass
class SyntheticGauge:
    """One invented gauge with its truth.

    Attributes
    ----------
    family, gauge_id : str
    seed : int
    area_km2 : float
    flow : pandas.Series
        Daily discharge as written (m³/s, or L/s for ``units_mistake``) on a complete daily
        index; NaN where missing.
    flagged : pandas.Series of bool or None
        Days flagged (ice), or None.
    recession_index_days : float
        True K = 0.933 a²S/T of the gauge's aquifer.
    half_width_m, storage_coefficient, transmissivity_m2_per_day : float
        The aquifer.
    recharge : pandas.Series
        True daily recharge pulses (mm) on the record's days.
    groundwater_mm, quickflow_mm : numpy.ndarray
        The flow's two parts (mm/day) before loss, noise and rounding, on the record's days.
    truth_annual : pandas.DataFrame
        Per water year: ``water_year, days, missing, zero, flagged, unusable, complete,
        recharge_mm``.
    recharge_mm_per_year : float
        Mean true recharge over the complete water years.
    units_factor : float
        What the flow in m³/s was multiplied by when written.
    quickflow_days : float
        How long each storm's quickflow lasts (days).
    """

    family: str
    seed: int
    gauge_id: str
    area_km2: float
    flow: pd.Series
    flagged: pd.Series | None
    recession_index_days: float
    half_width_m: float
    storage_coefficient: float
    transmissivity_m2_per_day: float
    recharge: pd.Series
    groundwater_mm: np.ndarray = field(repr=False)
    quickflow_mm: np.ndarray = field(repr=False)
    truth_annual: pd.DataFrame = field(repr=False)
    recharge_mm_per_year: float = np.nan
    units_factor: float = 1.0
    quickflow_days: float = np.nan

    @property
    def complete_years(self) -> int:
        return int(self.truth_annual["complete"].sum())

    def record(self):
        """The gauge as the pipeline's :class:`GaugeRecord` (flags in its ``flagged``)."""
        from recharge_atlas.algorithms.discharge import GaugeRecord

        return GaugeRecord(self.gauge_id, self.flow, flagged=self.flagged)


# --------------------------------------------------------------------------- weather


def _winter(dates):
    """1 in mid-January, 0 in mid-July (invented climate)."""
    doy = np.asarray(dates.day_of_year, dtype=float)
    return 0.5 * (1.0 + np.cos(2.0 * np.pi * (doy - 20.0) / 365.25))


def _storm_days(rng, dates, storms):
    """Which days have a storm (bool array), by the family's storm pattern."""
    n = dates.size
    winter = _winter(dates)
    if storms == "seasonal":
        return rng.random(n) < 0.035 + 0.085 * winter  # about 28 storm days a year
    if storms == "small":
        return rng.random(n) < 0.35 + 0.25 * winter  # about 170 a year
    if storms == "pairs":
        wet = rng.random(n) < 0.025 + 0.05 * winter
        first = np.flatnonzero(wet & (rng.random(n) < 0.6))
        second = first + rng.integers(3, 9, first.size)
        wet[second[second < n]] = True
        return wet
    if storms == "clustered":
        # Two-state wet-spell model: a spell starts on a day with a chance that peaks in
        # winter, then storm days come 2-6 days apart for 3-8 weeks. A few storms fall outside.
        wet = rng.random(n) < 0.012 + 0.012 * winter
        start_chance = 0.025 * winter**2
        day = 0
        while day < n:
            if rng.random() < start_chance[day]:
                end = min(day + int(rng.integers(21, 57)), n)
                while day < end:
                    wet[day] = True
                    day += int(rng.integers(2, 7))
            day += 1
        return wet
    raise ValueError(f"unknown storm pattern {storms!r}")


def _rain(rng, dates, storms):
    """Storm rain (mm/day), with a factor per water year for wet and dry years."""
    wet = _storm_days(rng, dates, storms)
    if storms == "small":
        depth = rng.gamma(3.0, 2.0, dates.size)  # mean 6 mm
    else:
        depth = rng.gamma(1.2, 22.0, dates.size)  # mean 26 mm
    wy = np.asarray(water_year_of(dates, WATER_YEAR_START))
    years, index = np.unique(wy, return_inverse=True)
    year_factor = rng.lognormal(0.0, 0.25, years.size)[index]
    return np.where(wet, depth * year_factor, 0.0)


def recharge_and_quickflow(rain, dates, threshold=6.0):
    """Recharge and quickflow depths (mm) of each day's rain; see the module notes.

    Recharge grows with season and antecedent wetness, linearly beyond a threshold (6 mm);
    quickflow grows as rain^1.5 and with wetness squared, so the two are not proportional from
    storm to storm.
    """
    from scipy.signal import lfilter

    # Antecedent rain index: rain before the day, decaying by 7 % a day.
    api = lfilter([0.0, 1.0], [1.0, -0.93], rain)
    wetness = api / (api + 40.0)
    efficiency = (0.08 + 0.42 * _winter(dates)) * (0.35 + 0.65 * wetness)
    recharge = efficiency * np.clip(rain - threshold, 0.0, None)
    quick = 0.022 * rain**1.5 * (0.3 + 0.7 * wetness**2)
    return recharge, quick


def groundwater_flow(recharge_mm, recession_index_days):
    """Daily groundwater flow (mm/day) from daily recharge pulses (mm) arriving at noon.

    The pulses convolved with the strip aquifer's daily-mean response (Rorabaugh 1960;
    Glover 1964), truncated after 20 K days (where it is below 10^-20 of its peak).
    """
    recharge_mm = np.asarray(recharge_mm, dtype=float)
    return _convolve(recharge_mm, _gw_kernel(recession_index_days, recharge_mm.size))


def quickflow_kernel(duration_days, slow_tail=False, steps=48):
    """Daily shares of one storm's quickflow arriving at noon and ending ``duration_days`` later.

    The plain shape is ``(1 − t/D)²``; with ``slow_tail`` it is ``1 − t/D``, which recedes
    slowly (a quarter of the storm's quickflow comes after ``D/2``, against an eighth).
    """
    days = int(np.ceil(duration_days + 0.5)) + 1
    t = (np.arange(days * steps) + 0.5) / steps - 0.5
    u = np.clip(t / duration_days, 0.0, 1.0)
    shape = (1.0 - u) if slow_tail else (1.0 - u) ** 2
    daily = np.where(t >= 0, shape, 0.0).reshape(days, steps).mean(axis=1)
    return daily / daily.sum()


# --------------------------------------------------------------------------- gauges


def _aquifer(rng, k_range):
    """Strip half-width a, S and T giving a K drawn uniformly from ``k_range``."""
    from recharge_atlas.algorithms.analytic import STRIP_FACTOR, strip_aquifer_recession_index

    k = rng.uniform(*k_range)
    a = rng.uniform(400.0, 2000.0)
    s = rng.uniform(0.005, 0.03)
    t = STRIP_FACTOR * a**2 * s / k
    return a, s, t, float(strip_aquifer_recession_index(a, s, t))


def _ice(rng, flow, dates):
    """Winter gaps of 30–70 days in about half the years: flagged (the values read under ice
    are 30–80 % of the flow) or missing. Returns the new flow and the flags."""
    flow = flow.copy()
    flagged = np.zeros(flow.size, dtype=bool)
    for year in np.unique(dates.year)[1:]:
        if rng.random() >= 0.5:
            continue
        first = pd.Timestamp(year - 1, 12, 1) + pd.Timedelta(days=int(rng.integers(0, 60)))
        start = int(dates.searchsorted(first))
        stop = min(start + int(rng.integers(30, 71)), flow.size)
        if rng.random() < 0.5:
            flagged[start:stop] = True
            flow[start:stop] *= rng.uniform(0.3, 0.8)
        else:
            flow[start:stop] = np.nan
    return flow, flagged


def truth_by_water_year(dates, recharge_mm, flow, flagged=None, start_month=WATER_YEAR_START):
    """Per water year: days, missing, zero and flagged days, completeness and true recharge.

    A year is complete when it lies wholly in the record and at most 2 % of its days are
    missing, zero or flagged (:data:`MAX_UNUSABLE_SHARE`).
    """
    flow = np.asarray(flow, dtype=float)
    missing = ~np.isfinite(flow)
    zero = ~missing & (flow <= 0.0)
    flags = np.zeros(flow.size, bool) if flagged is None else np.asarray(flagged, bool)
    frame = pd.DataFrame(
        {
            "water_year": np.asarray(water_year_of(dates, start_month)),
            "days": 1,
            "missing": missing,
            "zero": zero,
            "flagged": flags & ~missing,
            "unusable": missing | zero | flags,
            "recharge_mm": np.asarray(recharge_mm, dtype=float),
        }
    )
    table = frame.groupby("water_year", as_index=False).sum()
    # A water year is named by the calendar year in which it ends.
    began = table["water_year"] - (1 if start_month > 1 else 0)
    year_start = pd.to_datetime({"year": began, "month": start_month, "day": 1})
    year_end = year_start + pd.DateOffset(years=1) - pd.Timedelta(days=1)
    whole = (year_start >= pd.Timestamp(dates[0])) & (year_end <= pd.Timestamp(dates[-1]))
    table["complete"] = whole & (table["unusable"] <= MAX_UNUSABLE_SHARE * table["days"])
    return table


def _prefix(name):
    """Gauge id prefix: the initials of the family's words (well_behaved: WB)."""
    return "".join(word[0] for word in name.split("_")).upper()


def make_family(name, seed, years=28, n_gauges=4, start="1991-10-01", spin_up_years=3):
    """Invented gauges of one family with their truth.

    Parameters
    ----------
    name : str
        A key of :data:`FAMILIES`.
    seed : int
        The same name and seed give the same gauges.
    years : int
        Whole water years of record.
    n_gauges : int
        Gauges per family and seed; areas 20–1,200 km² (log-uniform), K from the family's range.
    start : str
        First day of the record (the first day of a water year keeps years whole).
    spin_up_years : int
        Years simulated before the record so the aquifer starts in a realistic state.

    Returns
    -------
    list of SyntheticGauge
    """
    if name not in FAMILIES:
        raise ValueError(f"unknown family {name!r}; families: {', '.join(FAMILIES)}")
    family = FAMILIES[name]
    rng = np.random.default_rng([int(seed), zlib.crc32(name.encode())])
    first = pd.Timestamp(start)
    dates_all = pd.date_range(
        first - pd.DateOffset(years=spin_up_years),
        first + pd.DateOffset(years=years) - pd.Timedelta(days=1),
        freq="D",
    )
    keep = slice(int(dates_all.searchsorted(first)), None)
    dates = dates_all[keep]
    gauges = []
    for i in range(n_gauges):
        area = float(np.exp(rng.uniform(np.log(20.0), np.log(1200.0))))
        a, s, t, k = _aquifer(rng, family.k_range)
        rain = _rain(rng, dates_all, family.storms)
        recharge, quick = recharge_and_quickflow(rain, dates_all, family.threshold)
        lag = (area / SQUARE_MILE_KM2) ** 0.2
        duration = rng.uniform(*family.runoff_lags) * lag
        gw = groundwater_flow(recharge, k)[keep]
        kernel = quickflow_kernel(duration, family.slow_tail)
        qf = _convolve(quick * family.quick_scale, kernel)[keep]
        mm_per_day = gw + qf
        if family.loss:
            # A steady channel loss, the flow's 5th percentile: the stream dries in dry spells.
            mm_per_day = np.clip(mm_per_day - np.quantile(mm_per_day, 0.05), 0.0, None)
        flow = mm_per_day * area * 1e3 / 86400.0 * rng.lognormal(0.0, family.noise, dates.size)
        flow = _round_significant(flow, 3)
        flagged = None
        if family.ice:
            flow, flagged = _ice(rng, flow, dates)
        truth = truth_by_water_year(dates, recharge[keep], flow, flagged)
        complete = truth["complete"].to_numpy()
        gauges.append(
            SyntheticGauge(
                family=name,
                seed=int(seed),
                gauge_id=f"{_prefix(name)}{seed:03d}{i + 1:02d}",
                area_km2=area,
                flow=pd.Series(flow * family.units_factor, index=dates, name="discharge"),
                flagged=None if flagged is None else pd.Series(flagged, index=dates),
                recession_index_days=k,
                half_width_m=a,
                storage_coefficient=s,
                transmissivity_m2_per_day=t,
                recharge=pd.Series(recharge[keep], index=dates, name="recharge_mm"),
                groundwater_mm=gw,
                quickflow_mm=qf,
                truth_annual=truth,
                recharge_mm_per_year=(
                    float(truth.loc[complete, "recharge_mm"].mean()) if complete.any() else np.nan
                ),
                units_factor=family.units_factor,
                quickflow_days=duration,
            )
        )
    return gauges


# --------------------------------------------------------------------------- scoring


def run_gauge(gauge: SyntheticGauge, settings=None):
    """The pipeline's per-gauge hydrology on one synthetic gauge, with the record's own notes
    leading its quality as in a full run (``run_atlas``)."""
    from recharge_atlas.algorithms.pipeline import Settings, gauge_hydrology, record_notes

    record = gauge.record()
    result = gauge_hydrology(record, gauge.area_km2, settings or Settings())
    result.quality[:0] = record_notes(record)
    return result


def score_gauge(gauge: SyntheticGauge, result) -> dict:
    """One gauge's result against its truth.

    Returns a dict with the estimate and truth of mean annual recharge (mm/yr) and K (days),
    their relative errors, the band ``[low, high]``, whether the truth lies in it
    (``truth_in_band``) and whether it contains the estimate (``estimate_in_band``), the quality
    text, ``ok``, and ``off_and_ok``: an error over 15 % (:data:`OFF`) in recharge or K while the
    quality says ``ok``. A missing estimate counts as off.
    """
    recharge, truth = result.recharge_mm_per_year, gauge.recharge_mm_per_year
    k = result.recession.days if result.recession is not None else np.nan
    low, high = result.recharge_mm_per_year_low, result.recharge_mm_per_year_high
    recharge_error = recharge / truth - 1.0
    k_error = k / gauge.recession_index_days - 1.0
    ok = result.quality_text == "ok"
    off = not (abs(recharge_error) <= OFF and abs(k_error) <= OFF)  # NaN counts as off
    return {
        "family": gauge.family,
        "seed": gauge.seed,
        "gauge_id": gauge.gauge_id,
        "area_km2": gauge.area_km2,
        "complete_years": result.complete_years,
        "true_complete_years": gauge.complete_years,
        "recharge_mm": recharge,
        "true_recharge_mm": truth,
        "recharge_error": recharge_error,
        "k_days": k,
        "true_k_days": gauge.recession_index_days,
        "k_error": k_error,
        "low_mm": low,
        "high_mm": high,
        "truth_in_band": bool(low <= truth <= high),
        "estimate_in_band": bool(low <= recharge <= high),
        "quality": result.quality_text,
        "ok": ok,
        "off_and_ok": bool(off and ok),
    }


def score_family(rows) -> dict:
    """Sum up scored gauges (dicts from :func:`score_gauge`, or a DataFrame of them).

    Returns ``gauges``, ``ok`` (how many say ok), ``off_and_ok``, the worst absolute recharge
    and K errors (over all gauges, and over the ``ok`` ones), ``coverage`` (share of gauges
    whose truth lies in the band) and ``coverage_ok`` (the same over the ``ok`` gauges, whose
    band claims 90 %) and ``band_holds_estimate`` (share whose
    band contains the estimate; must be 100 %).
    """
    table = pd.DataFrame(rows)
    ok = table[table["ok"]]

    def worst(frame, column):
        values = frame[column].abs()
        return float(values.max()) if len(values) and values.notna().any() else np.nan

    return {
        "gauges": len(table),
        "ok": int(table["ok"].sum()),
        "off_and_ok": int(table["off_and_ok"].sum()),
        "worst_recharge_error": worst(table, "recharge_error"),
        "worst_k_error": worst(table, "k_error"),
        "worst_ok_recharge_error": worst(ok, "recharge_error"),
        "worst_ok_k_error": worst(ok, "k_error"),
        "coverage": float(table["truth_in_band"].mean()),
        "coverage_ok": float(ok["truth_in_band"].mean()) if len(ok) else np.nan,
        "band_holds_estimate": float(table["estimate_in_band"].mean()),
    }
