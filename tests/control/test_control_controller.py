"""Controller: warm-up, closed loops on exact rigs, bumpless changes, validation, allocation."""

from __future__ import annotations

import math
import tracemalloc

import numpy as np
import pytest

from ctl_sim import DelayedFirstOrderRig, DelayedSecondOrderRig
from rigloop.control.controller import Controller, ControlParams
from rigloop.control.shaping import ActuatorShaper


def _drive(ctl: Controller, rig, steps: int, r: float = 0.0):
    """Closed loop with the rig's timing; returns arrays of e, u and ready per sample.

    The request goes through an ActuatorShaper without limits that matter (it holds the last
    value on a non-finite request, as the engine does).
    """
    shaper = ActuatorShaper(-1e9, 1e9, 0.0, None)
    shaper.reset(rig.u_applied)
    es, us, ready = np.empty(steps), np.empty(steps), np.empty(steps, dtype=bool)
    for k in range(steps):
        y, u_applied = rig.sample()
        cmd = ctl.step(y, u_applied, r, 0.0, 0.0)
        es[k], us[k], ready[k] = ctl.e, cmd, ctl.ready
        rig.advance(shaper.shape(cmd, ctl.ts))
    return es, us, ready


def test_warm_up_holds_u_hold_until_both_windows_are_full():
    ctl = Controller(ControlParams(window_s=0.05, derivative_window_s=0.08), 0.01, -10, 10, 1.5)
    assert ctl.window == 5 and ctl.derivative_window == 8 and ctl.warmup_samples == 9
    for k in range(8):
        assert ctl.step(float(k), 1.5, 0.0, 0.0, 0.0) == 1.5
        assert not ctl.ready and ctl.integral == 0.0
    assert math.isfinite(ctl.f_hat)  # F window (6 samples) already full
    u = ctl.step(8.0, 1.5, 0.0, 0.0, 0.0)
    assert ctl.ready and u != 1.5 and ctl.u == u


def test_window_sizes_follow_the_documented_rounding():
    p = ControlParams(window_s=0.001)
    assert p.window_samples(0.01) == 2
    assert ControlParams(law="iPD", order=2, window_s=0.001).window_samples(0.01) == 3
    assert ControlParams(window_s=0.05).window_samples(0.01) == 5
    assert ControlParams(window_s=0.05, derivative_window_s=0.021).derivative_window_samples(0.01) == 2


def test_ip_closed_loop_on_an_exact_rig():
    # y' = F + alpha·u with F constant, the algebraic estimator (exact here) and the rig's
    # one-sample command delay: after warm-up e_{k+1} = e_k − Kp·Ts·e_{k−1} exactly, and e follows
    # the closed form e0·exp(−Kp·t) of e' + Kp·e = 0 to within the sampling error O(Kp·Ts).
    ts, kp, alpha = 1e-3, 5.0, 2.0
    ctl = Controller(ControlParams(law="iP", alpha=alpha, kp=kp, window_s=0.01), ts, -1e6, 1e6, 0.0)
    rig = DelayedFirstOrderRig(10.0, 3.0, alpha, ts)
    e, u, ready = _drive(ctl, rig, 1000)
    k0 = int(np.argmax(ready))
    recurrence = e[k0 + 2 :] - (e[k0 + 1 : -1] - kp * ts * e[k0:-2])
    assert np.max(np.abs(recurrence)) < 1e-9 * abs(e[k0])
    t = (np.arange(e.size) - k0) * ts
    closed = e[k0] * np.exp(-kp * t[k0:])
    assert np.max(np.abs(e[k0:] - closed)) < 0.01 * abs(e[k0])


def test_ipd_closed_loop_overshoot_on_an_exact_rig():
    # y'' = F + alpha·u, algebraic estimator (exact for constant F) and algebraic derivative
    # (short window). Undershoot of e below 0 ≈ exp(−ζπ/√(1−ζ²)) (textbook formula,
    # "Feedback Control of Dynamic Systems"); the derivative's lag and the sampling shift it a little.
    ts, zeta, omega, alpha = 5e-4, 0.5, 5.0, 5.0
    params = ControlParams(law="iPD", order=2, alpha=alpha, kp=omega**2, kd=2 * zeta * omega,
                           window_s=0.002, derivative_window_s=0.001)
    ctl = Controller(params, ts, -1e6, 1e6, 0.0)
    rig = DelayedSecondOrderRig(1.0, 0.0, 3.0, alpha, ts)
    e, _, _ = _drive(ctl, rig, int(3.0 / ts))
    overshoot = -e.min() / e[0]
    assert overshoot == pytest.approx(math.exp(-zeta * math.pi / math.sqrt(1 - zeta**2)), abs=0.005)


def test_pid_baseline_in_the_controller_uses_u0_and_ignores_f_hat():
    ts = 0.01
    ctl = Controller(ControlParams(law="PID", kp=2.0, ki=0.0, kd=0.0, pid_u0=1.0), ts, -10, 10, 0.0)
    for k in range(ctl.warmup_samples):
        u = ctl.step(3.0 + k, 0.0, 2.5, 0.0, 0.0)
    assert u == pytest.approx(1.0 - 2.0 * (3.0 + ctl.warmup_samples - 1 - 2.5))


def test_a_bad_measurement_passes_through_but_spares_the_integral():
    ts = 0.01
    ctl = Controller(ControlParams(law="iPI", kp=1.0, ki=1.0, window_s=0.03), ts, -1e3, 1e3, 0.0)
    rig = DelayedFirstOrderRig(1.0, 0.5, 1.0, ts)
    _drive(ctl, rig, 50)
    integral = ctl.integral
    u = ctl.step(math.nan, rig.u_applied, 0.0, 0.0, 0.0)
    assert math.isnan(u) and ctl.integral == integral
    e, u, _ = _drive(ctl, rig, 30)
    assert np.all(np.isnan(u[:3])) and np.all(np.isfinite(u[4:]))  # the sample leaves the 4-sample window
    assert math.isfinite(ctl.integral)


# -- parameter changes ------------------------------------------------------------------------


def _running_ip(ts=1e-3, kp=5.0, alpha=2.0, window_s=0.01, law="iP", **extra):
    params = ControlParams(law=law, alpha=alpha, kp=kp, window_s=window_s, **extra)
    ctl = Controller(params, ts, -1e6, 1e6, 0.0)
    rig = DelayedFirstOrderRig(10.0, 3.0, alpha, ts)
    return ctl, rig


def _max_step(u: np.ndarray) -> float:
    return float(np.max(np.abs(np.diff(u))))


def _naive_request(ctl: Controller, samples: list[tuple[float, float]], next_sample: tuple[float, float]) -> float:
    """The request a controller with the new parameters but no bumpless transfer would give."""
    fresh = Controller(ctl.params, ctl.ts, ctl.u_min, ctl.u_max, 0.0)
    for y, ua in samples:
        fresh.step(y, ua, 0.0, 0.0, 0.0)
    return fresh.step(*next_sample, 0.0, 0.0, 0.0)


@pytest.mark.parametrize(
    "change",
    [
        dict(kp=15.0),
        dict(alpha=6.0),
        dict(ki=3.0),  # iP ignores ki: nothing to absorb
        dict(law="iPI", ki=30.0),
        dict(law="PID", kp=3.0, ki=1.0, pid_u0=1.0),
        dict(law="PID", kp=3.0, kd=0.1),
        dict(anti_windup="back-calculation"),
        dict(window_s=0.004),
        dict(estimator="one-step"),
        dict(law="iPD", kp=4.0, kd=4.0),  # order 2: new estimators, r'' instead of r'
    ],
)
def test_the_request_for_the_last_inputs_is_unchanged_by_a_change(change):
    ctl, rig = _running_ip()
    _drive(ctl, rig, 100)
    before = ctl.u
    assert ctl.request_for_last_sample() == pytest.approx(before, rel=1e-12)
    ctl.update_params(**change)
    assert not ctl.switch_pending
    assert ctl.request_for_last_sample() == pytest.approx(before, rel=1e-10)


@pytest.mark.parametrize(
    "change",
    [
        dict(kp=15.0),
        dict(law="iPI", ki=30.0),
        dict(law="PID", kp=3.0, ki=1.0, pid_u0=1.0),
    ],
    ids=["kp", "to-iPI", "to-PID"],
)
def test_gain_changes_while_running_are_bumpless(change):
    ctl, rig = _running_ip()
    samples = []
    for _ in range(100):
        samples.append(rig.sample())
        rig.advance(ctl.step(*samples[-1], 0.0, 0.0, 0.0))
    before = ctl.u
    ctl.update_params(**change)
    assert not ctl.switch_pending
    for key, value in change.items():
        assert getattr(ctl.params, key) == value
    nxt = rig.sample()
    after = ctl.step(*nxt, 0.0, 0.0, 0.0)
    naive = _naive_request(ctl, samples, nxt)
    # without the transfer the request would jump by |naive − before|; with it, it moves only by
    # the change of the inputs over one sample. (An alpha change is not in this list: the
    # estimate F̂ = y' − alpha·u absorbs most of it even without the transfer.)
    assert abs(naive - before) > 1.0
    assert abs(after - before) < 0.1 * abs(naive - before)


@pytest.mark.parametrize(
    "change", [dict(window_s=0.004), dict(estimator="averaging"), dict(derivative_window_s=0.002)],
    ids=["window-shorter", "estimator", "derivative-window"],
)
def test_estimator_changes_within_the_history_switch_at_once_without_a_bump(change):
    ctl, rig = _running_ip()
    e, u, _ = _drive(ctl, rig, 100)
    typical = _max_step(u[50:])  # largest step-to-step change while the error decays
    ctl.update_params(**change)
    assert not ctl.switch_pending
    for key, value in change.items():
        assert getattr(ctl.params, key) == value
    e2, u2, _ = _drive(ctl, rig, 5)
    assert abs(u2[0] - u[-1]) <= 1.5 * typical
    assert ctl.f_hat == pytest.approx(3.0, rel=1e-9)  # the new estimator is exact as well


def test_a_longer_window_switches_once_it_is_full_without_a_bump():
    ctl, rig = _running_ip(window_s=0.01)  # history kept: 11 samples
    e, u, _ = _drive(ctl, rig, 100)
    typical = _max_step(u[50:])
    ctl.update_params(window_s=0.03, kp=8.0)
    assert ctl.switch_pending
    assert ctl.params.window_s == 0.01 and ctl.pending_params.window_s == 0.03
    e2, u2, _ = _drive(ctl, rig, 40)
    assert not ctl.switch_pending and ctl.params.window_s == 0.03 and ctl.params.kp == 8.0
    assert ctl.window == 30
    seq = np.concatenate([u[-1:], u2])
    assert _max_step(seq) <= 1.5 * typical
    # and the estimate stays exact with the new window
    assert ctl.f_hat == pytest.approx(3.0, rel=1e-9)


def test_a_pending_switch_can_be_amended_or_withdrawn():
    ctl, rig = _running_ip(window_s=0.01)
    _drive(ctl, rig, 50)
    ctl.update_params(window_s=0.03)
    ctl.update_params(kp=8.0)  # amends the pending set
    assert ctl.switch_pending and ctl.pending_params.kp == 8.0 and ctl.pending_params.window_s == 0.03
    assert ctl.params.kp == 5.0
    ctl.update_params(window_s=0.01)  # back to the running window: the rest applies at once
    assert not ctl.switch_pending and ctl.params.kp == 8.0 and ctl.window == 10
    e, u, _ = _drive(ctl, rig, 30)
    assert ctl.f_hat == pytest.approx(3.0, rel=1e-9) and abs(e[-1]) < abs(e[0])


def test_law_change_to_ipd_sets_the_order_and_keeps_running():
    ts, alpha = 1e-3, 2.0
    params = ControlParams(law="iP", alpha=alpha, kp=5.0, window_s=0.005)
    ctl = Controller(params, ts, -1e6, 1e6, 0.0)
    rig = DelayedSecondOrderRig(1.0, 0.0, 3.0, alpha, ts)
    for k in range(30):
        y, ua = rig.sample()
        rig.advance(ctl.step(y, ua, 0.0, 0.0, 0.0))
    ctl.update_params(law="iPD", kp=25.0, kd=10.0)
    assert ctl.params.order == 2 and ctl.ready
    e, u, _ = _drive(ctl, rig, 4000)
    assert abs(e[-1]) < 1e-3  # the iPD regulates the double integrator


def test_an_invalid_change_changes_nothing_and_names_the_key():
    ctl, rig = _running_ip()
    _drive(ctl, rig, 30)
    before = ctl.params
    with pytest.raises(ValueError, match="kp = -1"):
        ctl.update_params(kp=-1.0)
    with pytest.raises(ValueError, match="'gain' is not a control parameter"):
        ctl.update_params(gain=2.0)
    with pytest.raises(ValueError, match="order = 2 does not fit law = iP"):
        ctl.update_params(order=2)
    with pytest.raises(ValueError, match="window_s = 1000.0 s is 1000000 samples"):
        ctl.update_params(window_s=1000.0)
    assert ctl.params is before and not ctl.switch_pending


def test_reset_returns_to_warm_up_and_applies_a_pending_switch():
    ctl, rig = _running_ip()
    _drive(ctl, rig, 30)
    ctl.update_params(window_s=0.05)
    assert ctl.switch_pending
    ctl.reset(u_hold=2.0)
    assert not ctl.switch_pending and ctl.params.window_s == 0.05 and not ctl.ready
    assert ctl.step(1.0, 2.0, 0.0, 0.0, 0.0) == 2.0
    with pytest.raises(ValueError, match="u_hold"):
        ctl.reset(u_hold=1e9)


def test_change_during_warm_up_applies_at_once_and_keeps_the_samples():
    ctl, rig = _running_ip(window_s=0.01)
    _drive(ctl, rig, 3)
    ctl.update_params(window_s=0.02)
    assert not ctl.switch_pending and ctl.window == 20 and not ctl.ready
    _, _, ready = _drive(ctl, rig, 18)
    assert not ready[-2] and ready[-1]  # 3 + 18 samples: the 21 needed arrived on the last
    assert ctl.f_hat == pytest.approx(3.0, rel=1e-9)


# -- parameters -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "kwargs,needle",
    [
        (dict(law="iPX"), "law = 'iPX' is unknown"),
        (dict(law="iPD"), "order = 1 does not fit law = iPD"),
        (dict(order=3), "order = 3"),
        (dict(alpha=0.0), "alpha = 0"),
        (dict(alpha="2"), "alpha = '2' is not a finite number"),
        (dict(kp=float("inf")), "kp = inf"),
        (dict(ki=-0.1), "ki = -0.1 is negative"),
        (dict(estimator="observer"), "estimator = 'observer'"),
        (dict(window_s=0.0), "window_s = 0.0"),
        (dict(derivative_window_s=-1.0), "derivative_window_s = -1.0"),
        (dict(anti_windup="clamp"), "anti_windup = 'clamp'"),
        (dict(pid_u0=float("nan")), "pid_u0 = nan"),
    ],
)
def test_control_params_validation_names_field_and_value(kwargs, needle):
    with pytest.raises(ValueError, match=needle.replace("(", r"\(").replace(")", r"\)")):
        ControlParams(**kwargs)


def test_params_from_the_config_mapping():
    p = ControlParams.from_mapping(
        {"output": "speed_rpm", "law": "iPI", "order": 1, "alpha": 25.0, "kp": 5.0, "ki": 1.0,
         "estimator": {"kind": "averaging", "window_s": 0.04}, "derivative_window_s": None}
    )
    assert (p.law, p.estimator, p.window_s, p.alpha) == ("iPI", "averaging", 0.04, 25.0)
    with pytest.raises(ValueError, match="'kpp' is not a control parameter"):
        ControlParams.from_mapping({"kpp": 1.0})


@pytest.mark.parametrize(
    "args,needle",
    [
        ((0.0, -1, 1, 0), "ts = 0.0"),
        ((0.01, 1, -1, 0), "u_min = 1 must be below u_max = -1"),
        ((0.01, -1, 1, 5), "u_hold = 5 must lie within"),
    ],
)
def test_controller_arguments_are_validated(args, needle):
    with pytest.raises(ValueError, match=needle):
        Controller(ControlParams(), *args)


# -- allocation -------------------------------------------------------------------------------


def _memory_growth(ctl: Controller, rig, steps: int, wrap=None) -> int:
    """Bytes still allocated after ``steps`` more closed-loop samples (tracemalloc's own excluded)."""
    step = ctl.step if wrap is None else wrap(ctl.step)

    def run(n):
        for _ in range(n):
            y, ua = rig.sample()
            rig.advance(min(max(step(y, ua, 0.5, 0.0, 0.0), -50.0), 50.0))

    run(200)  # past warm-up, every code path taken once
    tracemalloc.start()
    try:
        before = tracemalloc.take_snapshot()
        run(steps)
        after = tracemalloc.take_snapshot()
    finally:
        tracemalloc.stop()
    return sum(
        stat.size_diff
        for stat in after.compare_to(before, "filename")
        if not stat.traceback[0].filename.endswith("tracemalloc.py")
    )


@pytest.mark.parametrize(
    "params",
    [
        ControlParams(law="iP", alpha=2.0, kp=5.0, window_s=0.02),
        ControlParams(law="iPID", order=2, alpha=2.0, kp=25.0, ki=5.0, kd=10.0, estimator="averaging",
                      window_s=0.02, anti_windup="back-calculation"),
    ],
    ids=["iP-algebraic", "iPID-averaging"],
)
def test_step_does_not_grow_memory(params):
    ts = 1e-3
    ctl = Controller(params, ts, -50.0, 50.0, 0.0)
    rig = (DelayedFirstOrderRig(1.0, 3.0, 2.0, ts) if params.order == 1
           else DelayedSecondOrderRig(1.0, 0.0, 3.0, 2.0, ts))
    assert _memory_growth(ctl, rig, 10_000) <= 0
    assert ctl.ready and math.isfinite(ctl.u)


def test_the_memory_check_sees_a_leak():
    kept = []

    def leaky(step):
        def wrapped(*args):
            u = step(*args)
            kept.append([u])  # keeps one small object per sample
            return u
        return wrapped

    ts = 1e-3
    ctl = Controller(ControlParams(law="iP", alpha=2.0, kp=5.0, window_s=0.02), ts, -50.0, 50.0, 0.0)
    assert _memory_growth(ctl, DelayedFirstOrderRig(1.0, 3.0, 2.0, ts), 2000, wrap=leaky) > 2000 * 50
