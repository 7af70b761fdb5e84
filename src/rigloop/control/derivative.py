"""Algebraic (least-squares) derivative of a sampled signal, for e' in iPD/iPID and PID.

The weights are those of the order-1 F kernel with alpha = 0: the least-squares slope over the
last N intervals. Exact for any sampled straight line; on a curved signal it returns the slope at
the window's centre, i.e. it lags by ``N·Ts/2`` — the price of its noise rejection.
"""

from __future__ import annotations

import math

from rigloop.control.kernels import derivative_kernel
from rigloop.control.ring import SlidingWindow


class AlgebraicDerivative:
    """``update(x_k)`` returns the slope of the last ``window`` intervals (nan during warm-up)."""

    def __init__(self, window: int, ts: float) -> None:
        self._c = derivative_kernel(window, ts)
        self.window = int(window)
        self.ts = float(ts)
        self.samples_needed = self.window + 1
        self._x = SlidingWindow(self.window + 1)
        self.ready = False
        self.value = math.nan

    def update(self, x: float) -> float:
        """Add one sample and return the derivative estimate."""
        self._x.push(x)
        if self._x.full:
            self.value = self._x.dot(self._c)
            self.ready = True
        return self.value

    def reset(self) -> None:
        """Forget every sample (back to warm-up)."""
        self._x.clear()
        self.ready = False
        self.value = math.nan

    def __repr__(self) -> str:
        return f"AlgebraicDerivative(window={self.window}, ts={self.ts!r})"
