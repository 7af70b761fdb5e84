"""F estimators: exactness on their model, warm-up, alpha changes, window trade-off."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ctl_sim import first_order_zoh, second_order_zoh
from rigloop.control.estimators import ESTIMATOR_KINDS, make_estimator
from rigloop.control.kernels import slope_weights

KINDS_ORDERS = [(k, m) for k in ESTIMATOR_KINDS for m in (1, 2)]


def _run(est, y: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Feed samples (y_k, u_k) and collect F̂_k; u_k is the value applied from tick k on."""
    out = np.empty(y.size)
    for k in range(y.size):
        out[k] = est.update(float(y[k]), float(u[k]))
    return out


@pytest.mark.parametrize("kind,order", KINDS_ORDERS)
def test_exact_on_sampled_polynomials_with_constant_input(kind, order):
    # Degree-1 y for order 1 and degree-2 y for order 2: y^(m) is constant, so F = y^(m) − alpha·u.
    ts, alpha, u0 = 0.01, 2.5, 0.8
    t = np.arange(80) * ts
    if order == 1:
        y = 4.0 + 3.0 * t
        f_true = 3.0 - alpha * u0
    else:
        y = 4.0 - 1.0 * t + 2.75 * t * t
        f_true = 5.5 - alpha * u0
    est = make_estimator(kind, order, alpha, 9, ts)
    f = _run(est, y, np.full(t.size, u0))
    ready = ~np.isnan(f)
    assert ready.sum() == t.size - est.samples_needed + 1
    np.testing.assert_allclose(f[ready], f_true, rtol=1e-9, atol=1e-9)


@pytest.mark.parametrize("kind,order", KINDS_ORDERS)
def test_exact_for_constant_f_and_random_zoh_input(kind, order):
    ts, alpha, f_true = 0.002, -4.0, 17.0
    rng = np.random.default_rng(11)
    u = rng.uniform(-10, 10, size=200)
    if order == 1:
        y = first_order_zoh(50.0, f_true, alpha, u[:-1], ts)
    else:
        y = second_order_zoh(50.0, -3.0, f_true, alpha, u[:-1], ts)
    est = make_estimator(kind, order, alpha, 13, ts)
    f = _run(est, y, u)
    ready = ~np.isnan(f)
    assert ready.any()
    np.testing.assert_allclose(f[ready], f_true, rtol=1e-9, atol=1e-9)


@settings(max_examples=60, deadline=None)
@given(
    kind=st.sampled_from(ESTIMATOR_KINDS),
    order=st.sampled_from([1, 2]),
    f_true=st.floats(-1e3, 1e3),
    alpha=st.floats(-100, 100),
    n=st.integers(2, 60),
    ts=st.floats(1e-4, 0.1),
    seed=st.integers(0, 2**32 - 1),
)
def test_property_exact_for_any_f_alpha_window_and_period(kind, order, f_true, alpha, n, ts, seed):
    rng = np.random.default_rng(seed)
    est = make_estimator(kind, order, alpha, n, ts)
    count = est.samples_needed + 5
    u = rng.uniform(-1, 1, size=count)
    if order == 1:
        y = first_order_zoh(rng.uniform(-10, 10), f_true, alpha, u[:-1], ts)
    else:
        y = second_order_zoh(rng.uniform(-10, 10), rng.uniform(-10, 10), f_true, alpha, u[:-1], ts)
    f = _run(est, y, u)
    # Floating-point bound: 1e-9 of the model's terms, plus the rounding of the y samples
    # amplified by the weights (Σ|c|·max|y|·eps, with margin).
    c = est.kernel.y_weights
    tol = 1e-9 * (1.0 + abs(f_true) + abs(alpha)) + 64 * np.finfo(float).eps * np.abs(c).sum() * np.abs(y).max()
    assert np.all(np.abs(f[est.samples_needed - 1 :] - f_true) <= tol)


@pytest.mark.parametrize("kind,order", KINDS_ORDERS)
def test_warm_up_reports_not_ready_and_nan(kind, order):
    est = make_estimator(kind, order, 1.0, 6, 0.01)
    for k in range(est.samples_needed - 1):
        assert math.isnan(est.update(float(k), 0.0))
        assert not est.ready and math.isnan(est.f_hat)
    assert math.isfinite(est.update(1.0, 0.0))
    assert est.ready
    est.reset()
    assert not est.ready and math.isnan(est.f_hat)


def test_samples_needed_per_kind():
    assert make_estimator("algebraic", 1, 1.0, 10, 0.01).samples_needed == 11
    assert make_estimator("algebraic", 2, 1.0, 10, 0.01).samples_needed == 11
    assert make_estimator("averaging", 1, 1.0, 10, 0.01).samples_needed == 11
    assert make_estimator("averaging", 2, 1.0, 10, 0.01).samples_needed == 16  # + derivative window 5
    assert make_estimator("one-step", 1, 1.0, 10, 0.01).samples_needed == 2
    assert make_estimator("one-step", 2, 1.0, 10, 0.01).samples_needed == 3


@pytest.mark.parametrize("kind,order", KINDS_ORDERS)
def test_set_alpha_recomputes_over_the_same_window(kind, order):
    rng = np.random.default_rng(5)
    y = np.cumsum(rng.normal(size=40))
    u = rng.normal(size=40)
    est = make_estimator(kind, order, 1.0, 7, 0.01)
    _run(est, y, u)
    est.set_alpha(-3.0)
    fresh = make_estimator(kind, order, -3.0, 7, 0.01)
    _run(fresh, y, u)
    assert est.f_hat == pytest.approx(fresh.f_hat, rel=1e-12)
    with pytest.raises(ValueError, match="alpha"):
        est.set_alpha(float("inf"))


def test_a_bad_sample_leaves_the_estimate_with_the_window():
    est = make_estimator("algebraic", 1, 1.0, 5, 0.01)
    y = np.arange(30, dtype=float) * 0.01
    for k in range(30):
        value = math.nan if k == 10 else float(y[k])
        est.update(value, 0.0)
        if 10 <= k <= 15:
            assert math.isnan(est.f_hat)
        elif k > 15:
            assert est.f_hat == pytest.approx(1.0, rel=1e-12)


def _time_varying_run(kind: str, n: int, ts: float, noise: float = 0.0, seed: int = 0):
    # y' = F(t) + alpha·u with F(t) = 10 sin(πt) and a held random input; y integrated exactly.
    alpha = 2.0
    count = 1500
    rng = np.random.default_rng(seed)
    u = rng.uniform(-1, 1, size=count)
    t = np.arange(count) * ts
    integral_f = (10.0 / math.pi) * (1.0 - np.cos(math.pi * t))
    integral_u = np.concatenate([[0.0], np.cumsum(u[:-1]) * ts])
    y = 1.0 + integral_f + alpha * integral_u + noise * rng.normal(size=count)
    est = make_estimator(kind, 1, alpha, n, ts)
    f_hat = _run(est, y, u)
    return t, f_hat, 10.0 * np.sin(math.pi * t)


@pytest.mark.parametrize("kind", ["algebraic", "averaging"])
def test_estimate_converges_to_f_as_the_window_shrinks(kind):
    # Noise-free, time-varying F: the estimate lags by about half a window, so its error falls
    # with the window (common practice).
    ts = 0.002
    worst = []
    for n in (80, 40, 20, 10, 5):
        t, f_hat, f_true = _time_varying_run(kind, n, ts)
        ok = ~np.isnan(f_hat)
        worst.append(np.max(np.abs(f_hat[ok] - f_true[ok])))
    assert all(a > b for a, b in zip(worst, worst[1:])), worst
    # |F'| <= 10π; a lag of T/2 = 5·Ts/2 bounds the error by about 10π·5·Ts/2
    assert worst[-1] < 10 * math.pi * 5 * ts / 2 * 1.2


def test_algebraic_variance_falls_as_the_window_grows():
    # Noisy data: the variance of the least-squares slope is σ²/Σ(t_i − t̄)²
    # = 12σ²/(Ts²·N(N+1)(N+2)) (textbook least-squares result); longer windows filter more
    # (common practice).
    ts, sigma = 0.01, 0.05
    variances = []
    for n in (5, 10, 20, 40):
        t, f_hat, f_true = _time_varying_run("algebraic", n, ts, noise=sigma, seed=n)
        ok = ~np.isnan(f_hat)
        # remove the (deterministic) noise-free estimate to keep only the noise part
        _, clean, _ = _time_varying_run("algebraic", n, ts, noise=0.0, seed=n)
        noise_part = f_hat[ok] - clean[ok]
        variances.append(noise_part.var())
        expected = sigma**2 * np.sum(slope_weights(n, ts) ** 2)
        assert expected == pytest.approx(12 * sigma**2 / (ts**2 * n * (n + 1) * (n + 2)), rel=1e-12)
        assert noise_part.var() == pytest.approx(expected, rel=0.2)
    assert all(a > b for a, b in zip(variances, variances[1:]))


@pytest.mark.parametrize(
    "args,needle",
    [
        (("observer", 1, 1.0, 5, 0.01), "unknown.*algebraic, averaging, one-step"),
        (("algebraic", 3, 1.0, 5, 0.01), "order"),
        (("algebraic", 2, 1.0, 1, 0.01), ">= 2"),
        (("averaging", 1, 1.0, 0, 0.01), ">= 1"),
        (("algebraic", 1, 1.0, 4.5, 0.01), "whole number"),
        (("algebraic", 1, float("nan"), 5, 0.01), "alpha"),
        (("algebraic", 1, 1.0, 5, -0.01), "ts"),
    ],
)
def test_make_estimator_rejects_bad_arguments_with_clear_messages(args, needle):
    with pytest.raises(ValueError, match=needle):
        make_estimator(*args)
