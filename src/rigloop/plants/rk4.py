"""Fixed-step classical fourth-order method (RK4) with sub-steps.

Why fixed-step: the simulated device must advance the plant by exactly one sample period per
tick, in bounded and predictable time, and give the same trajectory every run. An adaptive
integrator would do neither. The plants choose the number of sub-steps per period so that the
step stays well inside RK4's stability region for their fastest time constant.

One step of size h from (t, x) with the input u held constant (zero-order hold)::

    k1 = f(t,       x,            u)
    k2 = f(t + h/2, x + h/2 * k1, u)
    k3 = f(t + h/2, x + h/2 * k2, u)
    k4 = f(t + h,   x + h   * k3, u)
    x <- x + h/6 * (k1 + 2 k2 + 2 k3 + k4)

Allocation-light: the stage vectors are allocated once; ``rhs_into`` writes into them.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

RhsInto = Callable[[float, np.ndarray, float, np.ndarray], None]
"""``rhs_into(t, x, u, out)`` writes dx/dt into ``out`` (no allocation)."""


class RK4:
    """Classical RK4 integrator for ``dx/dt = f(t, x, u)`` with ``u`` held over each call."""

    def __init__(self, rhs_into: RhsInto, size: int) -> None:
        if size < 1:
            raise ValueError(f"RK4 state size must be >= 1, got {size}")
        self._rhs_into = rhs_into
        self.size = int(size)
        self._k1 = np.empty(self.size)
        self._k2 = np.empty(self.size)
        self._k3 = np.empty(self.size)
        self._k4 = np.empty(self.size)
        self._xs = np.empty(self.size)

    def step(self, t: float, x: np.ndarray, u: float, h: float) -> None:
        """Advance ``x`` in place by one step of size ``h`` (see the module docstring)."""
        f = self._rhs_into
        k1, k2, k3, k4, xs = self._k1, self._k2, self._k3, self._k4, self._xs
        half = 0.5 * h
        f(t, x, u, k1)
        np.multiply(k1, half, out=xs)
        xs += x
        f(t + half, xs, u, k2)
        np.multiply(k2, half, out=xs)
        xs += x
        f(t + half, xs, u, k3)
        np.multiply(k3, h, out=xs)
        xs += x
        f(t + h, xs, u, k4)
        k2 += k3
        k2 *= 2.0
        k2 += k1
        k2 += k4
        k2 *= h / 6.0
        x += k2

    def advance(self, t: float, x: np.ndarray, u: float, dt: float, substeps: int) -> float:
        """Advance ``x`` in place over ``[t, t + dt]`` in ``substeps`` equal steps; return ``t + dt``.

        Sub-step times are computed as ``t + j*h`` (not accumulated) so that long runs do not
        drift in time.
        """
        n = int(substeps)
        if n < 1:
            raise ValueError(f"substeps must be >= 1, got {substeps}")
        if not (math.isfinite(dt) and dt > 0.0):
            raise ValueError(f"dt must be a positive finite number of seconds, got {dt}")
        h = dt / n
        for j in range(n):
            self.step(t + j * h, x, u, h)
        return t + dt


def substeps_for(dt: float, max_step: float) -> int:
    """Smallest number of equal sub-steps of ``dt`` that are each at most ``max_step`` long."""
    if not (math.isfinite(max_step) and max_step > 0.0):
        raise ValueError(f"max_step must be a positive finite number of seconds, got {max_step}")
    # The small relative slack keeps dt = n*max_step from rounding up to n+1.
    return max(1, math.ceil(dt / max_step * (1.0 - 1e-12)))
