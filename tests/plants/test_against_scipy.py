"""Both plant models against scipy's adaptive RK45 (reference library) with a varying input."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from rigloop.plants import make_plant


def _fan_input(t: float) -> float:
    return float(np.clip(40.0 + 30.0 * np.sin(2 * np.pi * 1.5 * t) + (20.0 if t > 0.6 else 0.0), 0.0, 100.0))


def _motor_input(t: float) -> float:
    return float(np.clip(6.0 * np.sin(2 * np.pi * 2.0 * t) + (4.0 if t > 0.5 else -3.0), -12.0, 12.0))


CASES = [
    # kind, parameter overrides, start duty/voltage (None = rest), input
    ("fan", {}, 30.0, _fan_input),
    ("motor", {"load_step_time_s": 0.8, "load_step_torque_nm": 0.02}, None, _motor_input),
]


@pytest.mark.parametrize("kind, params, u0, u_of_t", CASES, ids=[c[0] for c in CASES])
def test_rk4_plant_matches_solve_ivp(kind, params, u0, u_of_t):
    # The device holds u over each sample period (zero-order hold), so the reference solution
    # integrates each 10 ms period separately with scipy.integrate.solve_ivp (RK45, rtol 1e-11).
    # Tolerance: 2e-5 of each state's largest magnitude. What RK4 leaves (about 6e-6) is the tail
    # of the electrical transient that each input change starts and that has not fully decayed
    # by the next sample (6 L/R later); it does not accumulate.
    plant = make_plant(kind, params)
    plant.reset(u0)
    ts, n = 0.01, 120
    x_ref = plant.state.copy()
    worst = np.zeros(3)
    largest = np.abs(x_ref)
    for k in range(n):
        u = u_of_t(k * ts)
        sol = solve_ivp(plant.rhs, (k * ts, (k + 1) * ts), x_ref, method="RK45",
                        rtol=1e-11, atol=1e-12, args=(u,))
        assert sol.success
        x_ref = sol.y[:, -1]
        plant.advance(u, ts)
        worst = np.maximum(worst, np.abs(plant.state - x_ref))
        largest = np.maximum(largest, np.abs(x_ref))
    assert np.all(worst <= 2e-5 * largest), f"worst |RK4 - RK45| {worst} vs largest |x| {largest}"
    assert largest[1] > 50.0  # the run went somewhere: not a trivial agreement at rest
    assert plant.t == pytest.approx(n * ts)
