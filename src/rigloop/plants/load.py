"""Load torque that changes on its own: slow periodic drift, a random walk, steps, and a ripple
that repeats with the output angle.

Why a separate layer: on a bench the load is rarely constant (a fan's duct pressure wanders, a
filter clogs, an arm's weight pulls with the angle), and a controller that only ever met a
constant load has not been tested. Every part is a deterministic function of time (and angle):
the random walk is drawn on a fixed 10 ms grid from its own seeded generator and interpolated,
so a run gives the same load whatever the call pattern of the integrator.

All torques are at the motor shaft, in N m, positive braking positive speed.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

#: Grid of the random walk [s]: far finer than the drift it models (seconds to minutes).
WALK_GRID_S = 0.01
_CHUNK = 4096


@dataclass(frozen=True)
class LoadSpec:
    """What the load does besides ``set_load`` (all zero: a constant load)."""

    drift_nm: float = 0.0            # amplitude of the slow periodic drift
    drift_period_s: float = 30.0     # its period
    walk_nm: float = 0.0             # random walk intensity [N m / sqrt(s)]
    steps: tuple[tuple[float, float], ...] = ()   # (time [s], torque added from then [N m])
    ripple_nm: float = 0.0           # amplitude of the angle-dependent torque
    ripple_per_rev: float = 1.0      # its cycles per output revolution
    seed: int = 0

    @property
    def active(self) -> bool:
        return bool(self.drift_nm or self.walk_nm or self.steps or self.ripple_nm)


@dataclass
class LoadProfile:
    """Torque of a :class:`LoadSpec` at (t, output angle)."""

    spec: LoadSpec
    _walk: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self._steps = sorted((float(t), float(tq)) for t, tq in self.spec.steps)
        self.reset()

    def reset(self) -> None:
        """Restart the random walk (same seed: the same walk)."""
        self._rng = np.random.default_rng([int(self.spec.seed), 0x10AD])
        self._walk = np.zeros(1)

    def _walk_at(self, t: float) -> float:
        if self.spec.walk_nm == 0.0 or t <= 0.0:
            return 0.0
        pos = t / WALK_GRID_S
        k = int(pos)
        while k + 1 >= self._walk.size:
            incr = self._rng.standard_normal(_CHUNK) * (self.spec.walk_nm * math.sqrt(WALK_GRID_S))
            self._walk = np.concatenate([self._walk, self._walk[-1] + np.cumsum(incr)])
        frac = pos - k
        return float(self._walk[k] * (1.0 - frac) + self._walk[k + 1] * frac)

    def time_part(self, t: float) -> float:
        """Drift + walk + steps at time t [N m] (the part that does not depend on the angle)."""
        s = self.spec
        torque = 0.0
        if s.drift_nm:
            torque += s.drift_nm * math.sin(2.0 * math.pi * t / s.drift_period_s)
        torque += self._walk_at(t)
        for at, step in self._steps:
            if t >= at - 1e-9:
                torque += step
        return torque

    def ripple(self, output_angle: float) -> float:
        """Angle-dependent torque [N m] at the output angle [rad]."""
        s = self.spec
        if not s.ripple_nm:
            return 0.0
        return s.ripple_nm * math.sin(s.ripple_per_rev * output_angle)


def parse_steps(items: Sequence[object] | None) -> tuple[tuple[float, float], ...]:
    """``[{at_s, torque_nm}, ...]`` (as in the config) to ``((at, torque), ...)``."""
    out = []
    for index, item in enumerate(items or ()):
        if not isinstance(item, dict) or "at_s" not in item or "torque_nm" not in item:
            raise ValueError(f"load step {index}: give a mapping {{at_s: TIME, torque_nm: TORQUE}}, "
                             f"got {item!r}")
        out.append((float(item["at_s"]), float(item["torque_nm"])))
    return tuple(out)
