"""Baseflow separation: the Eckhardt and Lyne–Hollick filters and the smoothed-minima method.

All three split daily flow into baseflow and quickflow. The linear recursions run through
``scipy.signal.lfilter``; the physical limit (0 ≤ baseflow ≤ flow) is applied inside the
recursion, restarting the filter only where the limit binds. Records are filtered block by block
between gaps; missing days stay missing.

References
----------
Eckhardt, K. (2005). How to construct recursive digital filters for baseflow separation.
Hydrological Processes 19, 507–515.
Lyne, V. & Hollick, M. (1979). Stochastic time-variable rainfall-runoff modelling. Institution
of Engineers Australia National Conference, Perth, 89–93.
Nathan, R.J. & McMahon, T.A. (1990). Evaluation of automated techniques for base flow and
recession analyses. Water Resources Research 26(7), 1465–1473.
Institute of Hydrology (1980). Low Flow Studies, Report No. 1. Wallingford, UK.
"""

from __future__ import annotations

import numpy as np
from scipy.signal import lfilter

#: Typical BFImax for the Eckhardt filter (Eckhardt 2005, from his comparison with
#: graphical separations; values quoted from memory of that paper's recommendations).
BFIMAX_TYPICAL = {
    "perennial stream, porous aquifer": 0.80,
    "ephemeral stream, porous aquifer": 0.50,
    "perennial stream, hard-rock aquifer": 0.25,
}
#: Default filter parameter of Lyne–Hollick (Nathan & McMahon 1990).
LYNE_HOLLICK_ALPHA = 0.925
#: Block length (days) of the smoothed-minima method (Institute of Hydrology 1980).
MINIMA_BLOCK_DAYS = 5
#: Turning-point factor of the smoothed-minima method (Institute of Hydrology 1980).
MINIMA_TURNING_FACTOR = 0.9

METHODS = ("eckhardt", "lyne_hollick", "smoothed_minima")


def recession_constant(recession_index_days):
    """Daily recession constant a = 10^(−1/K): the ratio of one day's baseflow to the day before."""
    return 10.0 ** (-1.0 / float(recession_index_days))


def baseflow_index(flow, baseflow):
    """Baseflow index: Σ baseflow / Σ flow over the days where both are known."""
    q = np.asarray(flow, dtype=float)
    b = np.asarray(baseflow, dtype=float)
    ok = np.isfinite(q) & np.isfinite(b)
    total = q[ok].sum()
    return float(b[ok].sum() / total) if total > 0 else np.nan


def _gap_blocks(q):
    valid = np.isfinite(q)
    padded = np.concatenate([[False], valid, [False]])
    change = np.flatnonzero(np.diff(padded.astype(np.int8)))
    return zip(change[::2], change[1::2])


def _by_block(q, one_block):
    q = np.asarray(q, dtype=float)
    out = np.full(q.shape, np.nan)
    for start, end in _gap_blocks(q):
        out[start:end] = one_block(q[start:end])
    return out


def _bounded_recursion(a, u, y_first, bound, upper=True):
    """y_t = a y_{t−1} + u_t, held at or below (``upper``) or at or above ``bound[t]``.

    Solved without a loop over days. For 0 < a < 1 the step y ↦ a y + u is increasing, so it
    distributes over min (max), and unrolling the bounded recursion gives::

        y_t = W_t + min(0, min_{s ≤ t} a^{t−s} (bound_s − W_s))        (upper bound)

    where W is the unbounded recursion from ``y_first`` (``scipy.signal.lfilter``): the bound
    either never bit, or last bit on day s and the recursion ran free from there. The running
    minimum is taken in chunks short enough that a^−s stays finite.
    """
    n = u.size
    y = np.empty(n)
    y[0] = y_first
    if n == 1:
        return y
    pick = np.minimum if upper else np.maximum
    chunk = min(n - 1, max(1, int(np.floor(600.0 / max(-np.log(a), 1e-12)))))
    # a^s and a^−s for s = 0 … chunk − 1, by running products (exact to ~chunk × 1e-16).
    grow = np.cumprod(np.concatenate(([1.0], np.full(chunk - 1, 1.0 / a))))
    shrink = np.cumprod(np.concatenate(([1.0], np.full(chunk - 1, a))))
    i = 1
    while i < n:
        j = min(n, i + chunk)
        m = j - i
        free, _ = lfilter([1.0], [1.0, -a], u[i:j], zi=[a * y[i - 1]])
        running = pick.accumulate((bound[i:j] - free) * grow[:m])
        y[i:j] = free + pick(0.0, running * shrink[:m])
        i = j
    return y


def eckhardt(flow, recession_index_days, bfi_max=0.80):
    """Eckhardt (2005) two-parameter recursive filter.

    Notes
    -----
    ``b_t = [(1 − BFImax) a b_{t−1} + (1 − a) BFImax Q_t] / (1 − a BFImax)`` with ``b_t ≤ Q_t``,
    and ``a = 10^(−1/K)`` from the recession index. The filter starts from the lowest flow of
    the first five days.

    Examples
    --------
    >>> q = np.r_[np.full(5, 1.0), 10.0, 5.0, 2.0, 1.5, 1.2]
    >>> b = eckhardt(q, 45.0)
    >>> bool(np.all(b <= q))
    True
    """
    if not 0.0 < bfi_max < 1.0:
        raise ValueError(f"bfi_max was {bfi_max!r}; expected a number between 0 and 1")
    a = recession_constant(recession_index_days)
    c1 = (1.0 - bfi_max) * a / (1.0 - a * bfi_max)
    c0 = (1.0 - a) * bfi_max / (1.0 - a * bfi_max)

    def one(q):
        return _bounded_recursion(c1, c0 * q, _starting_baseflow(q), q, upper=True)

    return _by_block(flow, one)


#: The filters start from the lowest flow of the first days (our own rule): a record that
#: begins during a storm would otherwise start with all of the storm counted as baseflow.
START_DAYS = 5


def _starting_baseflow(q):
    return float(np.min(q[:START_DAYS]))


def _lyne_hollick_pass(q, alpha):
    """One pass: quickflow f_t = α f_{t−1} + (1+α)/2 (Q_t − Q_{t−1}), kept within [0, Q_t]."""
    n = q.size
    if n < 2:
        return q.copy()
    dq = np.concatenate(([0.0], np.diff(q)))
    f_first = q[0] - _starting_baseflow(q)
    # Lower limit f ≥ 0 (baseflow ≤ flow) inside the recursion.
    f = _bounded_recursion(alpha, (1.0 + alpha) / 2.0 * dq, f_first, np.zeros(n), upper=False)
    # Upper limit f ≤ Q (baseflow ≥ 0) rarely binds; clip it where it does.
    f = np.minimum(f, q)
    return q - f


def lyne_hollick(flow, alpha=LYNE_HOLLICK_ALPHA, passes=3):
    """Lyne & Hollick (1979) filter, run forward, backward, forward (Nathan & McMahon 1990).

    Notes
    -----
    Each pass: ``f_t = α f_{t−1} + (1 + α)/2 (Q_t − Q_{t−1})``, baseflow ``b_t = Q_t − f_t`` with
    ``0 ≤ b_t ≤ Q_t``; the next pass filters the previous pass's baseflow in the other direction.
    Each pass starts with its quickflow at the first day's flow minus the lowest flow of the
    first five days.
    """

    def one(q):
        b = q.copy()
        for k in range(int(passes)):
            if k % 2 == 0:
                b = _lyne_hollick_pass(b, alpha)
            else:
                b = _lyne_hollick_pass(b[::-1], alpha)[::-1]
        return b

    return _by_block(flow, one)


def smoothed_minima(flow, block_days=MINIMA_BLOCK_DAYS, turning_factor=MINIMA_TURNING_FACTOR):
    """Smoothed minima on fixed blocks (Institute of Hydrology 1980).

    Notes
    -----
    The record is cut into consecutive ``block_days``-day blocks and the minimum of each is
    found. A block minimum is a turning point when ``turning_factor`` times it is no larger than
    the minima of both neighbouring blocks. Baseflow is the straight line between turning points
    (day of each minimum), never above the flow. Blocks with a missing day are left out; there is
    no baseflow before the first or after the last turning point, nor on missing days.
    """
    q = np.asarray(flow, dtype=float)
    n = q.size
    out = np.full(n, np.nan)
    n_blocks = n // block_days
    if n_blocks < 3:
        return out
    blocks = q[: n_blocks * block_days].reshape(n_blocks, block_days)
    complete = np.isfinite(blocks).all(axis=1)
    safe = np.where(np.isfinite(blocks), blocks, np.inf)
    where = safe.argmin(axis=1)
    minima = np.where(complete, safe[np.arange(n_blocks), where], np.nan)
    day = np.arange(n_blocks) * block_days + where
    left, mid, right = minima[:-2], minima[1:-1], minima[2:]
    with np.errstate(invalid="ignore"):
        turning = (turning_factor * mid <= left) & (turning_factor * mid <= right)
    turning = np.concatenate(([False], turning & np.isfinite(left) & np.isfinite(right), [False]))
    t_days, t_values = day[turning], minima[turning]
    if t_days.size < 2:
        return out
    span = np.arange(t_days[0], t_days[-1] + 1)
    line = np.interp(span, t_days, t_values)
    out[span] = np.minimum(line, q[span])
    return out


def separate_baseflow(
    flow, method="eckhardt", recession_index_days=None, bfi_max=0.80, alpha=LYNE_HOLLICK_ALPHA
):
    """Daily baseflow by one of :data:`METHODS`.

    ``recession_index_days`` is needed for ``eckhardt`` (its recession constant comes from K).
    """
    if method == "eckhardt":
        if recession_index_days is None or not np.isfinite(recession_index_days):
            raise ValueError("the Eckhardt filter needs a recession index")
        return eckhardt(flow, recession_index_days, bfi_max)
    if method == "lyne_hollick":
        return lyne_hollick(flow, alpha)
    if method == "smoothed_minima":
        return smoothed_minima(flow)
    raise ValueError(f"method was {method!r}; expected one of {list(METHODS)}")
