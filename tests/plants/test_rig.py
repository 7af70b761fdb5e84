"""The imperfection layers of rigloop.plants.rig against independent computations.

References: scipy.integrate.solve_ivp (RK45) for the delayed and dead-zoned responses; central
finite differences for alpha and the static gain; the play (backlash) operator and the pulse
tach checked against what they must give by construction (hand computation).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from rigloop.plants import make_plant
from rigloop.plants.load import LoadProfile, LoadSpec
from rigloop.plants.rig import Rig, RigOptionError, RigSpec
from rigloop.plants.rig_config import build_rig, sensor_model
from rigloop.plants.tach import PulseTach


def _run(plant, u_of_k, n, ts):
    ys = []
    for k in range(n):
        ys.append(plant.read().copy())
        plant.advance(u_of_k(k), ts)
    return np.array(ys)


@pytest.mark.parametrize("kind, u0, u_of_k", [
    ("fan", 40.0, lambda k: 40.0 + (25.0 if k > 50 else 0.0)),
    ("motor", 0.0, lambda k: 6.0 * math.sin(0.05 * k)),
])
def test_a_rig_without_layers_is_the_plant_sample_for_sample(kind, u0, u_of_k):
    plain, wrapped = make_plant(kind), Rig(make_plant(kind))
    plain.reset(u0)
    wrapped.reset(u0)
    a = _run(plain, u_of_k, 200, 0.002)
    b = _run(wrapped, u_of_k, 200, 0.002)
    np.testing.assert_array_equal(a, b)


def _ivp_speed(plant, u_of_t, t_end, x0):
    """Reference: scipy's RK45 on the plant's own RHS, the input a function of time."""
    sol = solve_ivp(lambda t, x: plant.rhs(t, x, u_of_t(t)), (0.0, t_end), x0, method="RK45",
                    rtol=1e-10, atol=1e-12, dense_output=True, max_step=1e-3)
    return sol


@pytest.mark.parametrize("delay", [0.004, 0.0123, 0.03])
def test_transport_delay_matches_a_delayed_input_integrated_by_scipy(delay):
    # Command 40 % -> 70 % at t = 0.1 s, 2 ms ticks; the plant must see the step at 0.1 + delay,
    # also when the delay is not a whole number of ticks (0.0123 s).
    rig = build_rig("fan", None, {"input_delay_s": delay})
    rig.reset(40.0)
    x0 = rig.state.copy()
    ts, n = 0.002, 150
    speeds = []
    for k in range(n):
        speeds.append(rig.state[1])
        rig.advance(70.0 if k >= 50 else 40.0, ts)
    t_step = 50 * ts + delay
    ref = _ivp_speed(rig.inner, lambda t: 70.0 if t >= t_step else 40.0, n * ts, x0)
    expected = ref.sol(np.arange(n) * ts)[1]
    assert rig.true_delay() == delay
    np.testing.assert_allclose(speeds, expected, rtol=0, atol=1e-4 * max(speeds))
    # Before the delayed step reaches the plant nothing moves (the equilibrium holds).
    k_reach = int((50 * ts + delay) / ts)
    assert abs(speeds[k_reach - 1] - speeds[0]) < 1e-6 * speeds[0]


def test_dead_zone_maps_commands_to_drive_and_keeps_full_scale():
    rig = build_rig("fan", None, {"dead_zone": 10.0})
    assert rig.drive(5.0) == 0.0 and rig.drive(10.0) == 0.0
    assert rig.drive(100.0) == pytest.approx(100.0)          # full scale kept
    assert rig.drive(55.0) == pytest.approx(45.0 * 100.0 / 90.0)
    assert rig.command_for_drive(rig.drive(63.0)) == pytest.approx(63.0)
    motor = build_rig("motor", None, {"dead_zone": 1.5})
    assert motor.drive(-1.0) == 0.0 and motor.drive(-12.0) == pytest.approx(-12.0)
    assert motor.drive(-6.0) == pytest.approx(-(4.5 * 12.0 / 10.5))


@pytest.mark.parametrize("rig_options", [{}, {"dead_zone": 12.0}, {"dead_zone": 12.0, "input_delay_s": 0.02}])
def test_static_gain_is_the_finite_difference_of_steady_states(rig_options):
    rig = build_rig("fan", None, rig_options)
    u, h = 50.0, 1e-3
    i = rig.channel_index("speed_rpm")
    fd = (rig.outputs(rig.steady_state(u + h))[i] - rig.outputs(rig.steady_state(u - h))[i]) / (2 * h)
    assert rig.static_gain("speed_rpm", u) == pytest.approx(fd, rel=1e-6)
    assert rig.static_gain("speed_rpm", 5.0) == (0.0 if rig_options else pytest.approx(
        rig.inner.static_gain("speed_rpm", 5.0)))


@pytest.mark.parametrize("rig_options", [{"dead_zone": 12.0}, {"dead_zone": 12.0, "input_delay_s": 0.02}])
def test_true_alpha_is_the_initial_slope_of_a_simulated_step(rig_options):
    # Finite difference of the speed's slope between a step and no step, measured after the
    # delay and the electrical transient (L/R = 1.7 ms) and long before the mechanics act
    # (0.7 s): the quasi-static alpha, including the dead zone's rescaling.
    def slope(du):
        rig = build_rig("fan", None, rig_options)
        rig.reset(50.0)
        i = rig.channel_index("speed_rpm")
        t_meas = rig.true_delay() + 0.012
        rig.advance(50.0 + du, t_meas)
        y1 = rig.outputs(rig.state)[i]
        rig.advance(50.0 + du, 0.004)
        return (rig.outputs(rig.state)[i] - y1) / 0.004

    rig = build_rig("fan", None, rig_options)
    rig.reset(50.0)
    measured = (slope(2.0) - slope(0.0)) / 2.0
    assert measured == pytest.approx(rig.true_alpha("speed_rpm", 1, 50.0), rel=0.03)


def test_load_walk_is_seeded_and_independent_of_the_call_pattern():
    spec = LoadSpec(walk_nm=1e-3, drift_nm=2e-4, drift_period_s=5.0, steps=((1.0, 5e-4),), seed=4)
    a, b, c = LoadProfile(spec), LoadProfile(spec), LoadProfile(LoadSpec(walk_nm=1e-3, seed=5))
    times = np.linspace(0.0, 3.0, 301)
    va = [a.time_part(t) for t in times]
    vb = [b.time_part(t) for t in times[::-1]][::-1]          # asked in another order
    np.testing.assert_array_equal(va, vb)
    assert [c.time_part(t) for t in times] != va
    # The deterministic parts: drift sin(2 pi t / T) and the step from 1 s on.
    d = LoadProfile(LoadSpec(drift_nm=2e-4, drift_period_s=5.0, steps=((1.0, 5e-4),)))
    assert d.time_part(1.25) == pytest.approx(2e-4 * math.sin(2 * math.pi * 0.25) + 5e-4)
    assert d.time_part(0.99) == pytest.approx(2e-4 * math.sin(2 * math.pi * 0.99 / 5.0))


def test_load_walk_spreads_as_its_intensity_times_sqrt_t():
    # A Wiener process W with intensity s has std s*sqrt(t) (definition); 400 seeded walks.
    ends = np.array([LoadProfile(LoadSpec(walk_nm=2e-4, seed=s)).time_part(4.0) for s in range(400)])
    assert np.std(ends) == pytest.approx(2e-4 * 2.0, rel=0.15)
    assert abs(np.mean(ends)) < 3 * 2e-4 * 2.0 / math.sqrt(400)


def test_a_load_step_lowers_the_speed_to_the_loaded_equilibrium():
    rig = build_rig("fan", None, {"load": {"steps": [{"at_s": 0.1, "torque_nm": 2e-3}]}})
    rig.reset(60.0)
    for _ in range(3000):
        rig.advance(60.0, 0.002)
    plain = make_plant("fan")
    plain.set_load(2e-3)
    expected = plain.outputs(plain.steady_state(60.0))[0]
    assert rig.read()[0] == pytest.approx(expected, rel=1e-3)
    assert rig.load_torque(rig.t) == pytest.approx(2e-3)


def test_tach_reads_the_speed_at_constant_speed_and_zero_below_its_floor():
    tach = PulseTach(2, 0.1)
    tach.reset(0.0, 100.0)
    t = 0.0
    for _ in range(500):
        t += 0.002
        tach.advance(t, 100.0)
    assert tach.reading(t) == pytest.approx(100.0, rel=1e-9)
    assert tach.min_speed_rad_s == pytest.approx(math.pi / 0.1)
    slow = PulseTach(2, 0.1)
    slow.reset(0.0, 20.0)                       # 20 rad/s < pi/0.1 = 31.4 rad/s
    t = 0.0
    for _ in range(500):
        t += 0.002
        slow.advance(t, 20.0)
    assert slow.reading(t) == 0.0


def test_tach_reading_changes_only_when_a_pulse_arrives():
    rig = build_rig("fan", None, {"tach_pulses_per_rev": 2, "tach_timeout_s": 0.1})
    rig.reset(30.0)
    readings, ts = [], 0.001
    for k in range(1000):
        rig.advance(30.0 + 30.0 * (k > 200), ts)
        readings.append(rig.read()[0])
    changes = np.count_nonzero(np.diff(readings))
    # Pulses in the second: 2 per turn times the turns made; at most one new reading each.
    turns = rig.state[1] * 0 + sum(np.abs(readings)) * ts / 60.0
    assert 0 < changes <= 2 * turns + 2
    assert readings[-1] == pytest.approx(rig.outputs(rig.state)[0], rel=0.02)
    assert rig.tach_min_reading() == pytest.approx(60.0 / (2 * 0.1))


def test_backlash_holds_the_output_until_the_play_is_crossed():
    rig = build_rig("motor", {"encoder_counts_per_rev": 0, "dry_friction_nm": 0.0},
                    {"gear_ratio": 10.0, "backlash_rad": 0.02})
    rig.reset(None)
    pos = rig.channel_index("position_rad")
    for _ in range(100):                         # forward: teeth on the driving flank
        rig.advance(3.0, 0.002)
    forward = rig.read()[pos]
    motor = rig.inner.outputs(rig.state)[pos] / 10.0
    assert forward == pytest.approx(motor - 0.01, abs=1e-9)
    assert rig.true_alpha("position_rad", 2, 3.0) == pytest.approx(rig.inner.true_alpha("position_rad", 2, 3.0) / 10)
    # Reverse: the motor coasts on to its farthest angle, then comes back; until it has come
    # back by the play the output stays where the motor's farthest angle left it.
    speed = rig.channel_index("speed_rad_s")
    while rig.read()[speed] > 0.0:
        rig.advance(-3.0, 0.0005)
    peak = rig.inner.outputs(rig.state)[pos] / 10.0
    at_peak = rig.read()[pos]
    assert at_peak == pytest.approx(peak - 0.01, abs=1e-5)
    while rig.inner.outputs(rig.state)[pos] / 10.0 > peak - 0.015:
        rig.advance(-3.0, 0.0005)
    assert rig.read()[pos] == pytest.approx(at_peak, abs=1e-5)     # output has not moved
    assert rig.true_alpha("position_rad", 2, -3.0) == 0.0           # teeth apart
    for _ in range(200):
        rig.advance(-3.0, 0.002)
    assert rig.read()[pos] == pytest.approx(rig.inner.outputs(rig.state)[pos] / 10.0 + 0.01, abs=1e-9)


def test_ripple_load_follows_the_output_angle():
    rig = build_rig("motor", {"encoder_counts_per_rev": 0}, {"gear_ratio": 5.0, "load": {"ripple_nm": 0.01}})
    rig.reset(None)
    for _ in range(300):
        rig.advance(2.0, 0.002)
    angle = rig.read()[rig.channel_index("position_rad")]
    rig.advance(2.0, 0.002)
    assert rig.load_torque(rig.t) == pytest.approx(0.01 * math.sin(angle), abs=0.01 * 0.05)


def test_multiplicative_noise_grows_with_the_value():
    rig = build_rig("fan")
    sensor = sensor_model(rig, 1.0, {"speed_rpm": {"noise_std": 0.0, "relative_noise": 0.03, "quantum": 0.0}}, seed=2)
    values = np.array([sensor.measure(np.array([2000.0, 0.1, 50.0, 30.0]))[0] for _ in range(4000)])
    assert np.std(values) == pytest.approx(0.03 * 2000.0, rel=0.05)
    quiet = sensor_model(rig, 0.0, {"speed_rpm": {"relative_noise": 0.03, "quantum": 5.0}}, seed=2)
    assert quiet.measure(np.array([2001.0, 0.1, 50.0, 30.0]))[0] == 2000.0   # quantized, no noise


def test_options_a_plant_cannot_have_name_their_key():
    with pytest.raises(RigOptionError) as caught:
        build_rig("fan", None, {"backlash_rad": 0.01})
    assert caught.value.key == "backlash_rad" and "motor" in str(caught.value)
    with pytest.raises(RigOptionError) as caught:
        Rig(make_plant("fan"), RigSpec(dead_zone=100.0))
    assert caught.value.key == "dead_zone"
    with pytest.raises(ValueError, match="unknown device.sim.rig key 'deadzone'"):
        build_rig("fan", None, {"deadzone": 3.0})


def test_swapped_leads_flip_alpha_and_gain_and_the_motion():
    # drive_sign -1: the same rig with the command's sign reversed (finite differences of the
    # steady state and of the simulated initial slope change sign, the magnitudes stay).
    plain = build_rig("motor", None, {"dead_zone": 1.0})
    swapped = build_rig("motor", None, {"dead_zone": 1.0, "drive_sign": -1})
    for rig in (plain, swapped):
        rig.reset(0.0)
    assert swapped.static_gain("speed_rad_s", 6.0) == pytest.approx(-plain.static_gain("speed_rad_s", 6.0))
    assert swapped.true_alpha("speed_rad_s", 1, 6.0) == pytest.approx(-plain.true_alpha("speed_rad_s", 1, 6.0))
    for rig in (plain, swapped):
        for _ in range(200):
            rig.advance(6.0, 0.002)
    i = plain.channel_index("speed_rad_s")
    assert swapped.read()[i] == pytest.approx(-plain.read()[i], rel=1e-9)
    assert swapped.command_for_drive(swapped.drive(-4.0)) == pytest.approx(-4.0)
    assert swapped.steady_input("speed_rad_s", 50.0) < 0.0
