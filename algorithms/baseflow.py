"""Baseflow separation: the Eckhardt and Lyne–Hollick filters and the smoothed-minima method.

All three split daily flow into baseflow and quickflow. The linear recursions run through
``scipy.signal.lfilter``; the physical limit (0 ≤ baseflow ≤ flow) is applied inside the
recursion, restarting the filter only where the limit binds. Each gap-free block of a record
is filtered on its own (missing days stay missing); blocks of like length are filtered together
as the rows of one matrix, with the same arithmetic as alone, so gaps cost no Python loop.

Restart after a gap: a filter carries nothing across a day without a value. The block after
the gap starts afresh, as a record of its own would (the recursive filters from the lowest flow
of its first five days), so the values before the gap and the length of the gap do not touch
the baseflow after it, and the gap's days get no baseflow. The pipeline hands the filters the
flow with flagged days (ice, a quality code) set to missing, so a flagged stretch is such a gap:
its values never influence the baseflow of any other day. Zero flow is a real flow and stays
in (baseflow zero).

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

import functools

import numpy as np
from scipy.signal import lfilter

from .rises import gap_free_blocks

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


class _BlockRows:
    """Gap-free blocks of like length as the rows of one matrix (see :func:`_block_rows`);
    ``inside`` is None when every row is whole (a class of one block)."""

    def __init__(self, index, inside, span=None):
        self.index, self.inside, self.span = index, inside, span

    def take(self, values):
        """The blocks' values as rows (padding repeats a real value that nothing uses)."""
        if self.span is not None:  # one block: a view, no copy
            start, stop, step = self.span
            return values[start:stop:step][None, :]
        return values[self.index]

    def put(self, out, rows):
        """Write the rows' days back into the record ``out``."""
        if self.span is not None:
            start, stop, step = self.span
            out[start:stop:step] = rows[0]
        else:
            out[self.index[self.inside]] = rows[self.inside]


def _one_block(start, end, reverse):
    span = (end - 1, start - 1 if start else None, -1) if reverse else (start, end, 1)
    return _BlockRows(None, None, span)


def _block_rows(valid, reverse=False):
    """The gap-free blocks of a record as rows of matrices, blocks of like length together.

    Yields one :class:`_BlockRows` per length class: row ``r`` holds block ``r``'s days in
    order (from its last day back when ``reverse``), and ``inside`` marks the days the block
    has. Blocks whose lengths share a power of two go together, so padding at most doubles the
    work, and a record with hundreds of gaps takes a dozen array passes instead of hundreds.
    """
    starts, ends = gap_free_blocks(valid)
    if starts.size == 1:  # a record without gaps
        yield _one_block(int(starts[0]), int(ends[0]), reverse)
        return
    lengths = ends - starts
    _, classes = np.frexp(lengths)
    for c in np.unique(classes):
        rows = np.flatnonzero(classes == c)
        n = lengths[rows]
        if rows.size == 1:
            yield _one_block(int(starts[rows[0]]), int(ends[rows[0]]), reverse)
            continue
        day = np.arange(int(n.max()))
        inside = day[None, :] < n[:, None]
        first = (ends[rows] - 1 if reverse else starts[rows])[:, None]
        index = first - day[None, :] if reverse else first + day[None, :]
        yield _BlockRows(np.where(inside, index, first), inside)


def _starting_rows(rows, inside):
    """The lowest flow of the first :data:`START_DAYS` days of each row's block."""
    head = rows[:, :START_DAYS]
    if inside is None:
        return head.min(axis=1)
    return np.where(inside[:, :START_DAYS], head, np.inf).min(axis=1)


def _bounded_recursion(a, u, y_first, bound, upper=True):
    """y_t = a y_{t−1} + u_t, held at or below (``upper``) or at or above ``bound[t]``.

    Solved without a loop over days. For 0 < a < 1 the step y ↦ a y + u is increasing, so it
    distributes over min (max), and unrolling the bounded recursion gives::

        y_t = W_t + min(0, min_{s ≤ t} a^{t−s} (bound_s − W_s))        (upper bound)

    where W is the unbounded recursion from ``y_first`` (``scipy.signal.lfilter``): the bound
    either never bit, or last bit on day s and the recursion ran free from there. The running
    minimum is taken in chunks short enough that a^−s stays finite.

    ``u`` and ``bound`` may be 2-D: each row is then a recursion of its own (``y_first`` one
    value per row), worked out with exactly the arithmetic of a row given alone.
    """
    u = np.asarray(u, dtype=float)
    bound = np.asarray(bound, dtype=float)
    rows = u if u.ndim == 2 else u[None, :]
    limits = bound if bound.ndim == 2 else bound[None, :]
    n = rows.shape[1]
    y = np.empty(rows.shape)
    y[:, 0] = y_first
    if n > 1:
        pick = np.minimum if upper else np.maximum
        longest = max(1, int(np.floor(600.0 / max(-np.log(a), 1e-12))))
        chunk = min(n - 1, longest)
        # a^s and a^−s for s = 0 … chunk − 1 (a power of two of them at least, shared by the
        # calls of one filter: the first values of a running product do not depend on its length).
        grow, shrink = _powers(a, min(longest, 1 << (chunk - 1).bit_length()))
        i = 1
        while i < n:
            j = min(n, i + chunk)
            m = j - i
            free, _ = lfilter([1.0], [1.0, -a], rows[:, i:j], axis=1, zi=a * y[:, i - 1 : i])
            running = pick.accumulate((limits[:, i:j] - free) * grow[:m], axis=1)
            y[:, i:j] = free + pick(0.0, running * shrink[:m])
            i = j
    return y if u.ndim == 2 else y[0]


@functools.lru_cache(maxsize=16)
def _powers(a, length):
    """a^s and a^−s for s = 0 … length − 1, by running products (exact to ~length × 1e-16;
    read-only, kept: a filter's blocks all use the same ``a``)."""
    grow = np.cumprod(np.concatenate(([1.0], np.full(length - 1, 1.0 / a))))
    shrink = np.cumprod(np.concatenate(([1.0], np.full(length - 1, a))))
    grow.setflags(write=False)
    shrink.setflags(write=False)
    return grow, shrink


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

    q = np.asarray(flow, dtype=float)
    out = np.full(q.shape, np.nan)
    for blocks in _block_rows(np.isfinite(q)):
        rows = blocks.take(q)
        first = _starting_rows(rows, blocks.inside)
        blocks.put(out, _bounded_recursion(c1, c0 * rows, first, rows, upper=True))
    return out


#: The filters start from the lowest flow of the first days (our own rule): a record that
#: begins during a storm would otherwise start with all of the storm counted as baseflow.
START_DAYS = 5


def _lyne_hollick_pass(rows, inside, alpha):
    """One pass on each row: quickflow f_t = α f_{t−1} + (1+α)/2 (Q_t − Q_{t−1}), kept within
    [0, Q_t]; returns the baseflow Q − f."""
    if rows.shape[1] < 2:
        return rows.copy()
    dq = np.zeros(rows.shape)
    dq[:, 1:] = np.diff(rows, axis=1)
    f_first = rows[:, 0] - _starting_rows(rows, inside)
    # Lower limit f ≥ 0 (baseflow ≤ flow) inside the recursion.
    zeros = np.zeros(rows.shape)
    f = _bounded_recursion(alpha, (1.0 + alpha) / 2.0 * dq, f_first, zeros, upper=False)
    # Upper limit f ≤ Q (baseflow ≥ 0) rarely binds; clip it where it does.
    f = np.minimum(f, rows)
    return rows - f


def lyne_hollick(flow, alpha=LYNE_HOLLICK_ALPHA, passes=3):
    """Lyne & Hollick (1979) filter, run forward, backward, forward (Nathan & McMahon 1990).

    Notes
    -----
    Each pass: ``f_t = α f_{t−1} + (1 + α)/2 (Q_t − Q_{t−1})``, baseflow ``b_t = Q_t − f_t`` with
    ``0 ≤ b_t ≤ Q_t``; the next pass filters the previous pass's baseflow in the other direction.
    Each pass starts with its quickflow at the first day's flow minus the lowest flow of the
    first five days.
    """
    q = np.asarray(flow, dtype=float)
    valid = np.isfinite(q)
    b = np.where(valid, q, np.nan)
    for k in range(int(passes)):
        after = np.full(q.shape, np.nan)
        for blocks in _block_rows(valid, reverse=k % 2 == 1):
            blocks.put(after, _lyne_hollick_pass(blocks.take(b), blocks.inside, alpha))
        b = after
    return b


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
    finite = np.isfinite(blocks)
    where = np.where(finite, blocks, np.inf).argmin(axis=1)
    minima = blocks[np.arange(n_blocks), where]
    if not finite.all():
        minima = np.where(finite.all(axis=1), minima, np.nan)
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
