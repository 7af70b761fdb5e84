"""Discrete weights of the F estimators, exact on the signals they are built for.

Conventions (docs/architecture.md): sample k carries ``y_k`` and ``u_k``, the actuator value
applied from tick k on (zero-order hold over ``[t_k, t_k+1)``). A window of ``L`` intervals uses
``y_{k-L..k}`` (L+1 values) and ``u_{k-L..k-1}`` (L values), both stored oldest first, so the
index ``i`` below counts samples from the window start (time ``σ_i = i·Ts``).

Every estimator in :mod:`rigloop.control.estimators` has the same linear form

    F̂ = Σ_i c_i y_i − alpha · Σ_j w_j u_j

and only the weights differ. The y-weights ``c`` are chosen first (a least-squares fit, a
difference quotient, ...); the u-weights ``w`` are then *derived* from ``c`` by summation by
parts so that F̂ is exact for the ultra-local model with constant F and any zero-order-hold u:

* order 1, ``y' = F + alpha·u``: ``y_{j+1} − y_j = Ts·(F + alpha·u_j)`` exactly. If ``Σ c_i = 0``
  then ``Σ_i c_i y_i = Σ_j C_j (y_{j+1} − y_j)`` with ``C_j = Σ_{i>j} c_i``, hence
  ``w_j = Ts·C_j`` (:func:`first_order_input_weights`).
* order 2, ``y'' = F + alpha·u``: for a double integrator driven through a zero-order hold,
  ``y_{j+1} − 2y_j + y_{j−1} = Ts²/2 · (a_j + a_{j−1})`` with ``a = F + alpha·u``. If ``c``
  annihilates constants and ramps then ``Σ_i c_i y_i = Σ_j D_j (y_{j+1} − 2y_j + y_{j−1})`` with
  ``D_j = Σ_{i>j} (i − j)·c_i`` (zero at both ends), hence ``w_j = Ts²/2 · (D_j + D_{j+1})``
  (:func:`second_order_input_weights`). The identity follows from
  ``c_j = D_{j−1} − 2D_j + D_{j+1}``, which holds because ``D_{j−1} − D_j = Σ_{i≥j} c_i``.

Because the y-weights reproduce the derivative exactly on polynomials of the model's degree,
``Σ w_j = 1`` in both cases, so the u-part is a weighted mean of the applied input. All weights
are computed once per (kind, order, window, Ts) and returned read-only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: Largest window accepted, in samples (memory and per-sample work grow with it).
MAX_WINDOW_SAMPLES = 100_000


def _check_ts(ts: float) -> float:
    if isinstance(ts, bool) or not isinstance(ts, (int, float)) or not math.isfinite(ts) or ts <= 0:
        raise ValueError(f"sample period ts must be a finite number > 0 s, got {ts!r}")
    return float(ts)


def _check_intervals(n: int, minimum: int, what: str) -> int:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)):
        raise ValueError(f"{what} must be a whole number of sample intervals, got {n!r}")
    if n < minimum:
        raise ValueError(f"{what} must be at least {minimum} sample intervals, got {n}")
    if n > MAX_WINDOW_SAMPLES:
        raise ValueError(
            f"{what} of {n} samples exceeds the limit of {MAX_WINDOW_SAMPLES}; "
            "shorten the window or lower the sample rate"
        )
    return int(n)


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.ascontiguousarray(a, dtype=float)
    a.flags.writeable = False
    return a


def slope_weights(n: int, ts: float) -> np.ndarray:
    """Least-squares slope of ``n+1`` equally spaced samples: ``ŷ' = Σ c_i y_i``.

    ``c_i = 12·(i − n/2) / (Ts·n·(n+1)·(n+2))``. Exact for any sampled straight line. For a
    sampled polynomial of degree 2 it gives exactly the slope at the window's centre (a lag of
    ``n·Ts/2``): the weights are odd about the centre, so they cancel the even ``(i − n/2)²``
    term. From degree 3 on it does not: the odd ``(i − n/2)³`` term leaves
    ``Σ c_i (i − n/2)³ ≠ 0``, so for other curved signals the centre slope is an approximation
    whose error grows with the third derivative and ``n²``. It is the discrete form of the
    continuous kernel ``−(6/T³)(T − 2σ)``.
    """
    n = _check_intervals(n, 1, "slope window")
    ts = _check_ts(ts)
    i = np.arange(n + 1, dtype=float)
    return _frozen(12.0 * (i - n / 2.0) / (ts * n * (n + 1) * (n + 2)))


def second_derivative_weights(n: int, ts: float) -> np.ndarray:
    """Second derivative of the least-squares quadratic through ``n+1`` samples.

    With ``x_i = i − n/2`` and the centred quadratic ``p_i = x_i² − mean(x²)`` (orthogonal to
    1 and x on the symmetric grid), the fitted ``y'' = 2·Σ p_i y_i / (Ts²·Σ p_i²)``. Exact for
    any sampled quadratic; the discrete form of ``(60/T⁵)(T² − 6Tσ + 6σ²)``.
    """
    n = _check_intervals(n, 2, "second-derivative window")
    ts = _check_ts(ts)
    x = np.arange(n + 1, dtype=float) - n / 2.0
    p = x * x - np.mean(x * x)
    return _frozen(2.0 * p / (ts * ts * float(np.dot(p, p))))


def first_order_input_weights(y_weights: np.ndarray, ts: float) -> np.ndarray:
    """u-weights making the estimate exact for ``y' = F + alpha·u`` (module docstring, order 1)."""
    c = np.asarray(y_weights, dtype=float)
    ts = _check_ts(ts)
    tail = np.cumsum(c[::-1])[::-1]  # tail[j] = Σ_{i>=j} c_i
    return _frozen(ts * tail[1:])


def second_order_input_weights(y_weights: np.ndarray, ts: float) -> np.ndarray:
    """u-weights making the estimate exact for ``y'' = F + alpha·u`` (module docstring, order 2)."""
    c = np.asarray(y_weights, dtype=float)
    ts = _check_ts(ts)
    length = c.size - 1
    g = np.cumsum(c[::-1])[::-1]  # g[j] = Σ_{i>=j} c_i
    # D_j = Σ_{i>j} (i − j) c_i = Σ_{m>j} g[m]  (the second tail sum)
    d = np.zeros(length + 1)
    d[:-1] = np.cumsum(g[::-1])[::-1][1:]
    d[0] = 0.0  # equals Σ i·c_i = 0 for weights that annihilate ramps; set exactly
    return _frozen(0.5 * ts * ts * (d[:-1] + d[1:]))


@dataclass(frozen=True)
class Kernel:
    """Weights of one estimator: ``F̂ = y_weights · y_window − alpha · u_weights · u_window``."""

    order: int
    ts: float
    y_weights: np.ndarray  # span + 1 values, oldest first
    u_weights: np.ndarray  # span values, oldest first

    @property
    def span(self) -> int:
        """Number of sample intervals the estimate looks back over."""
        return int(self.u_weights.size)


def _input_weights(order: int, c: np.ndarray, ts: float) -> np.ndarray:
    if order == 1:
        return first_order_input_weights(c, ts)
    return second_order_input_weights(c, ts)


def _check_order(order: int) -> int:
    if isinstance(order, bool) or order not in (1, 2):
        raise ValueError(f"model order must be 1 or 2, got {order!r}")
    return int(order)


def algebraic_kernel(order: int, n: int, ts: float) -> Kernel:
    """The derivative-free algebraic estimator on a window of ``n`` intervals (T = n·Ts).

    Order 1: least-squares slope of y minus alpha times a parabola-weighted mean of u, the
    discrete form of ``F̂ = −(6/T³)∫[(T−2σ)y + alpha·σ(T−σ)u]dσ``.
    Order 2: least-squares second derivative of y minus alpha times a quartic-weighted mean of
    u, the discrete form of ``F̂ = (60/T⁵)∫[(T²−6Tσ+6σ²)y − (alpha/2)σ²(T−σ)²u]dσ``.
    """
    order = _check_order(order)
    if order == 1:
        c = slope_weights(n, ts)
    else:
        c = second_derivative_weights(n, ts)
    return Kernel(order, float(ts), c, _input_weights(order, c, ts))


def averaging_kernel(order: int, n: int, ts: float, derivative_window: int | None = None) -> Kernel:
    """The averaging estimator ``F̂ = (1/T)∫(y^(m) − alpha·u)`` over ``n`` intervals.

    Order 1: ``(y_k − y_{k−n})/T − alpha·mean(u_{k−n..k−1})``.
    Order 2: ``(ŷ'_k − ŷ'_{k−n})/T − alpha·(weighted mean of u)``, where ``ŷ'`` is the
    least-squares slope over ``derivative_window`` intervals (default ``max(1, n//2)``) ending
    at each end of the window. The whole estimate then spans ``n + derivative_window``
    intervals; the u-weights follow from the second summation by parts (module docstring).
    """
    order = _check_order(order)
    n = _check_intervals(n, 1, "averaging window")
    ts = _check_ts(ts)
    if order == 1:
        c = np.zeros(n + 1)
        c[0], c[-1] = -1.0 / (n * ts), 1.0 / (n * ts)
        c = _frozen(c)
    else:
        m = max(1, n // 2) if derivative_window is None else derivative_window
        m = _check_intervals(m, 1, "averaging derivative window")
        s = slope_weights(m, ts)
        c = np.zeros(n + m + 1)
        c[n:] += s / (n * ts)
        c[: m + 1] -= s / (n * ts)
        c = _frozen(c)
    return Kernel(order, ts, c, _input_weights(order, c, ts))


def one_step_kernel(order: int, ts: float) -> Kernel:
    """The one-step estimator: a difference quotient over the last sample(s).

    Order 1: ``F̂ = (y_k − y_{k−1})/Ts − alpha·u_{k−1}``.
    Order 2: ``F̂ = (y_k − 2y_{k−1} + y_{k−2})/Ts² − alpha·(u_{k−2} + u_{k−1})/2`` (the
    half-and-half u weights make it exact for a zero-order-hold input).
    """
    order = _check_order(order)
    ts = _check_ts(ts)
    if order == 1:
        c = _frozen(np.array([-1.0, 1.0]) / ts)
    else:
        c = _frozen(np.array([1.0, -2.0, 1.0]) / (ts * ts))
    return Kernel(order, ts, c, _input_weights(order, c, ts))


def derivative_kernel(n: int, ts: float) -> np.ndarray:
    """Weights of the algebraic derivative: the order-1 kernel with alpha = 0 (LS slope)."""
    return slope_weights(n, ts)
