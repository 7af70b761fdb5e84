"""The bump test (`rigloop identify`): planning, the estimators, the suggestions, the command.

Sources outside the project:
- synthetic step responses are generated with scipy.signal.lsim (exact zero-order-hold
  simulation of a linear state-space model), not with the code under test;
- the least-squares slope is checked against numpy.polyfit and the textbook variance of a
  regression slope, σ²/Σ(t − t̄)² (from memory);
- the end-to-end checks compare with the simulator's own plant model (rigloop.plants:
  ``true_alpha`` = quasi-static d(y^(m))/du, ``static_gain`` = dy_ss/du at the operating
  point). The tolerances, ±20 % on alpha and ±10 % on the gain, come from the feature's issue.
"""

from __future__ import annotations

import json
import math
import os
import signal
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
import yaml
from scipy import signal as sps

from rigloop.analysis.identify import (
    BumpPlan,
    EstimationError,
    PlanError,
    analyse_bump,
    config_snippet,
    default_operating_point,
    estimator_noise_gain,
    fit_fopdt,
    fopdt_response,
    initial_slope_alpha,
    plan_bump,
    snippet_overrides,
    suggest_settings,
    window_for_noise,
)
from rigloop.cli import main
from rigloop.control.kernels import slope_weights
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


def slewed_bump(plan: BumpPlan, ts: float) -> tuple[np.ndarray, np.ndarray]:
    """(t, applied u) of a bump profile after a slew limiter, one sample of transport delay."""
    n = int(round(plan.duration_s / ts)) + 1
    t = np.arange(n) * ts
    u = np.empty(n)
    prev = plan.safe
    for i, ti in enumerate(t):
        target = plan(ti - ts) if i else plan.safe
        step = plan.slew_per_s * ts if plan.slew_per_s else math.inf
        prev = prev + max(-step, min(step, target - prev))
        u[i] = prev
    return t, u


def fan_like_plan(**kw) -> BumpPlan:
    args = dict(rate_hz=500.0, at=50.0, step=10.0, settle_s=3.0, hold_s=2.5)
    args.update(kw)
    return plan_bump(0.0, 100.0, 50.0, 250.0, **args)


# ------------------------------------------------------------------------------- planning
def test_default_operating_point_is_the_middle_or_halfway_to_max_for_a_bipolar_drive():
    assert default_operating_point(0.0, 100.0, 0.0) == 50.0          # fan duty: safe is "off"
    assert default_operating_point(-12.0, 12.0, 0.0) == 6.0          # motor: safe is the middle
    plan = plan_bump(0.0, 100.0, 0.0, 250.0, rate_hz=500.0)
    assert (plan.u0, plan.du, plan.settle_s, plan.hold_s) == (50.0, 10.0, 4.0, 3.0)


def test_profile_ramps_at_the_slew_limit_then_steps_up_and_back():
    plan = plan_bump(0.0, 100.0, 0.0, 250.0, rate_hz=500.0, at=40.0, step=-5.0)
    assert plan.t_ramp == pytest.approx(40.0 / 250.0)
    assert plan(0.0) == 0.0 and plan(0.08) == pytest.approx(20.0)
    assert plan(plan.t_ramp + 1.0) == 40.0
    assert plan(plan.t_up) == 35.0 and plan(plan.t_down - 1e-9) == 35.0
    assert plan(plan.t_down) == 40.0 and plan(plan.duration_s + 5) == 40.0
    assert plan.duration_s == pytest.approx(plan.t_ramp + 4.0 + 2 * 3.0)
    assert plan.slew_time_s == pytest.approx(5.0 / 250.0)


@pytest.mark.parametrize("kwargs, option, words", [
    ({"step": 60.0}, "--step", ["--step 60", "[0, 100]", "at most 50"]),
    ({"at": 95.0}, "--step", ["default step 10", "at most 5"]),
    ({"at": 120.0}, "--operating-level", ["--operating-level 120", "[0, 100]"]),
    ({"step": 0.0}, "--step", ["--step 0", "non-zero"]),
    ({"hold_s": 0.01}, "--hold", ["--hold 0.01", ">= "]),
    ({"settle_s": 100.0, "max_duration_s": 60.0}, "--initial-hold", ["max_duration_s", "60"]),
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
        # the large-N form used in the docs: σ√(12/(N³Ts²)) (common practice)
        assert estimator_noise_gain(1, n, ts) == pytest.approx(math.sqrt(12.0 / (count ** 3 * ts * ts)),
                                                               rel=1.6 / count ** 2 + 1e-9)
    rng = np.random.default_rng(3)
    y = rng.normal(size=31)
    t = np.arange(31) * ts
    assert float(np.dot(slope_weights(30, ts), y)) == pytest.approx(np.polyfit(t, y, 1)[0], rel=1e-9)


def test_window_for_noise_is_the_shortest_window_meeting_the_target():
    ts, sigma = 0.002, 8.0
    n, sigma_f = window_for_noise(1, sigma, ts, target=43.0, n_min=3, n_max=500)
    assert sigma_f <= 43.0 < sigma * estimator_noise_gain(1, n - 1, ts)
    assert sigma_f == pytest.approx(sigma * estimator_noise_gain(1, n, ts))
    # clamps: a noiseless signal takes the shortest window; a hopeless target the longest
    assert window_for_noise(1, 0.0, ts, 1.0, 3, 50) == (3, 0.0)
    n_max, worse = window_for_noise(1, sigma, ts, target=1e-3, n_min=3, n_max=50)
    assert n_max == 50 and worse > 1e-3
    n2, s2 = window_for_noise(2, 0.001, ts, target=5.0, n_min=3, n_max=500)
    assert s2 <= 5.0 < 0.001 * estimator_noise_gain(2, n2 - 1, ts)


@pytest.mark.parametrize("order", [1, 2])
def test_fopdt_response_equals_scipy_lsim(order):
    plan = fan_like_plan()
    ts = 0.002
    t, u = slewed_bump(plan, ts)
    k, tau, theta = 30.0, 0.4, 0.0064
    ref = lsim_fopdt(order, k, tau, theta, t, u)
    du = np.diff(u)
    changes = np.nonzero(du)[0] + 1
    ours = fopdt_response(order, t, t[changes], du[changes - 1], k, tau, theta)
    assert np.max(np.abs(ours - ref)) <= 1e-9 * np.max(np.abs(ref))


def test_alpha_of_an_exact_first_order_response_is_k_over_tau():
    """y' = (−y + K·u)/τ has y' = F + (K/τ)·u: the initial slope per unit input is K/τ."""
    plan = fan_like_plan()
    ts = 0.002
    t, u = slewed_bump(plan, ts)
    k, tau = 30.0, 0.7
    y = lsim_fopdt(1, k, tau, 0.0, t, u)
    i_step = int(np.argmax(t >= plan.t_up))
    i_step += int(np.argmax(u[i_step:] != u[i_step - 1]))
    base = y[i_step - 1]
    dy, du = y - base, u - u[i_step - 1]
    alpha, raw, _ = initial_slope_alpha(1, dy, du, ts, i_step, 70, tau=tau)
    assert alpha == pytest.approx(k / tau, rel=1e-4)
    # without the drift correction the slope reads low by about (T/2 − t_slew/2)/τ: the output
    # has moved by alpha·du times the window's mean age, less the half slew time (our estimate)
    assert raw == pytest.approx(k / tau * (1 - (0.14 / 2 - plan.slew_time_s / 2) / tau), rel=0.01)


@pytest.mark.parametrize("order", [1, 2])
def test_a_noise_free_bump_gives_the_exact_model(order):
    plan = fan_like_plan()
    ts = 0.002
    t, u = slewed_bump(plan, ts)
    k, tau, theta = 30.0, 0.45, 0.0074
    y = 1000.0 + lsim_fopdt(order, k, tau, theta, t, u)
    est = analyse_bump(t, y, u, order=order, plan=plan, ts=ts)
    assert est.warnings == [] or all("moved" in w for w in est.warnings)
    assert est.alpha == pytest.approx(k / tau, rel=2e-3)
    assert est.gain_fit == pytest.approx(k, rel=1e-4)
    assert est.tau == pytest.approx(tau, rel=1e-3)
    assert est.theta == pytest.approx(theta, abs=0.05 * ts)
    assert est.noise_std < 1e-6 * k


def test_a_noisy_bump_recovers_k_tau_theta_within_tolerance():
    plan = fan_like_plan(settle_s=4.0, hold_s=3.0)
    ts = 0.002
    t, u = slewed_bump(plan, ts)
    k, tau, theta, sigma = 30.0, 0.6, 0.0104, 8.0
    rng = np.random.default_rng(11)
    y = 1500.0 + lsim_fopdt(1, k, tau, theta, t, u) + rng.normal(0.0, sigma, t.size)
    est = analyse_bump(t, y, u, order=1, plan=plan, ts=ts)
    assert est.gain == pytest.approx(k, rel=0.03)           # noise: about 0.4 rpm on 300 rpm
    assert est.gain_fit == pytest.approx(k, rel=0.02)
    assert est.tau == pytest.approx(tau, rel=0.05)
    assert est.theta == pytest.approx(theta, abs=3 * ts)
    assert est.noise_std == pytest.approx(sigma, rel=0.1)
    assert est.alpha == pytest.approx(k / tau, rel=0.15)   # about 3 σ of the slope noise
    assert est.alpha_fopdt == pytest.approx(k / tau, rel=0.05)


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
    assert fit.theta < 0.01 * ts


def test_no_response_is_an_estimation_error():
    plan = fan_like_plan()
    ts = 0.002
    t, u = slewed_bump(plan, ts)
    y = 700.0 + np.random.default_rng(2).normal(0.0, 5.0, t.size)
    with pytest.raises(EstimationError, match="no response to the step"):
        analyse_bump(t, y, u, order=1, plan=plan, ts=ts, output="speed_rpm")


def test_suggestions_follow_the_documented_rules():
    plan = fan_like_plan()
    ts = 0.002
    t, u = slewed_bump(plan, ts)
    rng = np.random.default_rng(5)
    y = lsim_fopdt(1, 30.0, 0.5, 0.004, t, u) + rng.normal(0.0, 2.0, t.size)
    est = analyse_bump(t, y, u, order=1, plan=plan, ts=ts)
    s = suggest_settings(est, plan)
    assert s.alpha == float(f"{est.alpha:.2g}")
    assert s.tau_cl == pytest.approx(est.tau / 5) and s.kp == pytest.approx(1 / s.tau_cl, rel=5e-3)
    assert 3 <= s.window_samples <= min(est.tau / 2, s.tau_cl) / ts
    assert s.sigma_f <= s.sigma_f_target or s.notes
    # SIMC rules for a first-order model (the paper's PI case, from memory):
    # Kc = τ/(K(τc + θ)), τI = min(τ, 4(τc + θ)); θ here includes the sampling delay 1.5 Ts
    theta = est.theta + 1.5 * ts
    kc = est.tau / (est.gain_fit * (s.tau_cl + theta))
    ti = min(est.tau, 4 * (s.tau_cl + theta))
    assert s.pid_kp == pytest.approx(kc, rel=5e-3) and s.pid_ki == pytest.approx(kc / ti, rel=5e-3)
    assert s.pid_kd == 0.0 and s.pid_u0 == plan.u0
    # a wanted time constant below 5 sample periods is refused
    with pytest.raises(PlanError, match="--tau-cl"):
        suggest_settings(est, plan, tau_cl=4 * ts)

    y2 = lsim_fopdt(2, 20.0, 0.4, 0.0, t, u)
    est2 = analyse_bump(t, y2, u, order=2, plan=plan, ts=ts)
    s2 = suggest_settings(est2, plan, tau_cl=0.1)
    assert (s2.kp, s2.kd) == (pytest.approx(100.0), pytest.approx(20.0))   # (ω², 2ζω), ω = 10, ζ = 1
    # SIMC integrating process with a lag (from memory): Kc = 1/(K(τc + θ)), τI = 4(τc + θ),
    # τD = τ; series form turned into parallel gains
    theta2 = est2.theta + 1.5 * ts
    kc2 = 1.0 / (est2.gain_fit * (0.1 + theta2))
    ti2, td2 = 4 * (0.1 + theta2), est2.tau
    assert s2.pid_kp == pytest.approx(kc2 * (1 + td2 / ti2), rel=5e-3)
    assert s2.pid_ki == pytest.approx(kc2 / ti2, rel=5e-3)
    assert s2.pid_kd == pytest.approx(kc2 * td2, rel=5e-3)

    snippet = yaml.safe_load(config_snippet(s))
    assert snippet == {"control": {"alpha": s.alpha, "kp": s.kp, "kd": s.kd,
                                   "estimator": {"window_s": s.window_s}}}
    assert snippet_overrides(s)[0] == f"control.alpha={s.alpha!r}"


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
    assert est["alpha"] == pytest.approx(true_alpha, rel=0.20)
    assert est["gain"] == pytest.approx(true_gain, rel=0.10)
    assert est["gain_fit"] == pytest.approx(true_gain, rel=0.10)
    for step in est["steps"]:
        assert step["responded"] and step["alpha"] == pytest.approx(true_alpha, rel=0.20)
    assert est["noise_std"] > 0


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
        "control.alpha", "control.kp", "control.kd", "control.estimator.window_s"}
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
    assert "test plan: PASS" in out
    bad_alpha = 10 * report["suggestions"]["alpha"]
    code = main([*base, *sets, "--set", f"control.alpha={bad_alpha!r}", "--record-dir", str(tmp_path / "bad")])
    out = capsys.readouterr().out
    assert code == 4, out
    assert "test plan: FAIL" in out


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
    assert est["alpha"] == pytest.approx(plant.true_alpha("speed_rad_s", 1, 3.0), rel=0.20)
    assert est["gain"] == pytest.approx(plant.static_gain("speed_rad_s", 3.0), rel=0.10)
    assert report["suggestions"]["law"] == "iP"


@pytest.mark.slow
def test_motor_position_bump_test_order_2(tmp_path, capsys):
    report = _motor_report(tmp_path, capsys)
    plant = make_plant("motor")
    plant.reset(3.0)
    est = report["estimates"]
    assert est["order"] == 2
    assert est["alpha"] == pytest.approx(plant.true_alpha("position_rad", 2, 3.0), rel=0.20)
    # an integrating output: the gain is that of its rate, the speed, per volt
    assert est["gain"] == pytest.approx(plant.static_gain("speed_rad_s", 3.0), rel=0.10)
    s = report["suggestions"]
    assert s["law"] == "iPD" and s["kd"] == pytest.approx(2 * math.sqrt(s["kp"]), rel=0.01)


@pytest.mark.slow
def test_a_trip_exits_3_and_estimates_nothing(tmp_path, capsys):
    # the demo motor's position limit (8 rad) is reached within a second at 6 V
    code = main(["identify", DEMO_MOTOR, *LOCKSTEP, "--record-dir", str(tmp_path)])
    captured = capsys.readouterr()
    assert code == 3
    assert "nothing estimated" in captured.err and "tripped" in captured.err
    assert captured.out == ""
    [folder] = list(tmp_path.iterdir())
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "tripped" and meta["identify"]["error"].startswith("tripped")


@dataclass(frozen=True)
class _InterruptingPlan(BumpPlan):
    """A bump profile that presses Ctrl-C itself at t = 1 s of device time (deterministic)."""

    def __call__(self, t: float) -> float:
        if t >= 1.0 and not getattr(self, "_sent", False):
            object.__setattr__(self, "_sent", True)
            os.kill(os.getpid(), signal.SIGINT)
        return super().__call__(t)


@pytest.mark.slow
def test_ctrl_c_during_the_bump_test_exits_130(tmp_path, capsys):
    from rigloop.commands.identify import run_bump_test
    from rigloop.config import load_config

    cfg = load_config(DEMO_FAN, [s for s in LOCKSTEP if s != "--set"] + [f"recording.dir={tmp_path}"])
    p = plan_bump(0.0, 100.0, 0.0, 250.0, rate_hz=cfg.device.rate_hz)
    plan = _InterruptingPlan(**{f: getattr(p, f) for f in p.__dataclass_fields__})
    assert run_bump_test(cfg, plan, quiet=True) == 130
    err = capsys.readouterr().err
    assert "nothing estimated" in err
    [folder] = list(tmp_path.iterdir())
    assert yaml.safe_load((folder / "session.yaml").read_text())["outcome"] == "stopped"
