"""Bench fan model: fan affinity laws and the documented operating figures."""

from __future__ import annotations

import math

import numpy as np
import pytest

from rigloop.plants import make_plant


def test_affinity_laws_torque_squared_flow_linear_power_cubed():
    # Fan affinity laws: flow ~ n, pressure (hence aerodynamic torque) ~ n^2, power ~ n^3
    # ("ASHRAE Handbook - HVAC Systems and Equipment", fans chapter; from memory).
    # The aerodynamic torque is inferred from the steady state's torque balance
    # (electromagnetic torque K i minus the known bearing losses), not read from the model.
    plant = make_plant("fan")
    c = plant.machine
    points = []
    for duty in (30.0, 60.0, 90.0):
        i, w, _ = plant.steady_state(duty)
        aero = c.k * i - c.viscous * w - c.dry_friction * math.tanh(w / c.smoothing)
        airflow = plant.outputs(plant.steady_state(duty))[2]
        points.append((w, aero, airflow))
    w0, aero0, q0 = points[0]
    for w, aero, airflow in points[1:]:
        n = w / w0
        assert n > 1.5  # genuinely different speeds
        assert aero / aero0 == pytest.approx(n**2, rel=1e-9)
        assert airflow / q0 == pytest.approx(n, rel=1e-12)
        assert (aero * w) / (aero0 * w0) == pytest.approx(n**3, rel=1e-9)
        assert plant.aero_torque(w) == pytest.approx(aero, rel=1e-9)


def test_full_duty_figures_of_a_120mm_12v_fan():
    plant = make_plant("fan")
    speed, current, airflow, temp = plant.outputs(plant.steady_state(100.0))
    assert 2900.0 < speed < 3100.0
    assert 0.2 < current < 0.3
    assert 90.0 < airflow < 110.0
    assert 10.0 < temp - plant.params.ambient_c < 20.0
    assert plant.machine.electrical_time_constant == pytest.approx(1.0 / 600.0)
    assert (plant.u_min, plant.u_max, plant.u_safe) == (0.0, 100.0, 0.0)


def test_steady_state_is_an_equilibrium_of_the_rhs():
    plant = make_plant("fan")
    for duty in (0.0, 12.5, 77.0):
        x = plant.steady_state(duty)
        scale = np.array([1.0 / plant.machine.inductance, 1.0 / plant.machine.inertia, 1.0])
        assert np.all(np.abs(plant.rhs(0.0, x, duty)) < 1e-9 * scale)


def test_reset_to_steady_state_stays_there():
    plant = make_plant("fan")
    plant.reset(40.0)
    start = plant.read()
    for _ in range(100):
        plant.advance(40.0, 0.01)
    assert np.allclose(plant.read(), start, rtol=1e-9, atol=1e-12)
    plant.reset()
    assert np.array_equal(plant.read(), [0.0, 0.0, 0.0, plant.params.ambient_c])


def test_braking_load_lowers_speed_and_raises_current():
    plant = make_plant("fan")
    free = plant.steady_state(70.0)
    plant.set_load(0.004)
    loaded = plant.steady_state(70.0)
    assert loaded[1] < free[1] - 10.0 and loaded[0] > free[0]
    assert loaded[2] > free[2]  # more copper loss, warmer winding
