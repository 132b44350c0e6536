"""Baseflow filters checked against their published recursions and scipy.signal.lfilter.

Sources: Eckhardt (2005), Lyne & Hollick (1979) with three passes (Nathan & McMahon 1990),
Institute of Hydrology (1980) smoothed minima. Each constrained filter is also compared with a
plain day-by-day loop written straight from the published equation.
"""

import numpy as np
import pytest
from scipy.signal import lfilter

from recharge_atlas.algorithms.baseflow import (
    BFIMAX_TYPICAL,
    baseflow_index,
    eckhardt,
    lyne_hollick,
    recession_constant,
    separate_baseflow,
    smoothed_minima,
)


def _flashy(n=800, seed=4):
    rng = np.random.default_rng(seed)
    q = np.empty(n)
    level = 1.0
    for i in range(n):
        if rng.random() < 0.06:
            level += rng.gamma(1.0, 5.0)
        level = 0.3 + (level - 0.3) * 0.8
        q[i] = level + 0.5 * 10 ** (-i / 200)
    return q * rng.lognormal(0, 0.03, n)


def _eckhardt_loop(q, k, bfi_max):
    a = 10 ** (-1 / k)
    b = np.empty_like(q)
    b[0] = q[:5].min()  # the filters start from the lowest flow of the first five days
    for t in range(1, q.size):
        value = ((1 - bfi_max) * a * b[t - 1] + (1 - a) * bfi_max * q[t]) / (1 - a * bfi_max)
        b[t] = min(value, q[t])
    return b


def _lyne_hollick_loop(q, alpha, passes=3):
    def one_pass(x):
        f = x[0] - x[:5].min()
        out = np.empty_like(x)
        out[0] = x[0] - f
        for t in range(1, x.size):
            f = alpha * f + (1 + alpha) / 2 * (x[t] - x[t - 1])
            f = min(max(f, 0.0), x[t])
            out[t] = x[t] - f
        return out

    b = q.copy()
    for k in range(passes):
        b = one_pass(b) if k % 2 == 0 else one_pass(b[::-1])[::-1]
    return b


def test_recession_constant_from_k():
    assert recession_constant(45.0) == pytest.approx(10 ** (-1 / 45.0))
    assert recession_constant(1.0) == pytest.approx(0.1)


def test_eckhardt_linear_recursion_matches_lfilter():
    # Where b ≤ Q never binds, the filter is the linear recursion of Eckhardt (2005).
    k, bfi = 30.0, 0.8
    a = 10 ** (-1 / k)
    q = np.linspace(1.0, 20.0, 300)  # steadily rising flow: the limit never binds
    c0 = (1 - a) * bfi / (1 - a * bfi)
    c1 = (1 - bfi) * a / (1 - a * bfi)
    reference, _ = lfilter([c0], [1, -c1], q[1:], zi=[c1 * q[0]])
    out = eckhardt(q, k, bfi)
    np.testing.assert_allclose(out[1:], reference, rtol=1e-12)


@pytest.mark.parametrize("bfi", [0.25, 0.5, 0.8])
def test_eckhardt_with_its_limit_matches_the_published_loop(bfi):
    q = _flashy()
    np.testing.assert_allclose(eckhardt(q, 40.0, bfi), _eckhardt_loop(q, 40.0, bfi), rtol=1e-10)


def test_eckhardt_pure_recession_is_all_baseflow():
    k = 50.0
    q = 3.0 * 10 ** (-np.arange(400) / k)
    # b = Q is the filter's fixed point on a recession along K; the start (below it) dies away.
    np.testing.assert_allclose(eckhardt(q, k, 0.8)[150:], q[150:], rtol=1e-8)


def test_bfimax_typical_values_from_eckhardt_2005():
    # Eckhardt (2005): 0.80 perennial/porous, 0.50 ephemeral/porous, 0.25 perennial/hard rock
    # (values recalled from the paper's recommendations).
    assert sorted(BFIMAX_TYPICAL.values()) == [0.25, 0.5, 0.8]
    assert BFIMAX_TYPICAL["perennial stream, porous aquifer"] == 0.80


def test_lyne_hollick_single_pass_linear_part_matches_lfilter():
    alpha = 0.925
    q = np.linspace(1.0, 5.0, 100) ** 2  # rising: quickflow stays between 0 and Q
    dq = np.r_[0.0, np.diff(q)]
    f, _ = lfilter([(1 + alpha) / 2], [1, -alpha], dq[1:], zi=[0.0])
    out = lyne_hollick(q, alpha, passes=1)
    np.testing.assert_allclose(out[1:], q[1:] - f, rtol=1e-12)


def test_lyne_hollick_three_passes_match_the_published_loop():
    q = _flashy()
    np.testing.assert_allclose(
        lyne_hollick(q, 0.925, 3), _lyne_hollick_loop(q, 0.925, 3), rtol=1e-10
    )


def test_filters_stay_within_zero_and_flow_and_respect_gaps():
    q = _flashy()
    q[100:110] = np.nan
    for b in (eckhardt(q, 40.0), lyne_hollick(q), smoothed_minima(q)):
        ok = np.isfinite(b)
        assert np.all(b[ok] <= q[ok] + 1e-12) and np.all(b[ok] >= 0)
        assert np.isnan(b[100:110]).all()


@pytest.mark.parametrize("seed", range(8))
def test_a_record_with_many_gaps_gives_each_block_the_numbers_it_gets_alone(seed):
    """Gap-free blocks are filtered together, blocks of like length as rows of one matrix; each
    must come out exactly as when it is filtered on its own (and match the published loops)."""
    rng = np.random.default_rng(seed)
    q = _flashy(n=int(rng.integers(200, 2500)), seed=seed)
    for start in rng.integers(0, q.size, int(rng.integers(1, 80))):
        q[start : start + int(rng.integers(1, 9))] = np.nan
    k = float(rng.uniform(3.0, 300.0))
    padded = np.concatenate([[False], np.isfinite(q), [False]])
    edges = np.flatnonzero(np.diff(padded.astype(np.int8)))
    for together, alone, loop in (
        (eckhardt(q, k, 0.5), lambda b: eckhardt(b, k, 0.5), lambda b: _eckhardt_loop(b, k, 0.5)),
        (lyne_hollick(q), lyne_hollick, lambda b: _lyne_hollick_loop(b, 0.925)),
    ):
        for start, end in zip(edges[::2], edges[1::2]):
            np.testing.assert_array_equal(together[start:end], alone(q[start:end]))
            np.testing.assert_allclose(together[start:end], loop(q[start:end]), rtol=1e-9)
        assert np.isnan(together[~np.isfinite(q)]).all()


def test_smoothed_minima_hand_example():
    # Blocks of 5: minima 4, 2, 3, 1, 5 on days 0, 6, 12, 17, 21. Turning points (0.9 × min ≤
    # both neighbours): block 1 (1.8 ≤ 4 and 3) and block 3 (0.9 ≤ 3 and 5).
    q = np.array([4, 6, 7, 8, 9, 5, 2, 6, 7, 8, 9, 9, 3, 9, 9, 9, 9, 1, 9, 9, 9, 5, 9, 9, 9], float)
    b = smoothed_minima(q)
    assert b[6] == 2 and b[17] == 1
    assert b[12] == pytest.approx(2 + (1 - 2) * (12 - 6) / (17 - 6))
    assert np.isnan(b[:6]).all() and np.isnan(b[18:]).all()


def test_baseflow_index_is_a_ratio_of_sums():
    assert baseflow_index([1, 2, np.nan, 3], [0.5, 1.0, 9.0, 1.5]) == pytest.approx(0.5)


def test_unknown_method_is_refused():
    with pytest.raises(ValueError, match="expected one of"):
        separate_baseflow(np.ones(10), method="magic")
