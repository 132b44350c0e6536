"""The analytic stream–aquifer response used as synthetic truth.

An ideal strip aquifer of width ``a`` (stream to divide), storage coefficient ``S`` and
transmissivity ``T`` drains to a fully penetrating stream. After an instantaneous, uniform
recharge of depth ``R`` at time 0 the groundwater discharge per unit aquifer area is
(Rorabaugh 1960, eq. for a recharge pulse; Glover 1964)::

    q(t) = R · (8 α / π²) · Σ_{n = 1, 3, 5, …} exp(−n² α t),   α = π² T / (4 a² S)

Its integral over all time is ``R`` (all recharge returns to the stream). At late time only the
first term matters, so log10 q falls one cycle in ``ln 10 / α = (4 ln 10 / π²) a²S/T ≈ 0.933
a²S/T`` days: the recession index ``K``.

References
----------
Rorabaugh, M.I. (1960). Use of water levels in estimating aquifer constants in a finite
aquifer. IASH Publication 52, 314–323.
Glover, R.E. (1964). Ground-water movement. US Bureau of Reclamation Engineering Monograph 31.
"""

from __future__ import annotations

import numpy as np

LN10 = float(np.log(10.0))
#: 4 ln 10 / π², the factor in K = 0.933 a²S/T (Rorabaugh 1960).
STRIP_FACTOR = 4.0 * LN10 / np.pi**2


def strip_aquifer_recession_index(half_width_m, storage_coefficient, transmissivity_m2_per_day):
    """Recession index K (days per log cycle) of an ideal strip aquifer.

    Notes
    -----
    ``K = 0.933 a² S / T`` (Rorabaugh 1960; Glover 1964), with ``0.933 = 4 ln 10 / π²``.

    Examples
    --------
    >>> round(strip_aquifer_recession_index(1000.0, 0.01, 200.0), 2)
    46.66
    """
    a = np.asarray(half_width_m, dtype=float)
    return (
        STRIP_FACTOR
        * a**2
        * np.asarray(storage_coefficient, float)
        / np.asarray(transmissivity_m2_per_day, float)
    )


def _series_terms(alpha, max_terms):
    n = np.arange(1, 2 * max_terms, 2, dtype=float)
    return n, n**2 * alpha


def strip_aquifer_discharge(t_days, recession_index_days, max_terms=2000):
    """Instantaneous groundwater discharge per unit recharge depth, per day, at ``t_days``.

    ``q(t)/R = (8 α/π²) Σ_{n odd} exp(−n² α t)`` with ``α = ln 10 / K``. Zero before ``t = 0``.
    """
    t = np.atleast_1d(np.asarray(t_days, dtype=float))
    alpha = LN10 / float(recession_index_days)
    _, rates = _series_terms(alpha, max_terms)
    out = np.zeros_like(t)
    after = t > 0
    out[after] = (8.0 * alpha / np.pi**2) * np.exp(-np.outer(t[after], rates)).sum(axis=1)
    return out


def strip_aquifer_daily_response(recession_index_days, n_days, pulse_time=0.5, max_terms=4000):
    """Daily mean groundwater discharge (per unit recharge depth) after one pulse.

    The pulse arrives at ``pulse_time`` (a fraction of day 0; 0.5 is noon). Element ``j`` is the
    mean over day ``j`` of ``q(t)/R``, integrated exactly term by term::

        (8/π²) Σ_{n odd} (1/n²) [exp(−n²α t0) − exp(−n²α t1)],  t0, t1 = day bounds after the pulse

    so the elements sum to 1 as ``n_days`` grows (mass is conserved).
    """
    alpha = LN10 / float(recession_index_days)
    n, rates = _series_terms(alpha, max_terms)
    starts = np.clip(np.arange(n_days, dtype=float) - pulse_time, 0.0, None)
    ends = np.arange(1, n_days + 1, dtype=float) - pulse_time
    weights = (8.0 / np.pi**2) / n**2
    kernel = np.empty(n_days)
    # Late days need only the first few terms; do the sum in blocks to bound memory.
    for lo in range(0, n_days, 512):
        hi = min(lo + 512, n_days)
        kernel[lo:hi] = (
            weights
            * (np.exp(-np.outer(starts[lo:hi], rates)) - np.exp(-np.outer(ends[lo:hi], rates)))
        ).sum(axis=1)
    # Truncating the series at max_terms drops (8/π²) Σ_{n > N} 1/n² of the first day's mass;
    # put it back on day 0, where the high terms live.
    kernel[0] += (8.0 / np.pi**2) * (1.0 / (2.0 * n[-1]))
    return kernel
