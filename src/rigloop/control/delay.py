"""A known input delay in the control law: predict the output over the delay.

With the ultra-local model ``y^(m)(t) = F + alpha·u(t − tau)`` ("Model-free control",
International Journal of Control, 2013, treats delay systems with it), the estimator pairs y
with the input that acted on the plant (:func:`rigloop.control.estimators.window_weights`), so
F̂ is right. A command sent now still reaches the plant only ``tau`` later, while the inputs
that will act until then are already known: they were applied over the last ``tau``. So the law
works on the output predicted ``tau`` ahead (a predictor in the manner of the Smith predictor;
common practice for dead time), with F̂ held over the horizon:

    order 1:  y(t+tau)  = y + tau·F̂ + alpha·Σ_j W1_j u_{k-j}
    order 2:  y'(t+tau) = y' + tau·F̂ + alpha·Σ_j W1_j u_{k-j}
              y(t+tau)  = y + tau·y' + (tau²/2)·F̂ + alpha·Σ_j W2_j u_{k-j}

``W1_j`` is the time u_{k-j} acts on the plant within ``[t, t+tau)`` and ``W2_j`` the integral
of ``(t + tau − s)`` over that time (the second integration); ``u_k`` itself acts only after the
horizon. The reference is taken ahead by its Taylor series ``r + tau·r' + (tau²/2)·r''``. With
a perfect F̂ the error then obeys the delay-free error equation, shifted by tau.
"""

from __future__ import annotations

import math

import numpy as np

from rigloop.control.ring import interleave


def horizon_weights(delay: float, ts: float) -> tuple[np.ndarray, np.ndarray]:
    """(W1, W2) over ``u_{k-J} .. u_{k-1}`` (oldest first) for a delay of ``delay`` intervals."""
    whole = math.floor(delay)
    frac = delay - whole
    tau = delay * ts
    w1, w2 = [], []
    if frac > 0.0:                      # u_{k-whole-1} acts over [t, t + frac·Ts)
        w1.append(frac * ts)
        w2.append(tau * frac * ts - 0.5 * (frac * ts) ** 2)
    for j in range(whole, 0, -1):       # u_{k-j} acts over the last j-th period of the horizon
        w1.append(ts)
        w2.append(0.5 * ts * ts * (2 * j - 1))
    return np.array(w1), np.array(w2)


class DelayPredictor:
    """The module docstring's prediction, as dot products over the controller's pair window."""

    __slots__ = ("tau", "order", "samples_needed", "_w1", "_w2", "p1", "p2")

    def __init__(self, order: int, delay: float, ts: float) -> None:
        self.order = int(order)
        self.tau = float(delay) * float(ts)
        self._w1, self._w2 = horizon_weights(delay, ts)
        self.samples_needed = self._w1.size + 1

    def fit(self, length: int) -> None:
        """Lay the weights over a window of ``length`` samples (>= samples_needed)."""
        self.p1 = interleave(None, self._w1, length, u_lag=1)
        self.p2 = interleave(None, self._w2, length, u_lag=1)

    def output(self, view: np.ndarray, alpha: float, f_hat: float, y: float, dy: float) -> tuple[float, float]:
        """(y, y') predicted ``tau`` ahead (y' nan for order 1)."""
        tau = self.tau
        if self.order == 1:
            return y + tau * f_hat + alpha * float(self.p1.dot(view)), math.nan
        dy_tau = dy + tau * f_hat + alpha * float(self.p1.dot(view))
        y_tau = y + tau * dy + 0.5 * tau * tau * f_hat + alpha * float(self.p2.dot(view))
        return y_tau, dy_tau

    def reference(self, r: float, dr: float, ddr: float) -> tuple[float, float, float]:
        """(r, r', r'') ``tau`` ahead by their Taylor series (r'' held)."""
        tau = self.tau
        ddr_ = ddr if math.isfinite(ddr) else 0.0
        return r + tau * dr + 0.5 * tau * tau * ddr_, dr + tau * ddr_, ddr
