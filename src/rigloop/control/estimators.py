"""Estimators of the lumped unknown F of the ultra-local model ``y^(m) = F + alpha·u``.

All three kinds are the same sliding-window linear estimator and differ only in their weights
(:mod:`rigloop.control.kernels`):

* ``algebraic`` — derivative-free, least-squares weights; robust to measurement noise.
* ``averaging`` — the mean of ``y^(m) − alpha·u`` over the window.
* ``one-step`` — a difference quotient over the last sample(s); follows F fastest, filters
  nothing.

A shorter window follows a changing F faster; a longer one filters more noise. Each estimate is
recomputed from the window (no running sums), so a bad sample leaves the estimate once it has
left the window, and rounding never accumulates. A new alpha gives the new estimate over the same
window at once (:meth:`Estimator.set_alpha`).

**A known input delay** ``tau`` (the ultra-local model ``y^(m)(t) = F + alpha·u(t − tau)`` for
delay systems, as in "Model-free control", International Journal of Control, 2013) pairs each
y-interval with the input that acted on the plant then: the u-weights move ``tau/Ts`` samples
back (:func:`window_weights`). Without it, F̂ absorbs ``alpha·(u(t − tau) − u(t))`` and the
loop reacts to its own commands as if they were disturbances. For a whole number of samples the
estimate stays exact on the delayed model; a fraction of a sample splits each weight between
the two inputs that acted during the interval, exact for order 1 (the zero-order-hold input is
piecewise constant) and a linear interpolation for order 2.

The controller (:mod:`rigloop.control.controller`) and :class:`Estimator` lay the weights with
the same functions, so a test of one is a test of the other.
"""

from __future__ import annotations

import math
import numbers

import numpy as np

from rigloop.control.kernels import Kernel, algebraic_kernel, averaging_kernel, one_step_kernel
from rigloop.control.ring import PairWindow, interleave

#: Estimator kinds accepted by :func:`make_estimator`.
ESTIMATOR_KINDS = ("algebraic", "averaging", "one-step")


def _check_alpha(alpha: float) -> float:
    if isinstance(alpha, bool) or not isinstance(alpha, numbers.Real) or not math.isfinite(alpha):
        raise ValueError(f"alpha must be a finite number, got {alpha!r}")
    return float(alpha)


def delay_intervals(delay_s: float, ts: float) -> float:
    """A known input delay in sample intervals (ValueError when negative or not finite)."""
    if isinstance(delay_s, bool) or not isinstance(delay_s, numbers.Real) or not math.isfinite(delay_s) \
            or delay_s < 0:
        raise ValueError(f"input delay must be a finite number of seconds >= 0, got {delay_s!r}")
    d = float(delay_s) / float(ts)
    # A delay within a millionth of a whole number of samples is that whole number (rounding of
    # tau/Ts must not add a sample of history and a tiny weight).
    return float(round(d)) if abs(d - round(d)) < 1e-6 else d


def samples_needed(kernel: Kernel, delay: float = 0.0) -> int:
    """Samples of ``(y, u)`` the estimate reads: the kernel's span + 1, plus the delay's."""
    return kernel.span + 1 + math.ceil(delay)


def window_weights(kernel: Kernel, length: int, delay: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """(y-weights, u-weights) of ``kernel`` over a :class:`PairWindow` of ``length`` samples.

    The y-weights end on the newest y; the u-weights end on the input that acted during the
    newest interval: ``u_{k-1}`` without delay, ``delay`` samples older with one (a fraction
    splits each weight between its two neighbours; module docstring). Read-only arrays.
    """
    wy = interleave(kernel.y_weights, None, length)
    whole = math.floor(delay)
    frac = delay - whole
    wu = interleave(None, kernel.u_weights, length, u_lag=1 + whole)
    if frac > 0.0:
        wu = (1.0 - frac) * wu + frac * interleave(None, kernel.u_weights, length, u_lag=2 + whole)
        wu.flags.writeable = False
    return wy, wu


class Estimator:
    """Sliding-window estimate of F from the measured output and the applied input.

    Call :meth:`update` once per sample with ``y_k`` and the actuator value applied from tick k
    on; the estimate uses ``y_{k−L..k}`` and ``u_{k−L..k−1}``. Until ``samples_needed`` samples
    have arrived, ``ready`` is False and ``f_hat`` is nan (warm-up). The y- and u-weights are
    merged into one vector over the interleaved window, so a sample costs one dot product.
    """

    def __init__(self, kind: str, kernel: Kernel, alpha: float, window: int, delay: float = 0.0) -> None:
        self.kind = kind
        self.order = kernel.order
        self.window = int(window)
        self.ts = kernel.ts
        self.kernel = kernel
        self.delay = float(delay)
        self.samples_needed = samples_needed(kernel, self.delay)
        self._ring = PairWindow(self.samples_needed)
        self._wy, self._wu = window_weights(kernel, self.samples_needed, self.delay)
        self.ready = False
        self.f_hat = math.nan
        self.set_alpha(alpha)

    def update(self, y: float, u_applied: float) -> float:
        """Add sample k and return F̂_k (nan during warm-up)."""
        ring = self._ring
        ring.push(y, u_applied)  # u_k carries weight 0 here: it acts from tick k on
        if ring.count >= self.samples_needed:
            self.f_hat = float(self._w.dot(ring.view()))
            self.ready = True
        return self.f_hat

    def set_alpha(self, alpha: float) -> None:
        """Change alpha; the current estimate is recomputed over the same window at once."""
        self.alpha = _check_alpha(alpha)
        self._w = self._wy - self.alpha * self._wu
        if self.ready:
            self.f_hat = float(self._w.dot(self._ring.view()))

    def reset(self) -> None:
        """Forget every sample (back to warm-up)."""
        self._ring.clear()
        self.ready = False
        self.f_hat = math.nan

    def __repr__(self) -> str:
        return (
            f"{type(self).__name__}(order={self.order}, window={self.window}, "
            f"ts={self.ts!r}, alpha={self.alpha!r})"
        )


def min_window(kind: str, order: int) -> int:
    """Smallest window (intervals) the kind accepts for this order."""
    return 1 if kind == "averaging" else order


def make_kernel(kind: str, order: int, window: int, ts: float) -> Kernel:
    """The weights of an estimator kind (arguments as for :func:`make_estimator`)."""
    if kind not in ESTIMATOR_KINDS:
        raise ValueError(f"estimator kind {kind!r} is unknown; use one of {', '.join(ESTIMATOR_KINDS)}")
    if isinstance(order, bool) or order not in (1, 2):
        raise ValueError(f"estimator order must be 1 or 2, got {order!r}")
    if kind == "one-step":
        return one_step_kernel(order, ts)
    if isinstance(window, bool) or not isinstance(window, numbers.Integral) or window < min_window(kind, order):
        raise ValueError(
            f"estimator window must be a whole number >= {min_window(kind, order)} sample "
            f"intervals for the {kind} kind of order {order}, got {window!r}"
        )
    if kind == "algebraic":
        return algebraic_kernel(order, int(window), ts)
    return averaging_kernel(order, int(window), ts)


def make_estimator(kind: str, order: int, alpha: float, window: int, ts: float,
                   input_delay_s: float = 0.0) -> Estimator:
    """Build an estimator; ``window`` is N, the number of sample intervals (T = N·Ts).

    ``kind`` is one of :data:`ESTIMATOR_KINDS`. The one-step kind always looks back ``order``
    intervals, whatever ``window`` says. ``input_delay_s`` is a known input delay (module
    docstring).
    """
    kernel = make_kernel(kind, order, window, ts)
    return Estimator(kind, kernel, alpha, order if kind == "one-step" else int(window),
                     delay_intervals(input_delay_s, ts))
