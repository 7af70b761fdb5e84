"""Closed-loop quality on the simulated rigs with the model-free laws of rigloop.control.

Fan, speed output, sensor noise on: the iP (algebraic estimator) against
- the oracle (feedback linearisation with the true plant: what a perfect F estimate would give),
- a PI baseline tuned by the SIMC rules ('Simple analytic rules for model reduction and PID
  controller tuning', Journal of Process Control, 2003) from a first-order-plus-dead-time (FOPDT)
  model that this test identifies from an open-loop step of the plant model, run through the
  same loop timing (so the one-sample transport delay is part of the identified dead time).
All run on the same reference (blended level changes), the same noise sequence and the same
actuator shaping. Run with ``-s`` to see the RMS table.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from rigloop.control.controller import ControlParams, Controller
from rigloop.control.reference import build_reference
from rigloop.control.shaping import ActuatorShaper
from rigloop.control.tuning import ipd_gains, simc_pid
from rigloop.plants import OracleController, SensorModel, make_plant, run_offline

FAN_REFERENCE = {
    "kind": "levels", "initial": 1200.0, "blend_s": 1.5,
    "steps": [{"at": 1.0, "to": 2000.0}, {"at": 4.0, "to": 1600.0},
              {"at": 7.0, "to": 2400.0}, {"at": 10.0, "to": 1400.0}],
}
FAN_DURATION_S = 13.0
FAN_SLEW_PER_S = 250.0      # % per second, as on the bench fan's configuration
NOISE_SEED = 11
SCORE_FROM_S = 1.0          # after the estimator's warm-up, at the first level change


class StepCommand:
    """Open-loop step of the command at ``at_s`` (for the FOPDT identification)."""

    def __init__(self, before: float, after: float, at_s: float, ts: float) -> None:
        self.before, self.after, self.at_s, self.ts = before, after, at_s, ts
        self.k = 0
        self.f_hat = math.nan

    def reset(self, u_hold: float) -> None:
        self.k = 0

    def step(self, y, u_applied, r, dr, ddr):
        value = self.after if self.k * self.ts >= self.at_s - 1e-12 else self.before
        self.k += 1
        return value


def identify_fopdt(plant, ts: float, y_from: float, y_to: float) -> tuple[float, float, float]:
    """(K, tau, theta) from a noise-free open-loop step, by the two-point method: the times at
    which 28.3 % and 63.2 % of the final change are reached give tau = 1.5 (t63 - t28) and
    theta = t63 - tau (common practice). Times count from the sample that computed the step."""
    u_a = plant.steady_input("speed_rpm", y_from)
    u_b = plant.steady_input("speed_rpm", y_to)
    at_s = 0.2
    result = run_offline(plant, StepCommand(u_a, u_b, at_s, ts), _reference(), None, ts=ts,
                         duration_s=6.0, output="speed_rpm", u0=u_a)
    y, t = result.y, result.t
    gain = (y[-1] - y[0]) / (u_b - u_a)

    def crossing(fraction: float) -> float:
        target = y[0] + fraction * (y[-1] - y[0])
        k = int(np.argmax(y >= target))
        return t[k - 1] + (target - y[k - 1]) / (y[k] - y[k - 1]) * ts - at_s

    t28, t63 = crossing(0.283), crossing(0.632)
    tau = 1.5 * (t63 - t28)
    return gain, tau, max(t63 - tau, 0.0)


def _reference():
    return build_reference(FAN_REFERENCE)


def _fan_run(plant, controller, ts):
    u0 = plant.steady_input("speed_rpm", FAN_REFERENCE["initial"])
    return run_offline(plant, controller, _reference(), ActuatorShaper(0.0, 100.0, 0.0, FAN_SLEW_PER_S),
                       ts=ts, duration_s=FAN_DURATION_S, output="speed_rpm",
                       sensor=SensorModel.nominal(plant, 1.0, seed=NOISE_SEED), u0=u0)


def _fan_comparison(ts: float, alpha: float, kp: float, window_s: float) -> dict[str, tuple[float, float]]:
    """RMS tracking error (measured output, exact output) of each controller, from SCORE_FROM_S."""
    plant = make_plant("fan")
    u0 = plant.steady_input("speed_rpm", FAN_REFERENCE["initial"])
    k, tau, theta = identify_fopdt(plant, ts, 1500.0, 2100.0)
    # Sanity of the identification against the model: gain near the static gain, tau near the
    # linearised mechanical time constant, dead time about the one-sample transport delay.
    assert k == pytest.approx(plant.static_gain("speed_rpm", plant.steady_input("speed_rpm", 1800.0)), rel=0.1)
    assert 0.5 < tau < 0.9 and ts <= theta < ts + 0.01

    controllers = {
        "iP": Controller(ControlParams(law="iP", order=1, alpha=alpha, kp=kp, estimator="algebraic",
                                       window_s=window_s), ts=ts, u_min=0.0, u_max=100.0, u_hold=u0),
        "oracle": OracleController(plant, "speed_rpm", kp=kp),
    }
    for name, tau_c in (("PI SIMC tau_c=theta", None), ("PI SIMC tau_c=1/Kp", 1.0 / kp)):
        pkp, pki, pkd = simc_pid(k, tau, theta, tau_c)
        controllers[name] = Controller(
            ControlParams(law="PID", kp=pkp, ki=pki, kd=pkd, pid_u0=u0, window_s=window_s),
            ts=ts, u_min=0.0, u_max=100.0, u_hold=u0)
    scores = {}
    for name, controller in controllers.items():
        result = _fan_run(plant, controller, ts)
        scores[name] = (result.rms_error(SCORE_FROM_S), result.rms_error(SCORE_FROM_S, true_output=True))
    print(f"\nfan speed tracking at {1 / ts:.0f} Hz, sensor noise {plant.nominal_noise_std['speed_rpm']} rpm "
          f"std; FOPDT K={k:.2f} rpm/%, tau={tau:.3f} s, theta={theta * 1000:.1f} ms; "
          f"iP alpha={alpha}, Kp={kp}, window={window_s * 1000:.0f} ms")
    for name, (measured, exact) in scores.items():
        print(f"  {name:22s} RMS {measured:7.2f} rpm (measured)  {exact:7.2f} rpm (exact output)")
    print(f"  iP / oracle: {scores['iP'][0] / scores['oracle'][0]:.3f} (measured), "
          f"{scores['iP'][1] / scores['oracle'][1]:.2f} (exact output)")
    return scores


def test_fan_ip_within_1p1_of_oracle_and_better_than_simc_pi():
    # 500 Hz. alpha 40 rpm/s per % (the plant's quasi-static true_alpha is 42.7), Kp = 12 1/s
    # (closed-loop time constant 83 ms, eight times faster than the fan's 0.67 s), window 60 ms.
    scores = _fan_comparison(ts=0.002, alpha=40.0, kp=12.0, window_s=0.06)
    ip, oracle = scores["iP"], scores["oracle"]
    # The target of the design: tracking RMS (what the rig reports: measured output) within
    # 1.1x of the oracle. About 1.07 here; on the exact output the iP's F-estimation lag shows
    # more (about 2x of the oracle's small 1.8 rpm), which the print above reports.
    assert ip[0] <= 1.1 * oracle[0]
    for name in ("PI SIMC tau_c=theta", "PI SIMC tau_c=1/Kp"):
        assert ip[0] < scores[name][0] and ip[1] < scores[name][1], name


def test_fan_ip_at_the_demo_rate_of_100_hz():
    # At 100 Hz the window must span 10 samples (100 ms) to average the same sensor noise, and its
    # lag costs more: iP / oracle is about 1.16 on the measured output. The 1.1 target holds at
    # 500 Hz (test above); here 1.25 guards against regressions, and the PI baselines must lose.
    scores = _fan_comparison(ts=0.01, alpha=40.0, kp=12.0, window_s=0.1)
    assert scores["iP"][0] <= 1.25 * scores["oracle"][0]
    for name in ("PI SIMC tau_c=theta", "PI SIMC tau_c=1/Kp"):
        assert scores["iP"][0] < scores[name][0] and scores["iP"][1] < scores[name][1], name


def test_motor_ipd_tracks_a_blended_position_step():
    # One revolution in 0.6 s (quintic blend), then half a revolution back; (Kp, Kd) = (w^2, 2 zeta w)
    # with w = 15 rad/s, zeta = 1; alpha = 50 rad/s^2 per V (the plant's quasi-static value).
    ts = 0.002
    plant = make_plant("motor")
    kp, kd = ipd_gains(15.0, 1.0)
    move = 2 * math.pi
    reference = build_reference({"kind": "levels", "initial": 0.0, "blend_s": 0.6,
                                 "steps": [{"at": 0.5, "to": move}, {"at": 2.5, "to": -math.pi}]})
    controller = Controller(ControlParams(law="iPD", order=2, alpha=50.0, kp=kp, kd=kd,
                                          estimator="algebraic", window_s=0.02),
                            ts=ts, u_min=-12.0, u_max=12.0, u_hold=0.0)
    result = run_offline(plant, controller, reference, ActuatorShaper(-12.0, 12.0, 0.0, None),
                         ts=ts, duration_s=4.0, output="position_rad",
                         sensor=SensorModel.nominal(plant, 1.0, seed=3))
    error = result.y_true - result.r
    after_warmup = result.t >= 0.3
    assert np.max(np.abs(error[after_warmup])) < 0.03 * move
    assert result.rms_error(0.3) < 0.01 * move
    counts = 2 * math.pi / plant.params.encoder_counts_per_rev
    assert abs(error[-1]) < 2 * counts                     # settled to the encoder's resolution
    assert np.max(np.abs(result.u)) < 12.0                 # never saturated: a fair test


def test_motor_ip_tracks_speed_and_rejects_a_load_step():
    # Speed 0 -> 80 -> -40 rad/s (through zero: dry friction reverses), then a braking load
    # step of 0.03 N m at 2 s (holding the speed then takes about 0.03 R / K = 1.2 V more).
    ts = 0.002
    plant = make_plant("motor", {"load_step_time_s": 2.0, "load_step_torque_nm": 0.03})
    reference = build_reference({"kind": "levels", "initial": 0.0, "blend_s": 0.8,
                                 "steps": [{"at": 0.2, "to": 80.0}, {"at": 1.1, "to": -40.0}]})
    controller = Controller(ControlParams(law="iP", order=1, alpha=50.0, kp=20.0,
                                          estimator="algebraic", window_s=0.02),
                            ts=ts, u_min=-12.0, u_max=12.0, u_hold=0.0)
    result = run_offline(plant, controller, reference, ActuatorShaper(-12.0, 12.0, 0.0, None),
                         ts=ts, duration_s=3.0, output="speed_rad_s",
                         sensor=SensorModel.nominal(plant, 1.0, seed=3))
    error = result.y_true - result.r
    assert result.rms_error(0.1, true_output=True) < 0.5           # rad/s, on an 80 rad/s move
    assert np.max(np.abs(error[result.t >= 0.1])) < 1.5
    window = (result.t >= 2.0) & (result.t < 2.5)
    assert np.max(np.abs(error[window])) > 0.3                    # the load step was felt ...
    assert np.max(np.abs(error[result.t >= 2.6])) < 0.3           # ... and rejected
    assert np.max(np.abs(result.u)) < 12.0
