"""Actuator shaping: non-finite guard -> clamp -> slew, in that order, with exact limits."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigloop.control.shaping import ActuatorShaper


def test_starts_at_safe_and_slews_from_there():
    s = ActuatorShaper(0.0, 100.0, 5.0, 250.0)
    assert s.last == 5.0
    assert s.shape(80.0, 0.01) == 7.5 and s.slewed and not s.clamped


def test_non_finite_holds_the_last_value_then_clamps_and_slews():
    s = ActuatorShaper(0.0, 100.0, 0.0, None)
    assert s.shape(float("nan"), 0.01) == 0.0 and s.nonfinite  # no output yet: safe
    assert s.shape(40.0, 0.01) == 40.0 and not s.nonfinite
    for bad in (float("nan"), float("inf"), float("-inf")):
        assert s.shape(bad, 0.01) == 40.0
        assert s.nonfinite and not s.clamped and not s.slewed


def test_order_is_guard_then_clamp_then_slew():
    s = ActuatorShaper(-10.0, 10.0, 0.0, 100.0)
    s.reset(9.5)
    # +inf is not clamped to +10: the guard runs first and holds 9.5
    assert s.shape(float("inf"), 0.01) == 9.5
    # 50 is clamped to 10 first, and the slew step (1.0) does not limit the move to 10
    assert s.shape(50.0, 0.01) == 10.0 and s.clamped and not s.slewed
    # −50 is clamped to −10, then the slew limits the move to 1 unit
    assert s.shape(-50.0, 0.01) == 9.0 and s.clamped and s.slewed


def test_slew_limit_is_respected_exactly_and_reaches_the_target():
    s = ActuatorShaper(0.0, 100.0, 0.0, 250.0)
    out = [s.shape(100.0, 0.004) for _ in range(101)]
    steps = np.diff([0.0] + out)
    assert np.all(steps <= 250.0 * 0.004 * (1 + 1e-12))
    assert out[99] == pytest.approx(100.0) and out[-1] == 100.0
    assert out[0] == 1.0


def test_bad_dt_allows_no_movement():
    s = ActuatorShaper(0.0, 100.0, 20.0, 10.0)
    for dt in (0.0, -1.0, float("nan")):
        assert s.shape(80.0, dt) == 20.0 and s.slewed


def test_reset_clamps_into_the_range():
    s = ActuatorShaper(0.0, 0.1, 0.0, 1.0)
    s.reset(0.10000000149011612)  # float32 of 0.1, as a device may report it
    assert s.last == 0.1


@settings(max_examples=80, deadline=None)
@given(
    requests=st.lists(st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.floats(-200, 200)), min_size=1, max_size=60),
    slew=st.one_of(st.none(), st.floats(0.1, 1e4)),
    dt=st.floats(1e-4, 0.1),
)
def test_property_output_in_range_and_rate_limited(requests, slew, dt):
    s = ActuatorShaper(-50.0, 75.0, 10.0, slew)
    last = 10.0
    for req in requests:
        u = s.shape(req, dt)
        assert math.isfinite(u) and -50.0 <= u <= 75.0
        if slew is not None:
            assert abs(u - last) <= slew * dt * (1 + 1e-12) + 1e-12
        if not math.isfinite(req):
            assert s.nonfinite
            if slew is None:
                assert u == last
        last = u


@pytest.mark.parametrize(
    "args,needle",
    [
        ((1.0, 0.0, 0.5, None), "u_min = 1.0 must be below u_max = 0.0"),
        ((0.0, 1.0, 2.0, None), "safe = 2.0 must lie within"),
        ((0.0, 1.0, 0.0, 0.0), "slew_per_s = 0.0 must be > 0"),
        ((0.0, float("inf"), 0.0, None), "u_max = inf is not a finite number"),
    ],
)
def test_bad_settings_are_named(args, needle):
    with pytest.raises(ValueError, match=needle):
        ActuatorShaper(*args)
