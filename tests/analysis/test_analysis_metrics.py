"""Step and run metrics against python-control's step_info and closed-form textbook results."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest

from rigloop.analysis.metrics import metric_unit, run_metrics, step_metrics, trapezoid

# (zeta, omega_n) pairs: underdamped, lightly damped, critically damped, overdamped
SECOND_ORDER = [(0.2, 2.0), (0.5, 5.0), (0.7, 10.0), (1.0, 3.0), (1.5, 4.0)]
DT = 0.01


def _response(sys, t_end: float, dt: float = DT):
    t = np.arange(0.0, t_end + dt / 2, dt)
    resp = control.step_response(sys, t)
    return resp.time, np.squeeze(resp.outputs)


def _second_order(zeta: float, omega: float):
    return control.tf([omega**2], [1.0, 2 * zeta * omega, omega**2])


def _cases():
    for zeta, omega in SECOND_ORDER:
        sys = _second_order(zeta, omega)
        slowest = min(abs(p.real) for p in sys.poles())
        yield pytest.param(sys, 12.0 / slowest, id=f"z{zeta}-w{omega}")
    yield pytest.param(control.tf([1.0], [0.8, 1.0]), 8.0, id="first-order-tau0.8")


@pytest.mark.parametrize("sys, t_end", list(_cases()))
def test_step_metrics_agree_with_python_control_step_info(sys, t_end):
    # Reference library: python-control step_info on the same sampled response; tolerance one
    # sample period for times and 0.5 % for the overshoot.
    t, y = _response(sys, t_end)
    ref = control.step_info(y, t, yfinal=1.0)
    m = step_metrics(t, y, t_step=0.0, y_initial=0.0, y_final=1.0)
    assert abs(m.rise_time_s - ref["RiseTime"]) <= DT
    assert abs(m.settling_time_s - ref["SettlingTime"]) <= DT
    assert abs(m.overshoot_pct - ref["Overshoot"]) <= max(0.005 * ref["Overshoot"], 1e-9)
    assert abs(m.peak - ref["Peak"]) <= 1e-12
    assert abs(m.peak_time_s - ref["PeakTime"]) <= DT


@pytest.mark.parametrize("y0, y1", [(1200.0, 2400.0), (2400.0, 1600.0), (0.0, -3.0), (5.0, 1.0)])
def test_step_metrics_between_two_levels_match_step_info_of_the_normalised_response(y0, y1):
    # A change from y0 to y1 is the unit step response scaled by (y1 - y0) and shifted by y0;
    # python-control's step_info on the unit response gives the expected times and overshoot.
    t, z = _response(_second_order(0.4, 6.0), 6.0)
    t_step = 3.0
    ref = control.step_info(z, t, yfinal=1.0)
    m = step_metrics(t + t_step, y0 + (y1 - y0) * z, t_step=t_step, y_initial=y0, y_final=y1)
    assert abs(m.rise_time_s - ref["RiseTime"]) <= DT
    assert abs(m.settling_time_s - ref["SettlingTime"]) <= DT
    assert abs(m.overshoot_pct - ref["Overshoot"]) <= 0.005 * ref["Overshoot"]
    assert abs(m.peak_time_s - ref["PeakTime"]) <= DT
    assert m.peak == pytest.approx(y0 + (y1 - y0) * z.max())


@pytest.mark.parametrize("zeta, omega", [(0.1, 3.0), (0.3, 8.0), (0.6, 2.0)])
def test_second_order_overshoot_and_peak_time_match_the_closed_form(zeta, omega):
    # Closed form of the underdamped second-order step response ("Modern Control Engineering";
    # "Feedback Control of Dynamic Systems"): overshoot exp(-ζπ/√(1-ζ²)), peak time π/(ω√(1-ζ²)).
    wd = omega * math.sqrt(1 - zeta**2)
    phi = math.acos(zeta)
    dt = 1e-3
    t = np.arange(0.0, 10.0 / (zeta * omega), dt)
    y = 1 - np.exp(-zeta * omega * t) / math.sqrt(1 - zeta**2) * np.sin(wd * t + phi)
    m = step_metrics(t, y, t_step=0.0, y_initial=0.0, y_final=1.0)
    expected_os = 100.0 * math.exp(-zeta * math.pi / math.sqrt(1 - zeta**2))
    assert m.overshoot_pct == pytest.approx(expected_os, rel=0.005)
    assert abs(m.peak_time_s - math.pi / wd) <= dt


def test_first_order_rise_and_settling_match_the_closed_form():
    # First-order lag y = 1 - exp(-t/τ): 10-90 % rise τ·ln 9, 2 % settling τ·ln 50 (textbook
    # results, e.g. "Modern Control Engineering").
    tau, dt = 0.5, 1e-3
    t = np.arange(0.0, 5.0, dt)
    y = 1 - np.exp(-t / tau)
    m = step_metrics(t, y, t_step=0.0, y_initial=0.0, y_final=1.0)
    assert abs(m.rise_time_s - tau * math.log(9.0)) <= dt
    assert abs(m.settling_time_s - tau * math.log(50.0)) <= dt
    assert m.overshoot_pct == 0.0


def test_steady_state_error_is_target_minus_mean_of_the_last_tenth():
    t = np.linspace(0.0, 10.0, 1001)
    y = np.where(t < 2.0, 0.0, 0.97)            # settles 3 % short of the target 1.0
    tail = t >= 9.0                               # last 10 % of [0, 10]
    y[tail] += 0.01 * np.cos(np.pi * np.arange(tail.sum()))   # ripple in the tail
    m = step_metrics(t, y, t_step=0.0, y_initial=0.0, y_final=1.0)
    assert m.steady_state_error == pytest.approx(1.0 - y[tail].mean())
    assert m.steady_state_error > 0               # textbook sign: output below the target
    assert math.isnan(m.settling_time_s)          # never inside the ±2 % band


def test_metrics_that_the_data_do_not_allow_are_nan():
    t = np.linspace(0.0, 1.0, 101)
    y = 0.5 * t                                   # reaches only 50 % of the change
    m = step_metrics(t, y, t_step=0.0, y_initial=0.0, y_final=1.0)
    assert math.isnan(m.rise_time_s) and math.isnan(m.settling_time_s)
    empty = step_metrics(t, y, t_step=5.0, y_initial=0.0, y_final=1.0)
    assert all(math.isnan(v) for v in empty.as_dict().values())


def test_samples_before_the_step_and_nan_samples_are_ignored():
    t, y = _response(_second_order(0.5, 5.0), 4.0)
    pre_t = np.linspace(-1.0, -DT, 100)
    tt = np.concatenate((pre_t, t))
    yy = np.concatenate((np.full(100, 7.0), y))  # garbage before the step
    yy[150] = np.nan
    a = step_metrics(t, y, t_step=0.0, y_initial=0.0, y_final=1.0)
    b = step_metrics(tt, yy, t_step=0.0, y_initial=0.0, y_final=1.0)
    assert b.rise_time_s == pytest.approx(a.rise_time_s, abs=DT)
    assert b.overshoot_pct == pytest.approx(a.overshoot_pct)


@pytest.mark.parametrize("kwargs, word", [
    ({"y_initial": 1.0, "y_final": 1.0}, "differ"),
    ({"y_initial": 0.0, "y_final": 1.0, "settle_band": 0.0}, "settle_band"),
    ({"y_initial": 0.0, "y_final": 1.0, "rise_limits": (0.9, 0.1)}, "rise_limits"),
])
def test_bad_arguments_are_named(kwargs, word):
    with pytest.raises(ValueError, match=word):
        step_metrics(np.arange(3.0), np.arange(3.0), t_step=0.0, **kwargs)


def test_run_metrics_match_independent_formulas():
    rng = np.random.default_rng(3)
    t = np.arange(0.0, 5.0, 0.01)
    e = rng.normal(0.0, 2.0, t.size)
    u = np.clip(rng.normal(50.0, 30.0, t.size), 0.0, 100.0)
    m = run_metrics(t, e, u, u_min=0.0, u_max=100.0, f_hat=np.r_[np.nan, np.ones(t.size - 1)],
                    latency_ms=np.linspace(0.0, 1.0, t.size))
    assert m.rms_error == pytest.approx(np.sqrt(np.mean(e**2)))
    # scipy's trapezoid rule is the reference implementation of the integrals
    from scipy.integrate import trapezoid as sp_trapezoid
    assert m.iae == pytest.approx(sp_trapezoid(np.abs(e), t))
    assert m.ise == pytest.approx(sp_trapezoid(e**2, t))
    assert m.itae == pytest.approx(sp_trapezoid(t * np.abs(e), t))
    assert m.max_abs_error == pytest.approx(np.max(np.abs(e)))
    assert m.u_total_variation == pytest.approx(np.sum(np.abs(np.diff(u))))
    assert m.time_at_limits_pct == pytest.approx(100.0 * np.mean((u == 0.0) | (u == 100.0)))
    assert (m.f_hat_min, m.f_hat_max) == (1.0, 1.0)
    assert m.latency_ms_p99 == pytest.approx(np.percentile(np.linspace(0.0, 1.0, t.size), 99))
    assert trapezoid(np.ones(1), np.zeros(1)) == 0.0


def test_itae_is_timed_from_the_start_of_the_span_not_the_first_finite_sample():
    # ITAE = ∫(t − t_0)|e| dt with t_0 the span's first sample (docs/reports.md), also when the
    # first errors are NaN (e.g. rows before the reference is known); scipy's trapezoid rule on
    # the finite samples is the reference.
    from scipy.integrate import trapezoid as sp_trapezoid

    t = np.arange(0.0, 3.0, 0.01) + 5.0
    e = np.cos(t)
    e[:50] = np.nan
    m = run_metrics(t, e, np.zeros_like(t))
    ok = np.isfinite(e)
    assert m.itae == pytest.approx(sp_trapezoid((t[ok] - t[0]) * np.abs(e[ok]), t[ok]), rel=1e-12)
    assert m.itae > sp_trapezoid((t[ok] - t[ok][0]) * np.abs(e[ok]), t[ok]) + 0.1


def test_run_metrics_of_several_runs_do_not_bridge_the_gap_between_them():
    # two runs of 1 s, 10 s apart: integrals, total variation and duration are sums over the runs
    from scipy.integrate import trapezoid as sp_trapezoid

    t1, t2 = np.arange(0.0, 1.0, 0.01), np.arange(11.0, 12.0, 0.01)
    e1, e2 = np.full(t1.size, 2.0), np.full(t2.size, -3.0)
    u1, u2 = np.full(t1.size, 10.0), np.full(t2.size, 60.0)
    m = run_metrics(np.r_[t1, t2], np.r_[e1, e2], np.r_[u1, u2],
                    piece=np.r_[np.ones(t1.size), 2 * np.ones(t2.size)])
    assert m.iae == pytest.approx(sp_trapezoid(np.abs(e1), t1) + sp_trapezoid(np.abs(e2), t2))
    assert m.itae == pytest.approx(sp_trapezoid((t1 - t1[0]) * 2.0, t1)
                                   + sp_trapezoid((t2 - t2[0]) * 3.0, t2))
    assert m.u_total_variation == 0.0
    assert m.duration_s == pytest.approx((t1[-1] - t1[0]) + (t2[-1] - t2[0]))


def test_run_metrics_of_no_samples_are_nan_without_warnings():
    m = run_metrics(np.array([]), np.array([]), np.array([]))
    assert m.samples == 0 and math.isnan(m.rms_error) and math.isnan(m.latency_ms_p50)


def test_metric_units():
    units = {"y": "rpm", "u": "%", "f": "rpm/s"}
    assert metric_unit("iae", units) == "rpm·s"
    assert metric_unit("ise", units) == "rpm²·s"
    assert metric_unit("f_hat_max", units) == "rpm/s"
    assert metric_unit("rms_error", {"y": "", "u": "%"}) == ""
    assert metric_unit("late_ticks", units) == ""
