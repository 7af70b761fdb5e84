"""Control laws: closed-loop error dynamics against closed forms, anti-windup, bumpless changes."""

from __future__ import annotations

import itertools
import math

import control as ct
import numpy as np
import pytest

from rigloop.control.laws import LAWS, MODEL_ORDER, ControlLaw, LawGains


def _law(law="iP", alpha=1.0, kp=1.0, ki=0.0, kd=0.0, u0=0.0, ts=1e-3, u_min=-1e9, u_max=1e9, aw="conditional"):
    return ControlLaw(LawGains(law, alpha, kp, ki, kd, u0), ts, u_min, u_max, aw)


# -- closed-loop error dynamics with F known exactly ------------------------------------------


def test_ip_error_decays_as_e0_exp_minus_kp_t():
    # Plant y' = F(t) + alpha·u, F(t) = 2 + sin(3t), u held over each sample (no transport delay),
    # integrated exactly. The iP gets the true F(t_k). Closed form of e' + Kp·e = 0 (first-order
    # linear ODE): e(t) = e0·exp(−Kp·t). Discretisation error O(Kp·Ts) and O(|F'|·Ts/Kp).
    ts, kp, alpha = 1e-3, 4.0, 2.0
    law = _law("iP", alpha=alpha, kp=kp, ts=ts)
    y, r, e0 = 1.0, 0.0, 1.0
    errs = []
    for k in range(1500):
        t0, t1 = k * ts, (k + 1) * ts
        f_k = 2.0 + math.sin(3 * t0)
        e = y - r
        errs.append(e)
        u = law.output(f_k, e, math.nan, math.nan, 0.0, math.nan)
        y += 2.0 * ts - (math.cos(3 * t1) - math.cos(3 * t0)) / 3.0 + alpha * u * ts
    t = np.arange(len(errs)) * ts
    assert np.max(np.abs(np.array(errs) - e0 * np.exp(-kp * t))) < 2e-3


def test_ip_tracks_a_moving_reference_with_the_same_error_dynamics():
    # r(t) = 0.5 t² fed forward through r' = t: the error still obeys e' = −Kp·e.
    ts, kp, alpha, f = 1e-3, 3.0, 1.0, -1.0
    law = _law("iP", alpha=alpha, kp=kp, ts=ts)
    y = 0.4
    errs = []
    for k in range(2000):
        t = k * ts
        r, dr = 0.5 * t * t, t
        e = y - r
        errs.append(e)
        u = law.output(f, e, math.nan, math.nan, dr, math.nan)
        y += ts * (f + alpha * u)
    t = np.arange(len(errs)) * ts
    assert np.max(np.abs(np.array(errs) - 0.4 * np.exp(-kp * t))) < 2e-3


def _ipd_free_response(zeta: float, omega: float, law_name: str = "iPD", ki: float = 0.0):
    ts, alpha, f = 1e-4, 5.0, 3.0
    kp, kd = omega**2, 2 * zeta * omega
    law = _law(law_name, alpha=alpha, kp=kp, kd=kd, ki=ki, ts=ts)
    y, v, e0 = 1.0, 0.0, 1.0
    count = int(round(6.0 / (zeta * omega) / ts))
    errs = np.empty(count)
    for k in range(count):
        errs[k] = y
        u = law.output(f, y, v, v, 0.0, math.nan)  # r = 0: e = y, e' = v (true derivative)
        a = f + alpha * u
        y += ts * v + 0.5 * ts * ts * a
        v += ts * a
    return np.arange(count) * ts, errs, e0


@pytest.mark.parametrize("zeta,omega", [(0.3, 8.0), (0.5, 5.0), (0.7, 12.0)])
def test_ipd_error_is_the_second_order_free_response(zeta, omega):
    # e'' + Kd e' + Kp e = 0 with (Kd, Kp) = (2ζω, ω²), e(0) = e0, e'(0) = 0:
    # e(t) = e0·exp(−ζωt)·[cos(ω_d t) + ζ/√(1−ζ²)·sin(ω_d t)], ω_d = ω√(1−ζ²); its undershoot
    # below zero is e0·exp(−ζπ/√(1−ζ²)) (textbook formulas, "Feedback Control of Dynamic Systems").
    t, e, e0 = _ipd_free_response(zeta, omega)
    wd = omega * math.sqrt(1 - zeta**2)
    closed = e0 * np.exp(-zeta * omega * t) * (np.cos(wd * t) + zeta / math.sqrt(1 - zeta**2) * np.sin(wd * t))
    assert np.max(np.abs(e - closed)) < 2e-3 * e0
    overshoot = -e.min() / e0
    assert overshoot == pytest.approx(math.exp(-zeta * math.pi / math.sqrt(1 - zeta**2)), abs=2e-3)
    # Same number from python-control (reference library): the free response from e0 is
    # e0·(1 − step response of ω²/(s² + 2ζωs + ω²)), so its undershoot is the step's overshoot.
    info = ct.step_info(ct.tf([omega**2], [1, 2 * zeta * omega, omega**2]))
    assert 100 * overshoot == pytest.approx(info["Overshoot"], abs=0.3)


def test_ipi_removes_the_offset_an_ip_leaves_for_a_biased_estimate():
    # With F̂ = F + δ the iP settles at e = −δ/Kp (final value of e' = −Kp e − δ); the iPI,
    # e'' + Kp e' + Ki e = 0 after the step, settles at e = 0.
    ts, kp, ki, delta, f = 1e-3, 2.0, 1.0, 0.6, 1.5
    results = {}
    for name in ("iP", "iPI"):
        law = _law(name, kp=kp, ki=ki, ts=ts)
        y = 0.0
        for _ in range(20000):
            u = law.output(f + delta, y, math.nan, math.nan, 0.0, math.nan)
            y += ts * (f + u)
        results[name] = y
    assert results["iP"] == pytest.approx(-delta / kp, rel=1e-3)
    assert abs(results["iPI"]) < 1e-4


def test_pid_baseline_acts_on_e_equals_y_minus_r():
    # Plant y' = −a·y + b·u. P-only with bias u0: u = u0 − Kp(y − r) settles at
    # y = b(u0 + Kp·r)/(a + b·Kp) (final value of the first-order closed loop). PI reaches r.
    ts, a, b, kp, r, u0 = 1e-3, 1.0, 2.0, 3.0, 1.5, 0.25
    for name, ki, expected in (("PID", 0.0, b * (u0 + kp * r) / (a + b * kp)), ("PID", 2.0, r)):
        law = _law(name, kp=kp, ki=ki, u0=u0, ts=ts)
        y = 0.0
        for _ in range(30000):
            dy = -a * y  # derivative on the measurement (not used: Kd = 0)
            u = law.output(math.nan, y - r, math.nan, dy, math.nan, math.nan)
            y += ts * (-a * y + b * u)
        assert y == pytest.approx(expected, rel=1e-4)


def test_pid_takes_its_derivative_on_the_measurement():
    law = _law("PID", kp=1.0, ki=0.0, kd=0.5, u0=2.0)
    u = law.evaluate(math.nan, e=0.2, de=100.0, dy=-1.0, ref_deriv=math.nan)
    assert u == pytest.approx(2.0 - 0.2 - 0.5 * (-1.0))


def test_laws_ignore_the_gains_they_do_not_use():
    inputs = dict(f_hat=1.0, e=0.5, de=2.0, dy=3.0, ref_deriv=0.25)
    full = dict(alpha=2.0, kp=1.0, ki=5.0, kd=7.0)
    law = _law("iP", **full)
    law.integral = 10.0
    assert law.evaluate(**inputs) == pytest.approx((-1.0 + 0.25 - 0.5) / 2.0)
    law = _law("iPD", **full)
    law.integral = 10.0
    assert law.evaluate(**inputs) == pytest.approx((-1.0 + 0.25 - 0.5 - 7.0 * 2.0) / 2.0)
    law = _law("iPID", **full)
    law.integral = 10.0
    assert law.evaluate(**inputs) == pytest.approx((-1.0 + 0.25 - 0.5 - 50.0 - 14.0) / 2.0)


# -- anti-windup --------------------------------------------------------------------------------


def _saturating_run(law_name: str, aw: str, seconds_high: float = 20.0):
    """Plant y' = −y + u, u in [0, 1]; r = 5 is out of reach for `seconds_high`, then r = 0.5.

    The law's request is clamped and applied one sample later (the rig's timing). Returns the
    integral at 10 s and at the end of the saturated phase, and the integral of |e| over the
    30 s after r drops (how well the loop recovers).
    """
    ts = 1e-2
    kp, ki = 1.0, 1.0
    if law_name == "PID":
        law = _law("PID", kp=kp, ki=ki, ts=ts, u_min=0.0, u_max=1.0, aw=aw)
    else:
        law = _law("iPI", alpha=1.0, kp=kp, ki=ki, ts=ts, u_min=0.0, u_max=1.0, aw=aw)
    y, applied = 0.0, 0.0
    i_10 = None
    n_high = int(seconds_high / ts)
    ys = []
    for k in range(n_high + 3000):
        r = 5.0 if k < n_high else 0.5
        f_hat = -y  # the true F of y' = F + u
        request = law.output(f_hat, y - r, math.nan, -y + applied, 0.0, applied)
        y += ts * (-y + applied)
        applied = min(max(request, 0.0), 1.0)
        if k == int(10.0 / ts):
            i_10 = law.integral
        if k >= n_high:
            ys.append(abs(y - r))
        if k == n_high - 1:
            i_end = law.integral
    return i_10, i_end, ts * sum(ys)


@pytest.mark.parametrize("law_name", ["iPI", "PID"])
@pytest.mark.parametrize("aw", ["conditional", "back-calculation"])
def test_anti_windup_keeps_the_integral_bounded_while_saturated(law_name, aw):
    i_10, i_20, iae = _saturating_run(law_name, aw)
    n_10, n_20, iae_none = _saturating_run(law_name, "none")
    # without anti-windup the integral of e ≈ −4 grows linearly: about −40 after 10 s, −80 after 20 s
    assert n_20 < -70 and n_20 == pytest.approx(2 * n_10, rel=0.05)
    assert abs(i_20) < 10 and abs(i_20 - i_10) < 1.0
    # and the recovery after the reference comes back into reach is far better
    assert iae < 0.2 * iae_none


def test_conditional_integration_still_integrates_back_into_range():
    law = _law("iPI", kp=0.0, ki=1.0, ts=0.1, u_min=-1.0, u_max=1.0)
    law.integral = -50.0  # request far above u_max
    law.output(0.0, -1.0, math.nan, math.nan, 0.0, 1.0)  # e < 0 would raise u further: frozen
    assert law.integral == -50.0
    law.output(0.0, 1.0, math.nan, math.nan, 0.0, 1.0)  # e > 0 lowers u: integrates
    assert law.integral == pytest.approx(-49.9)


def test_non_finite_error_never_enters_the_integral():
    law = _law("iPI", kp=1.0, ki=1.0, ts=0.1)
    law.output(0.0, 1.0, math.nan, math.nan, 0.0, 0.0)
    before = law.integral
    u = law.output(0.0, math.nan, math.nan, math.nan, 0.0, 0.0)
    assert math.isnan(u) and law.integral == before
    law.output(0.0, 1.0, math.nan, math.nan, 0.0, 0.0)
    assert law.integral == pytest.approx(before + 0.1)


# -- bumpless changes ---------------------------------------------------------------------------

_GAIN_SETS = [
    dict(alpha=2.0, kp=3.0, ki=1.5, kd=0.7, u0=0.3),
    dict(alpha=-0.5, kp=10.0, ki=0.0, kd=4.0, u0=-1.0),
    dict(alpha=7.0, kp=0.5, ki=20.0, kd=0.0, u0=0.0),
]


@pytest.mark.parametrize("old_law,new_law", list(itertools.product(LAWS, LAWS)))
def test_request_is_unchanged_by_a_retune_for_the_same_inputs(old_law, new_law):
    rng = np.random.default_rng(10 * LAWS.index(old_law) + LAWS.index(new_law))
    for old_g, new_g in itertools.product(_GAIN_SETS, _GAIN_SETS):
        law = ControlLaw(LawGains(old_law, **old_g), 0.01, -1e6, 1e6)
        for _ in range(5):
            law.output(*rng.normal(size=5), 0.0)
        f, e, de, dy, rd = law._f, law._e, law._de, law._dy, law._rd
        before = law.evaluate(f, e, de, dy, rd)
        assert before == pytest.approx(law.last_request, rel=1e-12)
        new_rd = rng.normal() if MODEL_ORDER.get(new_law) != MODEL_ORDER.get(old_law) else None
        new_f = rng.normal()
        law.retune(LawGains(new_law, **new_g), f_hat=new_f, ref_deriv=new_rd)
        after = law.evaluate(new_f, e, de, dy, rd if new_rd is None else new_rd)
        assert after == pytest.approx(before, rel=1e-10, abs=1e-10)


def test_ip_bias_decays_with_the_closed_loop_time_constant():
    ts, kp = 0.01, 4.0
    law = _law("iP", kp=kp, ts=ts)
    law.output(0.0, 1.0, math.nan, math.nan, 0.0, math.nan)
    law.retune(LawGains("iP", 1.0, 2 * kp, 0.0, 0.0))
    b0 = law.bias
    assert b0 == pytest.approx(kp * 1.0)  # (Kp_new − Kp_old)·e absorbed
    for n in range(1, 51):
        law.output(0.0, 0.0, math.nan, math.nan, 0.0, math.nan)
    assert law.bias == pytest.approx(b0 * math.exp(-2 * kp * 50 * ts), rel=1e-12)


@pytest.mark.parametrize(
    "kp,kd,rate",
    [
        (25.0, 6.0, 3.0),  # underdamped: roots −3 ± 4j
        (4.0, 5.0, 1.0),  # overdamped: roots −1 and −4, the slower one sets the pace
        (9.0, 6.0, 3.0),  # critically damped
    ],
)
def test_order_two_bias_decay_follows_the_slowest_closed_loop_root(kp, kd, rate):
    # Reference: the roots of s² + Kd s + Kp from numpy.roots.
    roots = np.roots([1.0, kd, kp])
    assert -np.max(roots.real) == pytest.approx(rate, rel=1e-6)
    assert LawGains("iPD", 1.0, kp, 0.0, kd).bias_decay_rate() == pytest.approx(rate, rel=1e-6)


def test_laws_with_an_integral_absorb_the_change_in_the_integral():
    law = _law("iPI", kp=1.0, ki=2.0, ts=0.1)
    law.output(0.0, 1.0, math.nan, math.nan, 0.0, math.nan)
    before = law.last_request
    law.retune(LawGains("iPI", 1.0, 3.0, 2.0, 0.0))
    assert law.bias == 0.0
    assert law.evaluate(0.0, 1.0, math.nan, math.nan, 0.0) == pytest.approx(before)
    assert law.integral == pytest.approx(0.1 - 1.0)  # (3 − 1)·e / Ki moved into I


@pytest.mark.parametrize(
    "kwargs,needle",
    [
        (dict(law="PI"), "unknown"),
        (dict(alpha=0.0), "alpha"),
        (dict(kp=-1.0), "kp"),
        (dict(law="iPD", kd=float("nan")), "kd"),
        (dict(kp=True), "kp"),
    ],
)
def test_gains_are_validated(kwargs, needle):
    with pytest.raises(ValueError, match=needle):
        LawGains(**kwargs)


def test_pid_accepts_negative_gains_for_reverse_action():
    g = LawGains("PID", 1.0, -2.0, -1.0, 0.0)
    assert g.uses_integral and g.tracking_time(0.01) == pytest.approx(2.0)
