"""The bump test (`rigloop identify`): the plan, the estimators, the refusals, the suggestions,
the command.

Sources outside the project:
- synthetic step responses are generated with scipy.signal.lsim (exact zero-order-hold
  simulation of a linear state-space model), not with the code under test;
- the least-squares slope is checked against numpy.polyfit and the textbook variance of a
  regression slope, σ²/Σ(t − t̄)² (from memory);
- the noise floor against the variance of a weighted sum of independent samples (second
  differences: 6σ², a standard result) and a uniform quantizer's noise q/√12 (standard result);
- the end-to-end checks compare with the simulator's own plant model (rigloop.plants:
  ``true_alpha`` = quasi-static d(y^(m))/du, ``static_gain`` = dy_ss/du at the operating
  point), ±15 % on alpha and the gain.
"""

from __future__ import annotations

import json
import math
import os
import signal
from pathlib import Path

import numpy as np
import pytest
import yaml
from scipy import signal as sps

from rigloop.analysis.identify import (
    BumpDriver,
    BumpPlan,
    EstimationError,
    PlanError,
    Schedule,
    analyse_bump,
    config_snippet,
    default_operating_point,
    estimator_noise_gain,
    fit_fopdt,
    fopdt_response,
    initial_slope_alpha,
    judge,
    noise_floor,
    plan_bump,
    reading_quantum,
    snippet_overrides,
    suggest_settings,
)
from rigloop.cli import main
from rigloop.control.estimators import make_kernel
from rigloop.control.kernels import slope_weights
from rigloop.control.window_choice import input_lag, noise_gain, shortest_window, window_for_noise
from rigloop.plants import make_plant

ROOT = Path(__file__).resolve().parents[2]
DEMO_FAN = str(ROOT / "configs" / "demo_fan.yaml")
DEMO_MOTOR = str(ROOT / "configs" / "demo_motor.yaml")
FAN_PLAN = str(ROOT / "configs" / "plans" / "fan_plan.yaml")
# Lockstep: deterministic and faster than real time. The stale-data trip counts wall time, and
# this machine is shared, so the tests allow the host half a second of stall.
LOCKSTEP = ["--set", "device.sim.clock=lockstep", "--set", "limits.stale_periods=250",
            "--set", "device.watchdog_ms=100"]
# The motor spins freely during a speed bump test: widen the demo's position limits.
MOTOR_FREE = ["--set", "limits.position_rad.min=-100000", "--set", "limits.position_rad.max=100000"]


# ------------------------------------------------------------------------ synthetic records
def lsim_fopdt(order: int, k: float, tau: float, theta: float, t: np.ndarray, u: np.ndarray,
               fine: int = 10) -> np.ndarray:
    """Samples of K·e^(−θs)/(τs + 1) (times 1/s for order 2) driven by the zero-order-hold u.

    Reference: scipy.signal.lsim on a grid ``fine`` times finer (exact for a ZOH input); θ must
    be a whole number of fine steps. Starts from rest at u[0] (deviation variables).
    """
    ts = float(t[1] - t[0])
    h = ts / fine
    shift = int(round(theta / h))
    assert abs(shift * h - theta) < 1e-12
    uf = np.repeat(u - u[0], fine)
    uf = np.concatenate((np.zeros(shift), uf[: uf.size - shift]))
    tf = np.arange(uf.size) * h
    if order == 1:
        sys = sps.StateSpace([[-1.0 / tau]], [[k / tau]], [[1.0]], [[0.0]])
    else:
        sys = sps.StateSpace([[0.0, 1.0], [0.0, -1.0 / tau]], [[0.0], [k / tau]], [[1.0, 0.0]], [[0.0]])
    _, yf, _ = sps.lsim(sys, uf, tf, interp=False)
    return yf[::fine]


def slewed_bump(plan: BumpPlan, ts: float) -> tuple[np.ndarray, np.ndarray, Schedule]:
    """(t, applied u, schedule) of a fixed-hold bump profile after a slew limiter, one sample of
    transport delay (the profile needs no output: every hold lasts its fixed length)."""
    assert plan.fixed
    driver = BumpDriver(plan, ts)
    n = int(round(plan.duration_s / ts)) + 2
    t = np.arange(n) * ts
    u = np.empty(n)
    prev = plan.safe
    for i, ti in enumerate(t):
        target = driver(ti - ts) if i else plan.safe
        step = plan.slew_per_s * ts if plan.slew_per_s else math.inf
        prev = prev + max(-step, min(step, target - prev))
        u[i] = prev
    return t, u, driver.schedule()


def fan_like_plan(**kw) -> BumpPlan:
    """A fixed-hold profile (a function of time alone: the synthetic records need no feedback)."""
    args = dict(rate_hz=500.0, at=50.0, step=10.0, settle_s=3.0, hold_s=2.5, ramp_s=2.0, steps=4)
    args.update(kw)
    return plan_bump(0.0, 100.0, 0.0, 250.0, **args)


def first_order_record(plan: BumpPlan, ts: float, k: float, tau: float, theta: float = 0.0, *,
                       order: int = 1, sigma: float = 0.0, seed: int = 0, dead_zone: float = 0.0,
                       base: float = 0.0) -> tuple[np.ndarray, np.ndarray, np.ndarray, Schedule]:
    """(t, y, applied u, schedule) of a linear plant (lsim) driven by the bump profile; with a
    dead zone the plant sees ``max(u − dead_zone, 0)``; white noise of ``sigma`` on y."""
    t, u, sched = slewed_bump(plan, ts)
    drive = np.maximum(u - dead_zone, 0.0) if dead_zone else u
    y = base + lsim_fopdt(order, k, tau, theta, t, drive)
    if sigma:
        y = y + np.random.default_rng(seed).normal(0.0, sigma, t.size)
    return t, y, u, sched


# ------------------------------------------------------------------------------- planning
def test_default_operating_point_is_the_middle_or_halfway_to_max_for_a_bipolar_drive():
    assert default_operating_point(0.0, 100.0, 0.0) == 50.0          # fan duty: safe is "off"
    assert default_operating_point(-12.0, 12.0, 0.0) == 6.0          # motor: safe is the middle
    assert default_operating_point(-12.0, 12.0, 0.0, order=2) == 0.0  # a position: around rest
    plan = plan_bump(0.0, 100.0, 0.0, 250.0, rate_hz=500.0)
    assert (plan.u0, plan.du, plan.ramp_s, plan.steps, plan.budget_s) == (50.0, 10.0, 4.0, 6, 120.0)
    assert not plan.fixed and plan.duration_s == 120.0 and plan.hold_min_s == 1.0


def test_a_fixed_profile_ramps_slowly_then_steps_both_ways_around_u0():
    plan = plan_bump(0.0, 100.0, 0.0, 250.0, rate_hz=500.0, at=40.0, step=-5.0, ramp_s=2.0, steps=4,
                     settle_s=4.0, hold_s=3.0)
    assert plan.fixed and plan.duration_s == pytest.approx(2.0 + 4.0 + 4 * 3.0)
    driver = BumpDriver(plan, 0.002)
    times = np.arange(0.0, plan.duration_s + 1.0, 0.002)
    u = np.array([driver(t) for t in times])
    assert u[0] == 0.0 and u[500] == pytest.approx(20.0) and u[1000] == 40.0
    levels = [u[int((6.0 + k * 3.0 + 0.5) / 0.002)] for k in range(4)]
    assert levels == [35.0, 40.0, 45.0, 40.0]          # down first, back, up, back
    sched = driver.schedule()
    assert driver.finished and sched.starts == pytest.approx([6.0, 9.0, 12.0, 15.0], abs=0.003)
    assert sched.t_end == pytest.approx(18.0, abs=0.003) and u[-1] == 40.0
    # the ramp is never faster than the slew limit: 40 % at 250 %/s takes 0.16 s
    assert plan_bump(0.0, 100.0, 0.0, 250.0, rate_hz=500.0, at=40.0, ramp_s=0.0).ramp_s == pytest.approx(0.16)


def _play(plan: BumpPlan, ts: float, k: float, tau: float, limits=(None, None), order: int = 1):
    """Play the profile against y' = (−y + K·u)/τ (exact ZOH steps; order 2: the output is the
    integral of that y), the output observed."""
    driver = BumpDriver(plan, ts, order, limits)
    y, pos, u, t = 0.0, 0.0, plan.safe, 0.0
    a = math.exp(-ts / tau)
    while not driver.finished and t < plan.duration_s + 1.0:
        driver.observe(t, y if order == 1 else pos)
        u = driver(t)
        pos += ts * y
        y = a * y + (1 - a) * k * u
        t += ts
    return driver


def test_holds_last_until_settled_about_five_time_constants():
    plan = plan_bump(0.0, 100.0, 0.0, None, rate_hz=500.0, at=50.0, ramp_s=1.0)
    for tau in (0.2, 0.8):
        driver = _play(plan, 0.002, 30.0, tau)
        holds = driver.hold_lengths
        assert len(driver.starts) == 6 and driver.finished
        # a first-order response is within 1 % of its level after 4.6 τ; held 5–7 τ
        assert all(4.6 * tau <= h <= 7.0 * tau or h == pytest.approx(1.0, abs=0.01) for h in holds), holds


def test_a_slow_rig_gets_fewer_longer_steps_within_the_budget():
    plan = plan_bump(0.0, 100.0, 0.0, None, rate_hz=100.0, at=50.0, ramp_s=1.0, budget_s=60.0)
    driver = _play(plan, 0.01, 30.0, 8.0)           # τ = 8 s: 5 τ = 40 s will not fit twice
    assert len(driver.starts) == 2 and driver.finished
    assert driver.schedule().t_end <= plan.budget_s + 0.011


def test_an_excursion_of_a_position_ends_before_it_reaches_its_limit():
    plan = plan_bump(-12.0, 12.0, 0.0, None, rate_hz=500.0, at=0.0, step=2.0)
    # position of a rate 0.5 x u (τ = 50 ms): 1 unit/s at 2 V; limits [-1, 1.5], guard band
    # [-0.375, 0.875]: the first excursion (from 0) ends there, after about 0.9 s, instead of
    # running on until its hold is up
    driver = _play(plan, 0.002, 0.5, 0.05, limits=(-1.0, 1.5), order=2)
    assert driver.guarded_holds and driver.guarded_holds[0] == 1      # counted from 1
    assert 0.8 < driver.hold_lengths[0] < 0.95


def test_the_number_of_steps_follows_the_budget():
    kw = dict(rate_hz=500.0, settle_s=2.0, hold_s=2.0, ramp_s=1.0)
    assert plan_bump(0.0, 100.0, 0.0, None, steps=2, **kw).duration_s == pytest.approx(7.0)
    # a fixed profile must end below the run limit
    with pytest.raises(PlanError, match="max_duration_s"):
        plan_bump(0.0, 100.0, 0.0, None, steps=8, max_duration_s=12.0, **kw)
    # holding until settled: the budget is bounded by the run limit
    assert plan_bump(0.0, 100.0, 0.0, None, rate_hz=500.0, max_duration_s=40.0).budget_s == 38.0


@pytest.mark.parametrize("kwargs, option, words", [
    ({"step": 60.0}, "--step", ["--step 60", "[0, 100]", "at most 50"]),
    ({"at": 95.0}, "--step", ["default step 10", "at most 5"]),
    ({"at": 120.0}, "--operating-level", ["--operating-level 120", "[0, 100]"]),
    ({"step": 0.0}, "--step", ["--step 0", "non-zero"]),
    ({"hold_s": 0.01}, "--hold", ["--hold 0.01", ">= "]),
    ({"steps": 3}, "--steps", ["--steps 3", "even"]),
    ({"steps": 10}, "--steps", ["--steps 10", "to 8"]),
    ({"budget_s": 5.0}, "--budget", ["--budget 5", "do not fit"]),
    ({"steps": 8, "hold_s": 3.0, "settle_s": 4.0, "max_duration_s": 20.0}, "--steps", ["max_duration_s", "20"]),
    ({"ramp_s": -1.0}, "--ramp", ["--ramp -1", ">= 0"]),
])
def test_plans_outside_the_limits_are_refused_with_the_option_named(kwargs, option, words):
    with pytest.raises(PlanError) as err:
        plan_bump(0.0, 100.0, 0.0, 250.0, rate_hz=500.0, **kwargs)
    assert err.value.option == option
    for w in words:
        assert w in str(err.value)


# ------------------------------------------------------------------ pure estimator pieces
def test_slope_noise_gain_matches_the_regression_textbook_and_numpy_polyfit():
    ts = 0.002
    for n in (4, 30, 200):
        count = n + 1
        # variance of a least-squares slope: σ²/Σ(t − t̄)² = 12σ²/(Ts²·N(N² − 1)) (from memory)
        assert estimator_noise_gain(1, n, ts) ** 2 == pytest.approx(12.0 / (ts * ts * count * (count ** 2 - 1)),
                                                                    rel=1e-12)
        assert noise_gain("algebraic", 1, n, ts) == pytest.approx(estimator_noise_gain(1, n, ts), rel=1e-12)
    rng = np.random.default_rng(3)
    y = rng.normal(size=31)
    t = np.arange(31) * ts
    assert float(np.dot(slope_weights(30, ts), y)) == pytest.approx(np.polyfit(t, y, 1)[0], rel=1e-9)


def test_each_estimator_kind_has_its_own_noise_gain():
    ts, n = 0.002, 40
    # averaging, order 1: (y_k − y_{k−n})/(n·Ts): two samples of weight 1/(n·Ts) -> √2/(n·Ts)
    assert noise_gain("averaging", 1, n, ts) == pytest.approx(math.sqrt(2) / (n * ts), rel=1e-12)
    # one-step: (y_k − y_{k−1})/Ts -> √2/Ts; order 2: (1, −2, 1)/Ts² -> √6/Ts²
    assert noise_gain("one-step", 1, n, ts) == pytest.approx(math.sqrt(2) / ts, rel=1e-12)
    assert noise_gain("one-step", 2, n, ts) == pytest.approx(math.sqrt(6) / ts ** 2, rel=1e-12)
    # measured: the standard deviation of F̂ over white noise equals σ·gain for every kind
    rng = np.random.default_rng(7)
    noise = rng.normal(0.0, 2.0, 200_000)
    for kind in ("algebraic", "averaging", "one-step"):
        k = make_kernel(kind, 1, n, ts)
        f = np.convolve(noise, k.y_weights[::-1], mode="valid")
        assert np.std(f) == pytest.approx(2.0 * noise_gain(kind, 1, n, ts), rel=0.03), kind


@pytest.mark.parametrize("kind", ["algebraic", "averaging"])
@pytest.mark.parametrize("order", [1, 2])
def test_window_for_noise_is_the_shortest_window_meeting_the_target(kind, order):
    ts, sigma = 0.002, 0.5
    target = sigma * noise_gain(kind, order, 60, ts) * 1.0001
    n, sigma_f = window_for_noise(kind, order, sigma, ts, target, 5000)
    assert sigma_f <= target < sigma * noise_gain(kind, order, n - 1, ts)
    assert n >= shortest_window(kind, order)
    # clamps: a noiseless signal takes the shortest window; a hopeless target the longest
    assert window_for_noise(kind, order, 0.0, ts, 1.0, 50)[0] == shortest_window(kind, order)
    assert window_for_noise(kind, order, sigma, ts, 1e-9, 50)[0] == 50


def test_noise_floor_ignores_a_ripple_that_repeats_with_position():
    """A geared rig's load ripple along a move is motion, not noise: the second differences
    see the white noise alone (variance 6σ², a standard result); the deviation about a fitted
    line sees the ripple too."""
    ts, sigma = 0.002, 0.05
    t = np.arange(3000) * ts
    position = 40.0 * t                                     # a move at 40 units/s
    ripple = 0.4 * np.sin(2 * np.pi * position / 8.0)       # repeats every 8 units: 5 Hz
    y = position + ripple + np.random.default_rng(4).normal(0.0, sigma, t.size)
    floor = noise_floor([y])
    assert floor.sigma == pytest.approx(sigma, rel=0.05)
    resid = y - np.polyval(np.polyfit(t, y, 2), t)
    assert np.std(resid) > 4 * sigma                        # what the old estimate counted


def test_noise_floor_of_quantized_readings_is_q_over_sqrt_12():
    """Readings that stand still on one count do not change: the floor is the uniform
    quantizer's q/√12 (standard result), not zero."""
    q = 2 * math.pi / 4096
    holds = [np.full(500, 100 * q), np.full(500, 101 * q), np.full(500, 103 * q)]
    assert reading_quantum(np.concatenate(holds)) == pytest.approx(q, rel=1e-9)
    floor = noise_floor(holds)
    assert floor.sigma_diff == 0.0
    assert floor.sigma == pytest.approx(q / math.sqrt(12), rel=1e-9)
    assert "quantization" in floor.source
    # a slow move through the counts: the rounding error is a sawtooth of the same q/√12; the
    # second differences read it within a quarter
    moving = q * np.round((1.234 + 0.5 * np.arange(2000) * 0.002) / q)
    assert reading_quantum(moving) == pytest.approx(q, rel=1e-6)
    assert q / math.sqrt(12) <= noise_floor([moving]).sigma <= 1.25 * q / math.sqrt(12)
    assert reading_quantum(np.random.default_rng(1).normal(size=500)) == 0.0


@pytest.mark.parametrize("order", [1, 2])
def test_fopdt_response_equals_scipy_lsim(order):
    plan = fan_like_plan()
    ts = 0.002
    t, u, sched = slewed_bump(plan, ts)
    k, tau, theta = 30.0, 0.4, 0.0064
    ref = lsim_fopdt(order, k, tau, theta, t, u)
    du = np.diff(u)
    changes = np.nonzero(du)[0] + 1
    ours = fopdt_response(order, t, t[changes], du[changes - 1], k, tau, theta)
    assert np.max(np.abs(ours - ref)) <= 1e-9 * np.max(np.abs(ref))


def test_alpha_of_an_exact_first_order_response_is_k_over_tau():
    """y' = (−y + K·u)/τ has y' = F + (K/τ)·u: the initial slope per unit input is K/τ."""
    plan = fan_like_plan(settle_s=8.0)
    ts = 0.002
    t, u, sched = slewed_bump(plan, ts)
    k, tau = 30.0, 0.7
    y = lsim_fopdt(1, k, tau, 0.0, t, u)
    i_step = int(np.argmax(t >= sched.starts[0]))
    i_step += int(np.argmax(u[i_step:] != u[i_step - 1]))
    base = y[i_step - 1]
    dy, du = y - base, u - u[i_step - 1]
    # the ramp has settled by then (8 s = 11 τ): what is left of its motion is below 1e-4
    alpha, raw, _ = initial_slope_alpha(1, dy, du, ts, i_step, 70, tau=tau)
    assert alpha == pytest.approx(k / tau, rel=1e-3)
    # without the drift correction the slope reads low by about (T/2 − t_slew/2)/τ: the output
    # has moved by alpha·du times the window's mean age, less the half slew time (our estimate)
    assert raw == pytest.approx(k / tau * (1 - (0.14 / 2 - plan.slew_time_s / 2) / tau), rel=0.01)


@pytest.mark.parametrize("order", [1, 2])
def test_a_noise_free_bump_gives_the_exact_model(order):
    plan = fan_like_plan()
    ts = 0.002
    k, tau, theta = 30.0, 0.45, 0.0074
    t, y, u, sched = first_order_record(plan, ts, k, tau, theta, order=order, base=1000.0)
    est = analyse_bump(t, y, u, order=order, plan=plan, schedule=sched, ts=ts)
    refusals, _ = judge(est, plan)
    assert refusals == []
    assert est.alpha == pytest.approx(k / tau, rel=2e-3) and est.alpha_spread < 2e-3 * k / tau
    assert est.gain == pytest.approx(k, rel=1e-4)
    assert est.tau == pytest.approx(tau, rel=1e-3)
    assert est.theta == pytest.approx(theta, abs=0.05 * ts)
    assert est.noise_std < 1e-6 * k
    assert len(est.steps) == 4 and [s.direction for s in est.steps] == ["up", "down", "down", "up"]


def test_fit_on_a_level_that_had_not_settled():
    """The free motion before the step (an exponential approach) is modelled, not mistaken for θ."""
    ts = 0.002
    t = np.arange(2500) * ts
    i0 = 500
    u = np.where(t >= t[i0], 2.0, 0.0)
    k, tau = 10.0, 0.5
    y = lsim_fopdt(1, k, tau, 0.0, t, u) - 3.0 * np.exp(-t / tau)   # still rising 3 units
    fit = fit_fopdt(1, t[300:], y[300:], t[i0], np.array([t[i0]]), np.array([2.0]), ts=ts)
    assert fit.gain == pytest.approx(k, rel=1e-4) and fit.tau == pytest.approx(tau, rel=1e-4)
    assert fit.theta < 0.01 * ts and abs(fit.drift) < 1e-6


def test_a_drifting_load_is_removed_using_the_trends_before_and_after():
    """A slow ramp of the load adds a trend to the level; the levels and the fit remove it."""
    plan = fan_like_plan(hold_s=3.0, settle_s=3.0)
    ts = 0.002
    k, tau = 30.0, 0.45
    t, y, u, sched = first_order_record(plan, ts, k, tau)
    drift = 25.0                                  # output units per second: 75 per hold
    est = analyse_bump(t, y + drift * t, u, order=1, plan=plan, schedule=sched, ts=ts)
    assert est.gain == pytest.approx(k, rel=0.01)
    assert est.gain_levels == pytest.approx(k, rel=0.05)   # the levels see the step's tail
    assert est.alpha == pytest.approx(k / tau, rel=0.02)
    assert all(s.drift == pytest.approx(drift, rel=0.05) for s in est.steps)


def test_a_noisy_bump_with_delay_recovers_k_tau_theta_within_tolerance():
    plan = fan_like_plan(settle_s=4.0, hold_s=3.0)
    ts = 0.002
    k, tau, theta, sigma = 30.0, 0.6, 0.0204, 8.0
    t, y, u, sched = first_order_record(plan, ts, k, tau, theta, sigma=sigma, seed=11, base=1500.0)
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    assert est.gain == pytest.approx(k, rel=0.02)
    assert est.tau == pytest.approx(tau, rel=0.05)
    assert est.theta == pytest.approx(theta, abs=3 * ts)
    assert est.noise_std == pytest.approx(sigma, rel=0.05)
    assert est.alpha == pytest.approx(k / tau, rel=0.10)
    assert est.alpha_fopdt == pytest.approx(k / tau, rel=0.05)
    assert judge(est, plan)[0] == []


def test_a_dead_zone_is_found_on_the_ramp():
    plan = fan_like_plan(ramp_s=4.0)
    ts = 0.002
    k, tau, dz = 30.0, 0.3, 12.0
    t, y, u, sched = first_order_record(plan, ts, k, tau, sigma=2.0, seed=3, dead_zone=dz)
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    assert est.dead_zone.found
    # the lag correction brings the edge within about one per cent of duty of the truth
    assert est.dead_zone.u_start == pytest.approx(dz, abs=1.0)
    assert est.dead_zone.u_start_raw > est.dead_zone.u_start
    assert est.alpha == pytest.approx(k / tau, rel=0.10)
    refusals, notes = judge(est, plan)
    assert refusals == [] and any("dead zone" in n for n in notes)
    # the same rig stepped into its dead zone is refused
    plan_low = fan_like_plan(ramp_s=4.0, at=18.0, step=8.0)
    t, y, u, sched = first_order_record(plan_low, ts, k, tau, sigma=2.0, seed=3, dead_zone=dz)
    refusals, _ = judge(analyse_bump(t, y, u, order=1, plan=plan_low, schedule=sched, ts=ts), plan_low)
    assert any("dead zone" in r.reason for r in refusals)


# ------------------------------------------------------------------------------ refusals
def test_no_response_is_an_estimation_error():
    plan = fan_like_plan()
    ts = 0.002
    t, u, sched = slewed_bump(plan, ts)
    y = 700.0 + np.random.default_rng(2).normal(0.0, 5.0, t.size)
    with pytest.raises(EstimationError, match="no response to the steps"):
        analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts, output="speed_rpm")


def test_an_output_that_hardly_moved_is_refused():
    plan = fan_like_plan()
    ts = 0.002
    # a response of 2 noise standard deviations: measurable on average, but hidden in the noise
    t, y, u, sched = first_order_record(plan, ts, 0.2, 0.3, sigma=1.0, seed=5)
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    refusals, _ = judge(est, plan)
    assert any("hardly moved" in r.reason for r in refusals)
    assert all(r.advice for r in refusals)


def test_steps_that_disagree_in_sign_are_refused():
    """A rig that answers |u − u0| (both excursions raise the output) has no alpha."""
    plan = fan_like_plan()
    ts = 0.002
    t, u, sched = slewed_bump(plan, ts)
    folded = np.where(t > plan.ramp_s, plan.u0 + np.abs(u - plan.u0), u)
    y = lsim_fopdt(1, 30.0, 0.3, 0.0, t, folded)
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    refusals, _ = judge(est, plan)
    assert any("opposite sign" in r.reason for r in refusals)


def test_a_fit_on_its_search_bound_is_refused():
    plan = fan_like_plan()
    ts = 0.002
    # τ = 200 s against holds of 2.5 s: the fit's τ runs into its upper bound
    t, y, u, sched = first_order_record(plan, ts, 3000.0, 200.0, sigma=0.5, seed=2)
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    refusals, _ = judge(est, plan)
    assert any("search bound" in r.reason for r in refusals)


def test_a_correction_that_outweighs_the_data_and_a_sign_contradiction_are_refused():
    plan = fan_like_plan()
    ts = 0.002
    t, y, u, sched = first_order_record(plan, ts, 30.0, 0.45)
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    step = est.steps[0]
    step.alpha_source = "slope"                           # the model-free slope was used, and
    step.alpha_uncorrected = -0.1 * step.alpha_slope      # the slope measured was about nothing
    refusals, _ = judge(est, plan)
    assert any("outweighs" in r.reason for r in refusals)
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    est.gain = -est.gain
    refusals, _ = judge(est, plan)
    assert any("opposite signs" in r.reason for r in refusals)
    with pytest.raises(EstimationError, match="contradicts the sign"):
        suggest_settings(est, plan)


# --------------------------------------------------------------------------- suggestions
def test_suggestions_follow_the_documented_rules():
    plan = fan_like_plan()
    ts = 0.002
    t, y, u, sched = first_order_record(plan, ts, 30.0, 0.5, 0.004, sigma=2.0, seed=5)
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    s = suggest_settings(est, plan)
    assert s.alpha == float(f"{est.alpha:.2g}")
    assert s.sigma_f <= s.sigma_f_target
    theta_loop = est.theta + 1.5 * ts + input_lag("algebraic", 1, s.window_samples, ts)
    assert s.loop_delay_s == pytest.approx(theta_loop)
    assert s.tau_cl == pytest.approx(max(est.tau / 5, 5 * ts, 3 * theta_loop))
    assert s.kp == pytest.approx(1 / s.tau_cl, rel=5e-3)
    # SIMC rules for a first-order model (the paper's PI case, from memory):
    # Kc = τ/(K(τc + θ)), τI = min(τ, 4(τc + θ)); θ here includes the sampling delay 1.5 Ts
    theta = est.theta + 1.5 * ts
    kc = est.tau / (est.gain * (s.tau_cl + theta))
    ti = min(est.tau, 4 * (s.tau_cl + theta))
    assert s.pid_kp == pytest.approx(kc, rel=5e-3) and s.pid_ki == pytest.approx(kc / ti, rel=5e-3)
    assert s.pid_kd == 0.0 and s.pid_u0 == plan.u0
    # a wanted time constant below 5 sample periods is refused
    with pytest.raises(PlanError, match="--tau-cl"):
        suggest_settings(est, plan, tau_cl=4 * ts)

    t, y2, u, sched = first_order_record(plan, ts, 20.0, 0.4, order=2)
    est2 = analyse_bump(t, y2, u, order=2, plan=plan, schedule=sched, ts=ts)
    s2 = suggest_settings(est2, plan, tau_cl=0.1)
    assert (s2.kp, s2.kd) == (pytest.approx(100.0), pytest.approx(20.0))   # (ω², 2ζω), ω = 10, ζ = 1
    # SIMC integrating process with a lag (from memory): Kc = 1/(K(τc + θ)), τI = 4(τc + θ),
    # τD = τ; series form turned into parallel gains
    theta2 = est2.theta + 1.5 * ts
    kc2 = 1.0 / (est2.gain * (0.1 + theta2))
    ti2, td2 = 4 * (0.1 + theta2), est2.tau
    assert s2.pid_kp == pytest.approx(kc2 * (1 + td2 / ti2), rel=5e-3)
    assert s2.pid_ki == pytest.approx(kc2 / ti2, rel=5e-3)
    assert s2.pid_kd == pytest.approx(kc2 * td2, rel=5e-3)

    snippet = yaml.safe_load(config_snippet(s))
    assert snippet == {"control": {"alpha": s.alpha, "kp": s.kp, "kd": s.kd, "input_delay_s": 0.0,
                                   "estimator": {"kind": "algebraic", "window_s": s.window_s}},
                       "limits": {"plausibility": {"response_s": s.response_s}}}
    assert suggest_settings(est, plan, delay_aware=True).input_delay_s == float(f"{est.theta:.2g}")
    # the plausibility response time: dead time + time constant + window (2 digits)
    assert s.response_s == pytest.approx(s.pid_theta + est.tau + s.window_s, rel=0.05)
    assert snippet_overrides(s)[0] == f"control.alpha={s.alpha!r}"


def test_the_closed_loop_is_never_faster_than_three_times_the_delay():
    """SIMC: τc >= θ ('Simple analytic rules for model reduction and PID controller tuning',
    Journal of Process Control, 2003); the law's own dead time is added and the multiple is 3."""
    plan = fan_like_plan(hold_s=3.0)
    ts = 0.002
    theta = 0.06                                   # a long transport delay against τ/5 = 0.1 s
    t, y, u, sched = first_order_record(plan, ts, 30.0, 0.5, theta, sigma=1.0, seed=8)
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    assert est.theta == pytest.approx(theta, abs=2 * ts)
    s = suggest_settings(est, plan)
    assert s.tau_cl >= 3 * (est.theta + 1.5 * ts) and "dead time" in s.tau_cl_rule
    s_fast = suggest_settings(est, plan, tau_cl=0.05)
    assert any("overshoot" in n for n in s_fast.notes)


@pytest.mark.parametrize("kind", ["algebraic", "averaging", "one-step"])
def test_the_window_meets_the_noise_target_for_the_configured_kind(kind):
    plan = fan_like_plan()
    ts = 0.002
    t, y, u, sched = first_order_record(plan, ts, 30.0, 0.5, 0.0, sigma=6.0, seed=6)
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    s = suggest_settings(est, plan, kind=kind)
    # measured: F̂'s noise with the suggested kind and window, on white noise of the floor's σ
    k = make_kernel(s.estimator_kind, 1, s.window_samples, ts)
    f = np.convolve(np.random.default_rng(1).normal(0.0, est.noise_std, 100_000), k.y_weights, "valid")
    assert np.std(f) <= 1.05 * s.sigma_f_target
    assert s.window_samples >= shortest_window(s.estimator_kind, 1)
    if kind == "one-step":        # its noise gain √2/Ts cannot meet the target: switch kinds
        assert s.estimator_kind == "algebraic" and any("one-step" in n for n in s.notes)
    else:
        assert s.estimator_kind == kind


def test_identify_and_check_agree_on_the_shortest_window():
    from rigloop.config import load_config
    from rigloop.config.derived import derived_quantities

    for order, law, extra in ((1, "iP", []), (2, "iPD", ["control.kd=10"])):
        low = shortest_window("algebraic", order)
        assert window_for_noise("algebraic", order, 0.0, 0.002, 1.0, 100)[0] == low

        def warns(samples):
            cfg = load_config(DEMO_FAN, [f"control.order={order}", f"control.law={law}", *extra,
                                         f"control.estimator.window_s={samples * 0.002!r}"])
            return [d for d in derived_quantities(cfg) if d.label == "estimator window"][0].warning

        assert warns(low - 1) and not warns(low)


# ------------------------------------------------------------------------ the command
def test_a_step_leaving_the_actuator_range_exits_2_naming_step(tmp_path, capsys):
    code = main(["identify", DEMO_FAN, "--step", "60", "--record-dir", str(tmp_path), *LOCKSTEP])
    err = capsys.readouterr().err
    assert code == 2
    assert "--step 60" in err and "[0, 100]" in err and "at most 50" in err
    assert not any(tmp_path.iterdir()), "nothing ran, nothing was recorded"


def test_bad_tau_cl_and_write_folder_exit_2_before_anything_moves(tmp_path, capsys):
    assert main(["identify", DEMO_FAN, "--tau-cl", "0.001", "--record-dir", str(tmp_path)]) == 2
    assert "--tau-cl 0.001" in capsys.readouterr().err
    assert main(["identify", DEMO_FAN, "--snippet-file", str(tmp_path / "no" / "x.yaml"),
                 "--record-dir", str(tmp_path)]) == 2
    assert "does not exist" in capsys.readouterr().err
    assert not any(tmp_path.iterdir())


def _flatten(tree: dict, prefix: str = "") -> list[str]:
    out = []
    for key, value in tree.items():
        if isinstance(value, dict):
            out += _flatten(value, f"{prefix}{key}.")
        else:
            out.append(f"{prefix}{key}={value!r}")
    return out


@pytest.fixture(scope="module")
def fan_identified(tmp_path_factory):
    """One bump test on the simulated fan (lockstep), as JSON, with --snippet-file."""
    folder = tmp_path_factory.mktemp("fan_identify")
    snippet = folder / "suggested.yaml"
    import contextlib
    import io

    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(["identify", DEMO_FAN, *LOCKSTEP, "--json", "--snippet-file", str(snippet),
                     "--record-dir", str(folder / "sessions")])
    return code, json.loads(out.getvalue()), snippet, folder


@pytest.mark.slow
def test_fan_bump_test_recovers_the_plant_alpha_and_gain(fan_identified):
    code, report, snippet, _ = fan_identified
    assert code == 0
    u0 = report["plan"]["u0"]
    assert u0 == 50.0
    plant = make_plant("fan")
    plant.reset(u0)
    true_alpha = plant.true_alpha("speed_rpm", 1, u0)
    true_gain = plant.static_gain("speed_rpm", u0)
    est = report["estimates"]
    assert est["alpha"] == pytest.approx(true_alpha, rel=0.15)
    assert est["gain"] == pytest.approx(true_gain, rel=0.15)
    assert len(est["steps"]) == 6 and {s["direction"] for s in est["steps"]} == {"up", "down"}
    for step in est["steps"]:
        assert step["responded"] and step["alpha"] == pytest.approx(true_alpha, rel=0.20)
    assert est["noise_std"] > 0 and report["refusals"] == []


@pytest.mark.slow
def test_fan_session_is_recorded_with_an_identify_block(fan_identified):
    _, report, snippet, _ = fan_identified
    folder = Path(report["session"])
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "completed"
    block = meta["identify"]
    assert block["estimates"]["alpha"] == pytest.approx(report["estimates"]["alpha"])
    assert block["suggestions"]["kp"] == report["suggestions"]["kp"]
    header = (folder / "samples.csv").read_text().splitlines()[0].split(",")
    assert {"t", "u", "speed_rpm", "state"} <= set(header)
    assert report["written"] == str(snippet) and snippet.read_text() == report["snippet"]


@pytest.mark.slow
def test_written_snippet_and_its_pid_block_pass_rigloop_check(fan_identified, capsys):
    _, _, snippet, _ = fan_identified
    text = snippet.read_text()
    tree = yaml.safe_load(text)
    assert set(_flatten(tree)) and {k.split("=")[0] for k in _flatten(tree)} == {
        "control.alpha", "control.kp", "control.kd", "control.input_delay_s", "control.estimator.kind",
        "control.estimator.window_s", "limits.plausibility.response_s"}
    sets = [a for kv in _flatten(tree) for a in ("--set", kv)]
    assert main(["check", DEMO_FAN, *sets]) == 0
    pid_lines = [line[2:] for line in text.splitlines() if line.startswith("#   ") or line == "# control:"]
    pid = yaml.safe_load("\n".join(pid_lines))
    assert pid["control"]["law"] == "PID"
    sets = [a for kv in _flatten(pid) for a in ("--set", kv)]
    assert main(["check", DEMO_FAN, *sets]) == 0
    out = capsys.readouterr()
    assert "config error" not in out.err


@pytest.mark.slow
def test_suggested_ip_meets_the_fan_plan_and_a_ten_times_alpha_fails_it(fan_identified, tmp_path, capsys):
    _, report, snippet, _ = fan_identified
    sets = [a for kv in _flatten(yaml.safe_load(snippet.read_text())) for a in ("--set", kv)]
    base = ["run", DEMO_FAN, "--plan", FAN_PLAN, *LOCKSTEP, "--quiet"]
    code = main([*base, *sets, "--record-dir", str(tmp_path / "good")])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "Test plan 'fan acceptance': PASSED" in out
    bad_alpha = 10 * report["suggestions"]["alpha"]
    code = main([*base, *sets, "--set", f"control.alpha={bad_alpha!r}", "--record-dir", str(tmp_path / "bad")])
    out = capsys.readouterr().out
    assert code == 4, out
    assert "Test plan 'fan acceptance': FAILED" in out


def _motor_report(tmp_path, capsys, *extra) -> dict:
    code = main(["identify", DEMO_MOTOR, *LOCKSTEP, *MOTOR_FREE, "--operating-level", "3", "--step", "1.5",
                 "--json", "--record-dir", str(tmp_path), *extra])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    return json.loads(captured.out)


@pytest.mark.slow
def test_motor_speed_bump_test_recovers_alpha_and_gain(tmp_path, capsys):
    report = _motor_report(tmp_path, capsys, "--set", "control.output=speed_rad_s",
                           "--set", "control.law=iP", "--set", "control.order=1",
                           "--set", "control.kd=0", "--set", "control.kp=10")
    plant = make_plant("motor")
    plant.reset(3.0)
    est = report["estimates"]
    assert est["order"] == 1
    assert est["alpha"] == pytest.approx(plant.true_alpha("speed_rad_s", 1, 3.0), rel=0.15)
    assert est["gain"] == pytest.approx(plant.static_gain("speed_rad_s", 3.0), rel=0.15)
    assert report["suggestions"]["law"] == "iP"


@pytest.mark.slow
def test_motor_position_bump_test_order_2(tmp_path, capsys):
    report = _motor_report(tmp_path, capsys)
    plant = make_plant("motor")
    plant.reset(3.0)
    est = report["estimates"]
    assert est["order"] == 2
    assert est["alpha"] == pytest.approx(plant.true_alpha("position_rad", 2, 3.0), rel=0.15)
    # an integrating output: the gain is that of its rate, the speed, per volt
    assert est["gain"] == pytest.approx(plant.static_gain("speed_rad_s", 3.0), rel=0.15)
    s = report["suggestions"]
    assert s["law"] == "iPD" and s["kd"] == pytest.approx(2 * math.sqrt(s["kp"]), rel=0.01)


@pytest.mark.slow
def test_a_trip_exits_3_and_estimates_nothing(tmp_path, capsys):
    # the demo motor spins freely: a step of 2.4 V from rest runs (and coasts) past its 8 rad limit
    code = main(["identify", DEMO_MOTOR, *LOCKSTEP, "--record-dir", str(tmp_path)])
    captured = capsys.readouterr()
    assert code == 3
    assert "nothing estimated" in captured.err and "tripped" in captured.err
    assert captured.out == ""
    [folder] = list(tmp_path.iterdir())
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "tripped" and meta["identify"]["error"].startswith("tripped")


class _InterruptingDriver(BumpDriver):
    """A bump profile that presses Ctrl-C itself at t = 1 s of device time (deterministic)."""

    def __call__(self, t: float) -> float:
        if t >= 1.0 and not getattr(self, "_sent", False):
            self._sent = True
            os.kill(os.getpid(), signal.SIGINT)
        return super().__call__(t)


@pytest.mark.slow
def test_ctrl_c_during_the_bump_test_exits_130(tmp_path, capsys):
    from rigloop.commands.identify import run_bump_test
    from rigloop.config import load_config

    cfg = load_config(DEMO_FAN, [s for s in LOCKSTEP if s != "--set"] + [f"recording.dir={tmp_path}"])
    plan = plan_bump(0.0, 100.0, 0.0, 250.0, rate_hz=cfg.device.rate_hz)
    assert run_bump_test(cfg, plan, quiet=True, driver=_InterruptingDriver(plan, cfg.period_s)) == 130
    err = capsys.readouterr().err
    assert "nothing estimated" in err
    [folder] = list(tmp_path.iterdir())
    assert yaml.safe_load((folder / "session.yaml").read_text())["outcome"] == "stopped"


def test_an_encoder_sets_the_window_of_a_position_rig():
    """An order-2 output read in encoder counts: the noise floor is the quantizer's q/√12 (standard
    result), and the window is long enough that F̂'s noise from it meets the target."""
    plan = plan_bump(-12.0, 12.0, 0.0, None, rate_hz=500.0, at=0.0, step=4.0, settle_s=1.0,
                     hold_s=1.0, steps=4)
    ts = 0.002
    q = 2 * math.pi / 1024
    t, y, u, sched = first_order_record(plan, ts, 0.5, 0.05, order=2)
    y = q * np.round(y / q)
    est = analyse_bump(t, y, u, order=2, plan=plan, schedule=sched, ts=ts)
    assert est.noise.quantum == pytest.approx(q, rel=1e-6)
    assert est.noise_std >= q / math.sqrt(12) * (1 - 1e-9)
    assert est.alpha == pytest.approx(0.5 / 0.05, rel=0.15)
    s = suggest_settings(est, plan)
    assert s.law == "iPD" and s.window_samples >= shortest_window("algebraic", 2)
    assert (q / math.sqrt(12)) * noise_gain("algebraic", 2, s.window_samples, ts) <= s.sigma_f_target


@pytest.mark.slow
def test_geared_arm_through_the_engine_is_measured_while_moving(tmp_path, capsys):
    """A position rig with gear play and a weight that changes with the angle, lockstep through
    the engine: the estimates come from the steps taken while the arm moves (teeth in contact),
    the limits guard keeps it inside its position limits, and alpha lands within ±25 % of the
    rig's truth (the alpha with the teeth in contact, from its model: plants.scenario)."""
    from rigloop.plants.scenario import Scenario

    arm = ROOT / "configs" / "scenarios" / "geared_arm_backlash.yaml"
    code = main(["identify", str(arm), *LOCKSTEP, "--json", "--record-dir", str(tmp_path)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    report = json.loads(captured.out)
    assert report["refusals"] == [] and report["snippet"]
    kinds = report["schedule"]["kinds"]
    assert kinds[:4] == ["start", "moving", "moving", "stop"]
    used = [s for s in report["estimates"]["steps"] if s["responded"]]
    assert len(used) >= 2 and all(s["kind"] == "moving" for s in used)
    truth = Scenario(arm).truth()
    assert report["estimates"]["alpha"] == pytest.approx(truth.alpha, rel=0.25)
    assert report["suggestions"]["law"] == "iPD"
    [folder] = list(tmp_path.iterdir())
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "completed"                     # no trip: the guard held


def test_a_position_profile_starts_steps_while_moving_and_stops():
    plan = plan_bump(-12.0, 12.0, 0.0, 600.0, rate_hz=500.0, order=2)
    assert plan.steps == 8 and plan.hold_min_s < 1.0
    levels = [plan.level(k) for k in range(8)]
    assert levels == pytest.approx([2.4, 3.6, 2.4, 0.0, -2.4, -3.6, -2.4, 0.0])
    assert [plan.kind(k) for k in range(4)] == ["start", "moving", "moving", "stop"]
    with pytest.raises(PlanError) as caught:                  # 1.5 x 9 V leaves the ±12 V range
        plan_bump(-12.0, 12.0, 0.0, 600.0, rate_hz=500.0, order=2, step=9.0)
    assert caught.value.option == "--step" and "1.5" in str(caught.value) and "<= 8" in str(caught.value)
    with pytest.raises(PlanError) as caught:
        plan_bump(-12.0, 12.0, 0.0, 600.0, rate_hz=500.0, order=2, steps=6)
    assert caught.value.option == "--steps" and "4 or 8" in str(caught.value)


def test_the_limits_guard_skips_to_the_stop_of_the_excursion():
    """An integrating output that runs into the guard band during its start hold: the profile
    goes to u0 at once (the stop), skipping the steps while moving, then goes the other way."""
    plan = plan_bump(-12.0, 12.0, 0.0, None, rate_hz=500.0, order=2)
    driver = BumpDriver(plan, 0.002, 2, (-1.0, 1.0))
    t, y = 0.0, 0.0
    seen = []
    while not driver.finished and t < 30.0:
        driver.observe(t, y)
        u = driver(t)
        if not seen or seen[-1] != u:
            seen.append(u)
        y += 0.002 * 2.0 * u                   # 4.8 rad/s at the start level: the guard at 0.5 rad
        t += 0.002
    kinds = driver.schedule().kinds
    assert kinds[:2] == ["start", "stop"] and "moving" not in kinds[:2]
    assert seen[:4] == pytest.approx([0.0, 2.4, 0.0, -2.4])


def test_steps_up_and_down_that_disagree_beyond_their_spread_are_noted():
    """A rig that rises faster than it falls (τ 0.3 s up, 0.4 s down): alpha differs between the
    steps up and down by a third, far beyond their spread; the mean is used, with a note."""
    plan = fan_like_plan(settle_s=3.0, hold_s=3.0)
    ts = 0.002
    t, u, sched = slewed_bump(plan, ts)
    k, y = 30.0, np.zeros(t.size)
    for i in range(1, t.size):              # Euler at 1/10 of a sample (our reference model)
        yi = y[i - 1]
        for _ in range(10):
            target = k * u[i - 1]
            yi += ts / 10 * (target - yi) / (0.3 if target > yi else 0.4)
        y[i] = yi
    y += np.random.default_rng(3).normal(0.0, 2.0, t.size)     # 2 units of noise on 300
    est = analyse_bump(t, y, u, order=1, plan=plan, schedule=sched, ts=ts)
    assert est.alpha_up.mean == pytest.approx(k / 0.3, rel=0.05)
    assert est.alpha_down.mean == pytest.approx(k / 0.4, rel=0.05)
    refusals, notes = judge(est, plan)
    assert refusals == []
    assert any("up and down disagree on alpha" in n for n in notes)
