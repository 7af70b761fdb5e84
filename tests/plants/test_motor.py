"""Bench DC motor model: worked-example values, python-control step response, encoder, load."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest

from rigloop.plants import make_plant

# DC motor speed example of the "Control Tutorials for MATLAB and Simulink" site (from memory):
# J = 0.01 kg m^2, b = 0.1 N m s, K = 0.01 (V s/rad = N m/A), R = 1 ohm, L = 0.5 H.
WORKED_EXAMPLE = {
    "inertia_kgm2": 0.01,
    "viscous_nms": 0.1,
    "torque_constant": 0.01,
    "resistance_ohm": 1.0,
    "inductance_h": 0.5,
    "dry_friction_nm": 0.0,
    "encoder_counts_per_rev": 0,
}
J, B, K, R, L = 0.01, 0.1, 0.01, 1.0, 0.5


@pytest.mark.parametrize("volts", [1.0, -7.0, 12.0])
def test_steady_speed_per_volt_is_k_over_br_plus_k2(volts):
    # Closed form of the worked example: w_ss / V = K / (b R + K^2) (from memory).
    plant = make_plant("motor", WORKED_EXAMPLE)
    expected = K / (B * R + K * K)
    assert plant.steady_state(volts)[1] / volts == pytest.approx(expected, rel=1e-12)
    assert plant.static_gain("speed_rad_s", volts) == pytest.approx(expected, rel=1e-12)


def test_step_response_matches_python_control():
    # Reference library: python-control's step response of the transfer function
    # w(s)/V(s) = K / ((J s + b)(L s + R) + K^2) against our RK4 from rest with V = 1 V.
    plant = make_plant("motor", WORKED_EXAMPLE)
    plant.reset()
    ts = 0.02
    times = np.arange(0, 301) * ts
    speeds = [plant.read()[1]]
    for _ in times[1:]:
        plant.advance(1.0, ts)
        speeds.append(plant.read()[1])
    sys = control.tf([K], np.polymul([J, B], [L, R]) + np.array([0.0, 0.0, K * K]))
    reference = control.step_response(sys, T=times).outputs
    # One RK4 step per 20 ms period on poles near -2 and -10 1/s: error about 1e-6 relative.
    assert np.max(np.abs(np.array(speeds) - reference)) < 5e-7
    # After 6 s (twelve slow time constants) the speed is at its closed-form steady state.
    assert speeds[-1] == pytest.approx(K / (B * R + K * K), rel=1e-4)


def test_default_motor_documented_figures():
    plant = make_plant("motor")
    assert plant.u_min == -12.0 and plant.u_max == 12.0 and plant.u_safe == 0.0
    assert 200.0 < plant.steady_state(12.0)[1] < 260.0        # no-load speed, rad/s
    assert plant.true_alpha("position_rad", 2, 0.0) == pytest.approx(50.0)
    assert plant.machine.electrical_time_constant == pytest.approx(1.5e-3)


def test_encoder_rounds_the_angle_to_whole_counts():
    plant = make_plant("motor")
    plant.reset()
    for _ in range(7):
        plant.advance(3.0, 0.0137)
    q = 2 * math.pi / 2048
    exact = plant.outputs(plant.state)[0]
    reading = plant.read()[0]
    assert abs(reading - exact) <= q / 2 + 1e-12
    assert reading / q == pytest.approx(round(reading / q), abs=1e-9)
    assert exact != reading  # the reading really is quantized


def test_load_torque_slows_the_motor_and_balances_torque():
    plant = make_plant("motor")
    free = plant.steady_state(6.0)
    plant.set_load(0.02)
    loaded = plant.steady_state(6.0)
    assert loaded[1] < free[1] and loaded[0] > free[0]
    c = plant.machine
    w = loaded[1]
    friction = c.viscous * w + c.dry_friction * math.tanh(w / c.smoothing)
    assert c.k * loaded[0] == pytest.approx(friction + 0.02, rel=1e-10)


def test_load_step_acts_from_its_tick():
    plant = make_plant("motor", {"load_step_time_s": 0.5, "load_step_torque_nm": 0.05})
    plant.reset(6.0)
    assert plant.load_torque(0.49) == 0.0 and plant.load_torque(0.5) == 0.05
    speed_before = plant.read()[1]
    for _ in range(50):
        plant.advance(6.0, 0.01)
    assert plant.read()[1] == pytest.approx(speed_before, rel=1e-9)  # still in equilibrium
    for _ in range(50):
        plant.advance(6.0, 0.01)
    assert plant.read()[1] < speed_before - 5.0
    plant.reset()
    assert plant.t == 0.0 and plant.load_torque(0.0) == 0.0
