"""The analytic strip-aquifer response used as synthetic truth.

Checks against sources outside the project:
* Rorabaugh (1960) / Glover (1964): late-time recession K = 0.933 a²S/T.
* An independent numerical solution of the same diffusion problem with scipy's ODE solver
  (method of lines), which shares no code with the series solution.
"""

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from recharge_atlas.algorithms.analytic import (
    STRIP_FACTOR,
    strip_aquifer_daily_response,
    strip_aquifer_discharge,
    strip_aquifer_recession_index,
)


def test_strip_factor_is_rorabaughs_0933():
    # Rorabaugh (1960) gives K = 0.933 a²S/T; 0.933 is 4 ln 10 / π² rounded.
    assert STRIP_FACTOR == pytest.approx(0.933, abs=5e-4)


def test_recession_index_formula():
    # a = 1000 m, S = 0.01, T = 200 m²/d: 0.933 × 1e6 × 0.01 / 200 = 46.65 d (hand calculation)
    assert strip_aquifer_recession_index(1000.0, 0.01, 200.0) == pytest.approx(46.65, rel=1e-3)


@pytest.mark.parametrize("k", [10.0, 45.0, 120.0])
def test_daily_response_conserves_mass_and_has_late_slope_minus_one_over_k(k):
    kernel = strip_aquifer_daily_response(k, int(12 * k))
    assert kernel.sum() == pytest.approx(
        1.0, abs=2e-3
    )  # everything recharged returns to the stream
    late = np.arange(int(3 * k), int(5 * k))
    slope = np.polyfit(late, np.log10(kernel[late]), 1)[0]
    assert -1.0 / slope == pytest.approx(k, rel=1e-6)


def test_series_solution_matches_an_independent_numerical_solution():
    # Strip aquifer 0 < x < a: S h_t = T h_xx, h(0) = 0 at the stream, no flow at the divide,
    # initial uniform rise h = R/S. Outflow per unit aquifer area: (T/a) h_x(0).
    a, s, t = 500.0, 0.01, 100.0
    k = float(strip_aquifer_recession_index(a, s, t))
    recharge = 1.0
    cells = 400
    dx = a / cells
    diffusivity = t / s

    def rhs(_, h):
        padded = np.concatenate(
            [[-h[0]], h, [h[-1]]]
        )  # h = 0 at the stream face, mirror at the divide
        return diffusivity * (padded[2:] - 2.0 * padded[1:-1] + padded[:-2]) / dx**2

    times = np.array([0.05, 0.2, 1.0, 5.0, 0.5 * k])
    solution = solve_ivp(
        rhs,
        (0.0, times[-1]),
        np.full(cells, recharge / s),
        t_eval=times,
        method="BDF",
        rtol=1e-8,
        atol=1e-10,
    )
    numeric = t * (2.0 * solution.y[0]) / dx / a  # gradient at the stream face over half a cell
    series = strip_aquifer_discharge(times, k) * recharge
    np.testing.assert_allclose(numeric, series, rtol=0.02)
