"""The feedback plausibility checks on synthetic signals (no processes): noise floor, the output's
answer to the actuator at a limit, frozen readings at rest and in motion, applied vs commanded."""

from __future__ import annotations

import math

import numpy as np
import pytest

from rigloop.control.kernels import slope_weights
from rigloop.engine.plausibility import (
    AppliedCheck,
    NoiseMeter,
    ResponseMonitor,
    noise_std,
    rate_noise_gain,
    resolution,
)

TS = 0.002


def test_noise_std_matches_numpy_on_white_noise_with_drift():
    """σ from second differences ignores a straight-line drift; the reference is numpy's std of
    the noise itself (tolerance: ~4 % standard error of a MAD estimate on 4000 samples)."""
    rng = np.random.default_rng(5)
    noise = 3.0 * rng.standard_normal(4000)
    drift = 50.0 + 200.0 * np.arange(4000) * TS        # a rotor still coasting at rest
    assert noise_std(drift + noise) == pytest.approx(float(np.std(noise)), rel=0.06)
    assert noise_std(drift) == pytest.approx(0.0, abs=1e-9)


def test_noise_std_of_a_coarse_quantizer_falls_back_to_rms():
    y = np.round(np.random.default_rng(1).normal(0.0, 0.3, 2000))   # mostly 0, some ±1
    assert noise_std(y) > 0.0
    assert resolution(y) == 1.0
    assert resolution(np.zeros(50)) == 0.0


def test_rate_noise_gain_is_the_norm_of_the_slope_weights():
    # ||c||² = 12/(Ts² n (n+1)(n+2)) for the least-squares slope over n intervals (closed form)
    n = 5
    assert rate_noise_gain(TS) == pytest.approx(math.sqrt(12.0 / (TS ** 2 * n * (n + 1) * (n + 2))))
    assert rate_noise_gain(TS) == pytest.approx(float(np.linalg.norm(slope_weights(n, TS))))


def test_noise_meter_reports_every_channel():
    meter = NoiseMeter(["a", "b"], needed=16)
    rng = np.random.default_rng(2)
    for _ in range(20):
        meter.add([rng.normal(0, 1.0), 7.0])
    assert meter.done and meter.count == 16
    floor = meter.floor()
    assert floor["b"] == {"std": 0.0, "resolution": 0.0, "samples": 16}
    assert floor["a"]["std"] > 0.3


def _fan_monitor(**kw):
    args = dict(channel="speed_rpm", unit="rpm", order=1, alpha=40.0, u_min=0.0, u_max=100.0, safe=0.0,
                period_s=TS, response_s=0.5, frozen_s=0.5, window=30, span=3400.0, std=8.0, res=1.0)
    args.update(kw)
    return ResponseMonitor(**args)


def _first_trip(mon, ys, us, rs, t0=0.0):
    for k, (y, u, r) in enumerate(zip(ys, us, rs)):
        trip = mon.update(t0 + k * TS, y, u, r)
        if trip is not None:
            return k, trip
    return None, None


def test_quantized_reading_at_rest_never_trips():
    """A stopped fan with a noise-free quantized tach reads exactly 0 forever; command safe, r 0."""
    mon = _fan_monitor(std=0.0, res=0.0)
    n = 5000
    assert _first_trip(mon, [0.0] * n, [0.0] * n, [0.0] * n) == (None, None)


def test_output_still_at_the_safe_limit_is_a_rig_at_rest():
    """The reference below a stopped fan (a tach offset): the law asks for less than 0 %, the
    actuator sits at the safe value, nothing moves — rest, not a fault."""
    mon = _fan_monitor()
    rng = np.random.default_rng(0)
    n = 3000
    ys = 40.0 + 8.0 * rng.standard_normal(n)
    assert _first_trip(mon, ys, [0.0] * n, [0.0] * n) == (None, None)


def test_frozen_reading_while_the_command_moves_trips_after_frozen_s():
    mon = _fan_monitor()
    n = 1000
    us = [40.0 + 0.1 * k for k in range(n)]             # the law drifts towards its limit
    k, trip = _first_trip(mon, [1200.0] * n, us, [1200.0] * n)
    assert trip.cause == "no-response" and "repeated" in trip.message
    assert k * TS >= 0.5 and us[k] - us[0] >= 25.0        # far: at least a quarter of the range


def test_a_long_rest_then_a_command_gets_the_whole_frozen_time_to_answer():
    """An arm resting in its gear play reads the same count for seconds; then the law steps the
    voltage far. The reading answers 0.2 s later, inside frozen_s (0.5 s): no trip — the time
    counts from when the loop began to ask, not from when the reading began to repeat. A reading
    that never answers trips frozen_s after the step."""
    rest, n = 2000, 1000                               # 4 s at rest, then 2 s of asking
    us = [0.0] * rest + [60.0] * n                     # far: 60 % of the range at once
    answering = [0.0] * (rest + 100) + [0.0 + 5.0 * k for k in range(n - 100)]
    assert _first_trip(_fan_monitor(), answering, us, [0.0] * (rest + n)) == (None, None)
    k, trip = _first_trip(_fan_monitor(), [0.0] * (rest + n), us, [0.0] * (rest + n))
    assert trip.cause == "no-response" and "repeated" in trip.message
    assert (k - rest) * TS == pytest.approx(0.5, abs=2 * TS)


def test_no_answer_at_the_upper_limit_trips_after_the_response_time():
    """A stalled rotor: duty at 100 %, the reference far above, the reading noise around 0."""
    mon = _fan_monitor()
    rng = np.random.default_rng(4)
    n = 1000
    k, trip = _first_trip(mon, 8.0 * rng.standard_normal(n), [100.0] * n, [1200.0] * n)
    assert trip.cause == "no-response" and "did not answer" in trip.message
    assert (k - 30) * TS >= 0.5 - 1e-9                     # response time after the window filled


def test_a_first_order_plant_at_the_limit_answers():
    """y' = alpha*u - y/tau (tau 0.7 s) at full duty from 1000 rpm: no trip, even once it settles."""
    mon = _fan_monitor()
    rng = np.random.default_rng(6)
    y, ys = 1000.0, []
    for _ in range(3000):
        y += TS * (40.0 * 100.0 - y / 0.7)
        ys.append(y + 8.0 * rng.standard_normal())
    assert _first_trip(mon, ys, [100.0] * 3000, [4000.0] * 3000) == (None, None)


def test_output_moving_against_the_actuator_trips():
    """A reversed sensor: duty at 100 %, the reading falls."""
    mon = _fan_monitor()
    n = 1000
    ys = [1200.0 - 2000.0 * k * TS for k in range(n)]
    k, trip = _first_trip(mon, ys, [100.0] * n, [3000.0] * n)
    assert trip.cause == "no-response" and "against" in trip.message


def test_second_order_output_judged_by_its_velocity():
    """A position (m = 2) moving the wrong way when the voltage saturates: its velocity turns
    round within the response time, so no trip; a locked shaft (position constant) trips."""
    kw = dict(channel="position_rad", unit="rad", order=2, alpha=50.0, u_min=-12.0, u_max=12.0,
              safe=0.0, window=10, span=9.0, std=0.0, res=2 * math.pi / 2048)
    mon = ResponseMonitor(**kw, period_s=TS, response_s=0.3, frozen_s=0.3)
    x, v, ys = 0.0, -3.0, []
    for _ in range(600):
        v += TS * (50.0 * 12.0 - 5.0 * v)
        x += TS * v
        ys.append(x)
    assert _first_trip(mon, ys, [12.0] * 600, [10.0] * 600) == (None, None)
    mon = ResponseMonitor(**kw, period_s=TS, response_s=0.3, frozen_s=10.0)
    k, trip = _first_trip(mon, [1.0] * 600, [12.0] * 600, [10.0] * 600)
    assert trip is not None and trip.cause == "no-response"


def test_applied_check_accepts_the_command_of_the_named_sequence():
    chk = AppliedCheck(u_min=0.0, u_max=100.0, safe=0.0)
    assert chk.check(0.0, 17, 0.0) is None                 # before our first command: safe
    chk.sent(18, 40.0)
    chk.sent(19, 41.0)
    assert chk.check(0.002, 17, 0.0) is None               # latency: still the old one applied
    assert chk.check(0.004, 18, float(np.float32(40.0))) is None
    assert chk.check(0.006, 19, float(np.float32(41.0))) is None


def test_applied_check_trips_after_three_mismatches_in_a_row():
    chk = AppliedCheck(u_min=0.0, u_max=100.0, safe=0.0, samples=3)
    for seq in range(1, 10):
        chk.sent(seq, 80.0)
    assert chk.check(0.0, 1, 30.0) is None
    assert chk.check(0.1, 2, 30.0) is None
    assert chk.check(0.2, 3, 80.0) is None                 # a good one resets the count
    assert chk.check(0.3, 4, 30.0) is None
    assert chk.check(0.4, 5, 30.0) is None
    trip = chk.check(0.5, 6, 30.0)
    assert trip.cause == "applied-mismatch" and trip.value == 30.0 and trip.limit == 80.0
    chk.reset()                                            # a new ARM: unknown sequences mean safe
    assert chk.check(0.6, 6, 0.0) is None
