"""Exact sampled plants for the control-core tests (ultra-local models with ZOH input)."""

from __future__ import annotations

import numpy as np


def first_order_zoh(y0: float, f: float, alpha: float, u: np.ndarray, ts: float) -> np.ndarray:
    """Samples of ``y' = F + alpha·u`` with constant F and u held over each interval (exact)."""
    y = np.empty(u.size + 1)
    y[0] = y0
    y[1:] = y0 + ts * np.cumsum(f + alpha * u)
    return y


def second_order_zoh(y0: float, v0: float, f: float, alpha: float, u: np.ndarray, ts: float) -> np.ndarray:
    """Samples of ``y'' = F + alpha·u`` with constant F and u held over each interval (exact)."""
    y = np.empty(u.size + 1)
    y[0] = y0
    pos, vel = y0, v0
    for j, uj in enumerate(u):
        a = f + alpha * uj
        pos = pos + ts * vel + 0.5 * ts * ts * a
        vel = vel + ts * a
        y[j + 1] = pos
    return y


class DelayedFirstOrderRig:
    """``y' = F + alpha·u`` where the command of sample k is applied from tick k+1 on.

    That is the rig's timing (docs/architecture.md): each sample reports the value applied
    from its own tick on, which is the command computed one sample earlier.
    """

    def __init__(self, y0: float, f: float, alpha: float, ts: float, u0: float = 0.0) -> None:
        self.y, self.f, self.alpha, self.ts = y0, f, alpha, ts
        self.u_applied = u0

    def sample(self) -> tuple[float, float]:
        return self.y, self.u_applied

    def advance(self, command: float) -> None:
        self.y += self.ts * (self.f + self.alpha * self.u_applied)
        self.u_applied = command


class DelayedSecondOrderRig:
    """``y'' = F + alpha·u`` with the same one-sample command timing."""

    def __init__(self, y0: float, v0: float, f: float, alpha: float, ts: float, u0: float = 0.0) -> None:
        self.y, self.v, self.f, self.alpha, self.ts = y0, v0, f, alpha, ts
        self.u_applied = u0

    def sample(self) -> tuple[float, float]:
        return self.y, self.u_applied

    def advance(self, command: float) -> None:
        a = self.f + self.alpha * self.u_applied
        self.y += self.ts * self.v + 0.5 * self.ts * self.ts * a
        self.v += self.ts * a
        self.u_applied = command
