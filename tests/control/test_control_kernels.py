"""Discrete estimator weights: exactness, identities, and agreement with outside references."""

from __future__ import annotations

import numpy as np
import pytest

from ctl_sim import first_order_zoh, second_order_zoh
from rigloop.control import kernels
from rigloop.control.kernels import (
    algebraic_kernel,
    averaging_kernel,
    derivative_kernel,
    first_order_input_weights,
    one_step_kernel,
    second_derivative_weights,
    slope_weights,
)
from rigloop.control.ring import PairWindow, SlidingWindow, interleave


@pytest.mark.parametrize("n,ts", [(1, 0.01), (2, 0.5), (7, 1e-3), (50, 0.02), (333, 1e-4)])
def test_slope_weights_equal_numpy_polyfit(n, ts):
    # Reference library: numpy.polyfit (least-squares polynomial fit).
    rng = np.random.default_rng(n)
    t = np.arange(n + 1) * ts
    y = rng.normal(size=n + 1) * 10 + 3.0
    expected = np.polyfit(t, y, 1)[0]
    assert np.dot(slope_weights(n, ts), y) == pytest.approx(expected, rel=1e-9, abs=1e-9 * np.abs(y).max() / ts)


@pytest.mark.parametrize("n,ts", [(2, 0.01), (3, 0.5), (8, 1e-3), (61, 0.02), (250, 1e-3)])
def test_second_derivative_weights_equal_numpy_polyfit(n, ts):
    # Reference library: numpy.polyfit; y'' of the fitted quadratic is twice its leading coefficient.
    rng = np.random.default_rng(n)
    t = (np.arange(n + 1) - n / 2) * ts  # centred grid keeps polyfit well conditioned
    y = rng.normal(size=n + 1) * 10 - 1.0
    expected = 2.0 * np.polyfit(t, y, 2)[0]
    scale = np.abs(y).max() / ts**2
    assert np.dot(second_derivative_weights(n, ts), y) == pytest.approx(expected, rel=1e-8, abs=1e-10 * scale)


@pytest.mark.parametrize("n", [1, 2, 5, 40])
def test_slope_is_exact_on_lines(n):
    ts = 0.013
    t = np.arange(n + 1) * ts + 4.2
    y = -7.5 + 3.25 * t
    assert np.dot(slope_weights(n, ts), y) == pytest.approx(3.25, rel=1e-12)


@pytest.mark.parametrize("n", [2, 5, 40])
def test_slope_is_the_centre_slope_of_quadratics_but_not_of_cubics(n):
    # Closed form: the derivative of a polynomial at the window's centre t_c (numpy.polyder as
    # the reference). Exact up to degree 2; a cubic leaves a residue (docstring of slope_weights).
    ts = 0.013
    t = np.arange(n + 1) * ts + 4.2
    t_c = 4.2 + n * ts / 2.0
    c = slope_weights(n, ts)
    for coeffs in ([0.75, -2.0, 1.0], [0.0, 0.5, -1.0], [-4.0, 1.5, 2.0]):
        want = np.polyval(np.polyder(coeffs), t_c)
        assert np.dot(c, np.polyval(coeffs, t)) == pytest.approx(want, rel=1e-9, abs=1e-9)
    cubic = [2.0, 0.0, 0.0, 0.0]                     # 2 (t - t_c)³ has zero slope at the centre
    y = np.polyval(cubic, t - t_c)
    got = np.dot(c, y)
    # Σ c_i·2x_i³ with x_i = (i − n/2)·Ts: 2·Σx⁴/Σx² ≠ 0 (the odd term the weights do not cancel)
    x = (np.arange(n + 1) - n / 2) * ts
    assert got == pytest.approx(2.0 * np.sum(x**4) / np.sum(x**2), rel=1e-9)
    assert abs(got) > 1e-3 * 2.0 * (n * ts) ** 2


@pytest.mark.parametrize("n", [2, 3, 10, 41])
def test_second_derivative_is_exact_on_quadratics(n):
    ts = 0.02
    t = np.arange(n + 1) * ts + 1.7
    y = 1.0 - 2.0 * t + 0.75 * t * t
    assert np.dot(second_derivative_weights(n, ts), y) == pytest.approx(1.5, rel=1e-9)


@pytest.mark.parametrize("n", [1, 4, 33])
def test_first_order_summation_by_parts(n):
    # Σ c_i y_i = Σ_j w_j (y_{j+1} − y_j)/Ts for any y, and Σ w_j = 1.
    ts = 0.01
    c = slope_weights(n, ts)
    w = first_order_input_weights(c, ts)
    y = np.random.default_rng(0).normal(size=n + 1)
    assert np.dot(c, y) == pytest.approx(np.dot(w, np.diff(y) / ts), rel=1e-12, abs=1e-12)
    assert w.sum() == pytest.approx(1.0, rel=1e-13)
    assert np.all(w > 0)


@pytest.mark.parametrize(
    "kernel",
    [
        algebraic_kernel(1, 12, 0.01),
        algebraic_kernel(2, 12, 0.01),
        averaging_kernel(1, 12, 0.01),
        averaging_kernel(2, 12, 0.01),
        averaging_kernel(2, 9, 0.01, derivative_window=3),
        one_step_kernel(1, 0.01),
        one_step_kernel(2, 0.01),
    ],
    ids=["alg1", "alg2", "avg1", "avg2", "avg2-m3", "one1", "one2"],
)
def test_kernel_identities(kernel):
    c, w = kernel.y_weights, kernel.u_weights
    assert c.size == w.size + 1 == kernel.span + 1
    assert c.sum() == pytest.approx(0.0, abs=1e-9 * np.abs(c).sum())
    assert w.sum() == pytest.approx(1.0, rel=1e-12)
    if kernel.order == 2:
        i = np.arange(c.size)
        assert np.dot(c, i) == pytest.approx(0.0, abs=1e-9 * np.abs(c).sum() * c.size)
    assert not c.flags.writeable and not w.flags.writeable


@pytest.mark.parametrize("kind", ["alg", "avg", "one"])
def test_first_order_kernels_exact_for_constant_f_and_random_zoh_input(kind):
    ts, n, f, alpha = 0.004, 17, -12.5, 3.0
    k = {"alg": algebraic_kernel(1, n, ts), "avg": averaging_kernel(1, n, ts), "one": one_step_kernel(1, ts)}[kind]
    rng = np.random.default_rng(3)
    u = rng.uniform(-5, 5, size=k.span)
    y = first_order_zoh(100.0, f, alpha, u, ts)
    f_hat = np.dot(k.y_weights, y) - alpha * np.dot(k.u_weights, u)
    assert f_hat == pytest.approx(f, rel=1e-9, abs=1e-9)


@pytest.mark.parametrize("kind", ["alg", "avg", "one"])
def test_second_order_kernels_exact_for_constant_f_and_random_zoh_input(kind):
    ts, n, f, alpha = 0.01, 14, 4.0, -2.0
    k = {"alg": algebraic_kernel(2, n, ts), "avg": averaging_kernel(2, n, ts), "one": one_step_kernel(2, ts)}[kind]
    rng = np.random.default_rng(4)
    u = rng.uniform(-3, 3, size=k.span)
    y = second_order_zoh(-2.0, 1.5, f, alpha, u, ts)
    f_hat = np.dot(k.y_weights, y) - alpha * np.dot(k.u_weights, u)
    assert f_hat == pytest.approx(f, rel=1e-9, abs=1e-9)


def test_simple_kernels_have_their_textbook_form():
    ts = 0.1
    avg = averaging_kernel(1, 4, ts)
    np.testing.assert_allclose(avg.u_weights, [0.25] * 4, rtol=1e-14)
    np.testing.assert_allclose(avg.y_weights, [-2.5, 0, 0, 0, 2.5], rtol=1e-14)
    one2 = one_step_kernel(2, ts)
    np.testing.assert_allclose(one2.y_weights, [100.0, -200.0, 100.0], rtol=1e-14)
    np.testing.assert_allclose(one2.u_weights, [0.5, 0.5], rtol=1e-14)
    np.testing.assert_array_equal(derivative_kernel(6, ts), slope_weights(6, ts))


def test_discrete_weights_approach_the_continuous_kernels():
    # Continuous algebraic kernels as published in 'Model-free control', International Journal of
    # Control, 2013 (from memory):
    #   m = 1: F = −(6/T³)∫[(T−2σ)y + alpha σ(T−σ)u]dσ
    #   m = 2: F = (60/T⁵)∫[(T²−6Tσ+6σ²)y − (alpha/2)σ²(T−σ)²u]dσ
    # The discrete weights divided by Ts must approach these densities as N grows (error O(1/N)).
    n, t_win = 2000, 1.0
    ts = t_win / n
    sig = np.arange(n + 1) * ts
    mid = (np.arange(n) + 0.5) * ts
    k1 = algebraic_kernel(1, n, ts)
    y1 = -(6 / t_win**3) * (t_win - 2 * sig)
    u1 = (6 / t_win**3) * mid * (t_win - mid)
    assert np.max(np.abs(k1.y_weights / ts - y1)) < 5e-3 * np.max(np.abs(y1))
    assert np.max(np.abs(k1.u_weights / ts - u1)) < 5e-3 * np.max(np.abs(u1))
    k2 = algebraic_kernel(2, n, ts)
    y2 = (60 / t_win**5) * (t_win**2 - 6 * t_win * sig + 6 * sig**2)
    u2 = (60 / t_win**5) * 0.5 * mid**2 * (t_win - mid) ** 2
    assert np.max(np.abs(k2.y_weights / ts - y2)) < 5e-3 * np.max(np.abs(y2))
    assert np.max(np.abs(k2.u_weights / ts - u2)) < 5e-3 * np.max(np.abs(u2))


@pytest.mark.parametrize(
    "call,needle",
    [
        (lambda: slope_weights(0, 0.01), "at least 1"),
        (lambda: slope_weights(3, 0.0), "ts"),
        (lambda: slope_weights(3, float("nan")), "ts"),
        (lambda: second_derivative_weights(1, 0.01), "at least 2"),
        (lambda: slope_weights(2.5, 0.01), "whole number"),
        (lambda: slope_weights(True, 0.01), "whole number"),
        (lambda: algebraic_kernel(3, 10, 0.01), "order"),
        (lambda: slope_weights(kernels.MAX_WINDOW_SAMPLES + 1, 0.01), "limit"),
    ],
)
def test_bad_arguments_are_named(call, needle):
    with pytest.raises(ValueError, match=needle):
        call()


def test_sliding_window_is_contiguous_and_oldest_first():
    w = SlidingWindow(4)
    assert not w.full
    for v in range(1, 11):
        w.push(float(v))
        if v >= 4:
            np.testing.assert_array_equal(w.view(), np.arange(v - 3, v + 1, dtype=float))
            assert w.view().flags.c_contiguous
    assert w.full and w.count == 4
    np.testing.assert_array_equal(w.newest(2), [9.0, 10.0])
    assert w.dot(np.array([1.0, 0, 0, 1.0])) == 7.0 + 10.0
    w.clear()
    assert w.count == 0 and not w.full


def test_sliding_window_view_after_wrapping_twice():
    from rigloop.control import ring

    w = ring.SlidingWindow(5)
    for v in range(12):
        w.push(float(v))
    np.testing.assert_array_equal(w.view(), [7.0, 8.0, 9.0, 10.0, 11.0])


def test_pair_window_interleaves_and_resizes():
    w = PairWindow(3)
    for k in range(5):
        w.push(float(k), 10.0 + k)
    np.testing.assert_array_equal(w.view(), [2, 12, 3, 13, 4, 14])
    ys, us = w.newest(2)
    np.testing.assert_array_equal(ys, [3, 4])
    np.testing.assert_array_equal(us, [13, 14])
    bigger = w.resized(5)
    assert bigger.count == 3 and not bigger.full
    np.testing.assert_array_equal(bigger.view()[-6:], [2, 12, 3, 13, 4, 14])
    smaller = w.resized(2)
    assert smaller.full
    np.testing.assert_array_equal(smaller.view(), [3, 13, 4, 14])


def test_interleaved_weights_align_to_the_newest_sample():
    w = interleave(np.array([1.0, 2.0]), np.array([5.0]), 4)
    # slots: y0 u0 y1 u1 y2 u2 y3 u3 (y3 newest); y-weights on y2, y3; u-weight on u2 (lag 1)
    np.testing.assert_array_equal(w, [0, 0, 0, 0, 1, 5, 2, 0])
    assert not w.flags.writeable
    with pytest.raises(ValueError, match="do not fit"):
        interleave(np.ones(5), None, 4)
    with pytest.raises(ValueError, match="do not fit"):
        interleave(None, np.ones(4), 4)


def test_estimator_weights_over_a_pair_window_equal_the_kernel_form():
    # One dot over the interleaved window = Σ c_i y_i − alpha Σ w_j u_j.
    k = algebraic_kernel(1, 6, 0.01)
    rng = np.random.default_rng(2)
    y, u = rng.normal(size=7), rng.normal(size=7)
    win = PairWindow(9)
    for a, b in zip(np.r_[0.0, 0.0, y], np.r_[0.0, 0.0, u]):
        win.push(a, b)
    w = interleave(k.y_weights, None, 9) - 2.5 * interleave(None, k.u_weights, 9)
    assert win.dot(w) == pytest.approx(np.dot(k.y_weights, y) - 2.5 * np.dot(k.u_weights, u[:-1]), rel=1e-12)


@pytest.mark.parametrize("old_len, new_len, pushed", [(3, 5, 7), (5, 3, 7), (4, 4, 2), (6, 2, 1), (3, 8, 3)])
def test_resized_window_equals_pushing_the_newest_samples_again(old_len, new_len, pushed):
    w = PairWindow(old_len)
    for k in range(pushed):
        w.push(float(k), 100.0 + k)
    fast = w.resized(new_len)
    slow = PairWindow(new_len)
    ys, us = w.newest(min(new_len, w.count))
    for y, u in zip(ys, us):
        slow.push(float(y), float(u))
    np.testing.assert_array_equal(fast.view(), slow.view())
    assert fast.count == slow.count
    fast.push(-1.0, -2.0)                       # and it carries on like the slow one
    slow.push(-1.0, -2.0)
    np.testing.assert_array_equal(fast.view(), slow.view())
