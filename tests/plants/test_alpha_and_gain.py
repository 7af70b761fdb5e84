"""true_alpha, true_alpha_instantaneous and static_gain against finite differences of the model."""

from __future__ import annotations

import pytest

from rigloop.plants import make_plant

FAN_POINTS = (20.0, 55.0, 90.0)
MOTOR_POINTS = (-6.0, 3.0, 9.0)


def _points(kind):
    return FAN_POINTS if kind == "fan" else MOTOR_POINTS


@pytest.mark.parametrize("kind", ["fan", "motor"])
def test_static_gain_matches_central_difference_of_steady_state(kind):
    plant = make_plant(kind)
    du = 1e-4
    for u in _points(kind):
        lo = plant.outputs(plant.steady_state(u - du))
        hi = plant.outputs(plant.steady_state(u + du))
        for index, channel in enumerate(plant.channel_names):
            if channel == "position_rad":
                continue
            numeric = (hi[index] - lo[index]) / (2 * du)
            analytic = plant.static_gain(channel, u)
            assert analytic == pytest.approx(numeric, rel=1e-6, abs=1e-12), (channel, u)


def _transient_state(plant, kind):
    """A state off equilibrium (current not at its quasi-steady value)."""
    plant.reset(_points(kind)[1])
    plant.advance(_points(kind)[2], 0.0015)
    return plant.state.copy()


def _output_derivative(plant, x, u, order, eps=1e-7):
    """y^(order)(x, u) with u held. The outputs are linear in the state (y = C x), so
    y' = C f(x, u) and y'' = C (df/dx) f, the latter by a central difference along the flow."""
    if order == 0:
        return plant.outputs(x)
    f = plant.rhs(0.0, x, u)
    if order == 1:
        return plant.outputs(f)
    flow = (plant.rhs(0.0, x + eps * f, u) - plant.rhs(0.0, x - eps * f, u)) / (2 * eps)
    return plant.outputs(flow)


@pytest.mark.parametrize("kind", ["fan", "motor"])
def test_instantaneous_alpha_matches_differences_of_the_rhs(kind):
    plant = make_plant(kind)
    x = _transient_state(plant, kind)
    u = _points(kind)[0]
    du = 1e-2
    for index, channel in enumerate(plant.channel_names):
        for order in (1, 2):
            if order > plant.relative_degree_full[channel]:
                with pytest.raises(ValueError, match=channel):
                    plant.true_alpha_instantaneous(channel, order, u)
                continue
            numeric = (_output_derivative(plant, x, u + du, order)[index]
                       - _output_derivative(plant, x, u - du, order)[index]) / (2 * du)
            analytic = plant.true_alpha_instantaneous(channel, order, u)
            if order < plant.relative_degree_full[channel]:
                assert analytic == 0.0
                assert abs(numeric) < 1e-6 * max(1.0, abs(_output_derivative(plant, x, u, order)[index]))
            else:
                assert analytic == pytest.approx(numeric, rel=1e-5), (channel, order)


@pytest.mark.parametrize("kind", ["fan", "motor"])
def test_quasi_static_alpha_matches_difference_of_the_reduced_rate(kind):
    plant = make_plant(kind)
    _transient_state(plant, kind)
    du = 1e-3
    for channel in plant.channel_names:
        for order in (1, 2):
            if order > plant.relative_degree_quasi_static[channel]:
                with pytest.raises(ValueError, match="relative degree"):
                    plant.true_alpha(channel, order, 50.0)
                continue
            for u in _points(kind):
                numeric = (plant.quasi_static_rate(channel, order, u + du)
                           - plant.quasi_static_rate(channel, order, u - du)) / (2 * du)
                assert plant.true_alpha(channel, order, u) == pytest.approx(numeric, rel=1e-7, abs=1e-12)


@pytest.mark.parametrize("kind, channel, order, u0, bump", [
    ("fan", "speed_rpm", 1, 50.0, 5.0),
    ("fan", "airflow_m3h", 1, 30.0, 5.0),
    ("motor", "speed_rad_s", 1, 4.0, 0.5),
    ("motor", "position_rad", 2, 4.0, 0.5),
])
def test_quasi_static_alpha_is_the_bump_test_initial_slope(kind, channel, order, u0, bump):
    # What a bump test measures: from equilibrium at u0, step u by `bump`; once the current has
    # settled (8 L/R) the output's rate of change (the speed's acceleration for the angle) per unit
    # bump is alpha. The rotor's own relaxation over those 8 L/R, about 8 L/R divided by the
    # mechanical time constant (2-3 % here), is the tolerance.
    plant = make_plant(kind)
    plant.reset(u0)
    settle = 8 * plant.machine.electrical_time_constant
    plant.advance(u0 + bump, settle)
    index = plant.channel_index(channel)
    rate = _output_derivative(plant, plant.state, u0 + bump, order)[index]
    assert rate / bump == pytest.approx(plant.true_alpha(channel, order, u0), rel=0.04)


def test_lower_order_than_relative_degree_gives_zero_alpha():
    motor = make_plant("motor")
    assert motor.true_alpha("position_rad", 1, 3.0) == 0.0
    assert motor.quasi_static_rate("position_rad", 1, 3.0) == motor.state[1]
    fan = make_plant("fan")
    assert fan.true_alpha_instantaneous("speed_rpm", 1, 50.0) == 0.0


def test_bad_channel_order_and_position_gain_are_reported():
    motor = make_plant("motor")
    with pytest.raises(ValueError, match="unknown motor channel 'speed_rpm'.*position_rad"):
        motor.true_alpha("speed_rpm", 1, 0.0)
    with pytest.raises(ValueError, match="order must be 1 or 2"):
        motor.true_alpha("speed_rad_s", 3, 0.0)
    with pytest.raises(ValueError, match="no static gain"):
        motor.static_gain("position_rad", 1.0)
    with pytest.raises(ValueError, match="relative degree 1.*use order 1"):
        make_plant("fan").true_alpha("speed_rpm", 2, 50.0)
