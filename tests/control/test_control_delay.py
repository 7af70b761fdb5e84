"""A known input delay in the ultra-local model, y^(m)(t) = F + alpha·u(t − tau).

References: the delayed model integrated exactly here (the input is piecewise constant, so each
piece is integrated in closed form: y += h·a for order 1, y += h·v + h²a/2 and v += h·a for
order 2); the closed-form solution e0·exp(−Kp·t) of e' + Kp·e = 0 for the predicted loop.
The delayed model for delay systems is the one of "Model-free control", International Journal
of Control, 2013.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from rigloop.control.controller import Controller, ControlParams
from rigloop.control.delay import horizon_weights
from rigloop.control.estimators import make_estimator


def _delayed_samples(order, f, alpha, u, ts, delay_s, y0=0.0, v0=0.0):
    """Exact samples of y^(order) = F + alpha·u(t − delay) with u held over each interval
    (u[j] applied on [j·Ts, (j+1)·Ts); before t = 0 the input is u[0])."""
    n = u.size
    edges = sorted({j * ts for j in range(n + 1)} | {j * ts + delay_s for j in range(n + 1)})
    edges = [t for t in edges if t <= n * ts + 1e-15]
    y, v, out, t_prev = y0, v0, [y0], 0.0
    sample_times = [(j + 1) * ts for j in range(n)]
    k = 0
    for t in edges[1:]:
        h = t - t_prev
        s = 0.5 * (t + t_prev) - delay_s                 # input acting in this piece
        a = f + alpha * u[min(max(int(math.floor(s / ts)), 0), n - 1)]
        if order == 1:
            y += h * a
        else:
            y, v = y + h * v + 0.5 * h * h * a, v + h * a
        t_prev = t
        while k < n and abs(t - sample_times[k]) < 1e-12:
            out.append(y)
            k += 1
    return np.array(out)


@pytest.mark.parametrize("order, kind, delay_samples", [
    (1, "algebraic", 3), (1, "algebraic", 2.4), (1, "averaging", 5), (1, "one-step", 1.5),
    (2, "algebraic", 2), (2, "averaging", 4),
])
def test_estimate_is_exact_on_the_delayed_model(order, kind, delay_samples):
    ts, f, alpha = 0.01, -3.0, 2.5
    rng = np.random.default_rng(7)
    u = rng.uniform(-1.0, 1.0, 80)
    delay_s = delay_samples * ts
    y = _delayed_samples(order, f, alpha, u, ts, delay_s)
    aware = make_estimator(kind, order, alpha, 12, ts, input_delay_s=delay_s)
    plain = make_estimator(kind, order, alpha, 12, ts)
    for k in range(u.size):
        fa, fp = aware.update(y[k], u[k]), plain.update(y[k], u[k])
    assert fa == pytest.approx(f, abs=1e-8 * (1 + abs(f)))
    assert abs(fp - f) > 1e-3          # the delay-blind estimate is biased on this signal


@pytest.mark.parametrize("delay_s", [0.0, 0.02, 0.034])
def test_controller_and_estimator_share_one_implementation(delay_s):
    # The controller's F̂ and the standalone estimator's agree sample for sample.
    ts, alpha = 0.01, 2.0
    rng = np.random.default_rng(3)
    ctl = Controller(ControlParams(law="iP", alpha=alpha, kp=3.0, window_s=0.08,
                                   input_delay_s=delay_s, quantization_band=0.0),
                     ts, -1e6, 1e6, 0.0)
    est = make_estimator("algebraic", 1, alpha, 8, ts, input_delay_s=delay_s)
    y, u = rng.normal(size=200).cumsum(), rng.uniform(-1, 1, 200)
    for k in range(200):
        ctl.step(y[k], u[k], 0.0, 0.0, 0.0)
        f = est.update(y[k], u[k])
        if est.ready:
            assert ctl.f_hat == pytest.approx(f, rel=1e-12, abs=1e-12)
    assert ctl.warmup_samples == est.samples_needed


def test_zero_delay_gives_the_same_numbers_as_no_delay_option():
    ts = 0.002
    a = Controller(ControlParams(law="iPD", order=2, alpha=5.0, kp=25.0, kd=10.0, window_s=0.02),
                   ts, -10, 10, 0.0)
    b = Controller(ControlParams(law="iPD", order=2, alpha=5.0, kp=25.0, kd=10.0, window_s=0.02,
                                 input_delay_s=0.0), ts, -10, 10, 0.0)
    rng = np.random.default_rng(1)
    for y, u in zip(rng.normal(size=300).cumsum(), rng.uniform(-10, 10, 300)):
        assert a.step(y, u, 0.1, 0.0, 0.0) == b.step(y, u, 0.1, 0.0, 0.0)


def test_horizon_weights_sum_to_the_delay_and_its_moment():
    # W1 sums to tau (time the known inputs act within the horizon); W2 to tau²/2 (∫(tau−s)ds).
    for delay in (1.0, 3.0, 2.4, 0.3):
        ts = 0.01
        w1, w2 = horizon_weights(delay, ts)
        tau = delay * ts
        assert w1.sum() == pytest.approx(tau)
        assert w2.sum() == pytest.approx(0.5 * tau * tau)


class _DelayedIntegratorRig:
    """y' = F + alpha·u(t − tau): the device applies the command of sample k from tick k+1 on
    (one sample), and the plant sees the applied value tau later (exact integration)."""

    def __init__(self, f, alpha, ts, tau, u0):
        self.f, self.alpha, self.ts, self.tau = f, alpha, ts, tau
        self.applied = [u0]
        self.y = 0.0
        self.k = 0

    def sample(self):
        return self.y, self.applied[-1]

    def advance(self, command):
        ts, tau = self.ts, self.tau
        u_hist = self.applied
        # Over [t_k, t_k+1): the plant input is the applied value at s − tau.
        n, frac = int(tau // ts), (tau / ts) % 1.0
        idx_a = len(u_hist) - 1 - n           # acts on the later part of the interval
        idx_b = idx_a - 1                     # acts on the first frac of the interval
        ua = u_hist[max(idx_a, 0)]
        ub = u_hist[max(idx_b, 0)]
        self.y += ts * (self.f + self.alpha * ((1 - frac) * ua + frac * ub))
        u_hist.append(command)


@pytest.mark.parametrize("tau", [0.03, 0.025])
def test_delay_aware_ip_gives_the_delay_free_error_equation(tau):
    # Regulation from an initial error: with the delay known, after warm-up and the delay the
    # error decays as e0·exp(−Kp·t) (closed form, within the sampling error); without it the
    # same gain oscillates (the delay in the loop).
    ts, kp, alpha, f = 0.005, 10.0, 2.0, -3.0
    results = {}
    for known in (False, True):
        ctl = Controller(ControlParams(law="iP", alpha=alpha, kp=kp, window_s=0.05,
                                       input_delay_s=tau if known else 0.0), ts, -1e6, 1e6, 1.5)
        rig = _DelayedIntegratorRig(f, alpha, ts, tau, 1.5)
        e = []
        for k in range(400):
            y, ua = rig.sample()
            r = 0.0 if k < 60 else 1.0          # a setpoint step once warmed up
            rig.advance(ctl.step(y, ua, r, 0.0, 0.0))
            e.append(y - r)
        results[known] = np.array(e)
    aware, blind = results[True], results[False]
    t = np.arange(400) * ts
    start = 60 + int(round(tau / ts)) + 2     # the step has reached the plant
    expected = aware[start] * np.exp(-kp * (t[start:] - t[start]))
    assert np.max(np.abs(aware[start:] - expected)) < 0.06       # O(Kp·Ts) sampling error
    assert aware[start:].max() <= 1e-9 + 0.0                      # no overshoot past r
    assert blind[60:].max() > 0.05                                # the blind loop overshoots
