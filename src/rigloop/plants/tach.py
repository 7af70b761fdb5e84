"""A pulse tachometer: the speed a rig really reports when its sensor gives N pulses per turn.

Why: a fan's tach line (or a hall sensor on a motor) does not give the speed; the firmware
measures the time between pulses. So the reading changes only when a pulse arrives, is stale
between pulses, and is 0 when no pulse came for ``timeout_s`` or the last period was longer
(the firmware's timer overflows: it cannot tell a slow shaft from a stopped one), i.e. below
``1 / (pulses_per_rev * timeout_s)`` rev/s. A tach
gives no direction: the reading is the speed's magnitude.

The shaft angle is integrated from the true speed with the trapezoid rule between the times
the plant is advanced to, and pulse times are interpolated linearly inside each interval.
"""

from __future__ import annotations

import math


class PulseTach:
    """Pulses every ``2 pi / pulses_per_rev`` of shaft travel; reading in rad/s of the shaft."""

    def __init__(self, pulses_per_rev: int, timeout_s: float) -> None:
        if int(pulses_per_rev) < 1:
            raise ValueError(f"tach pulses_per_rev = {pulses_per_rev!r}: give a whole number >= 1")
        if not (math.isfinite(timeout_s) and timeout_s > 0.0):
            raise ValueError(f"tach timeout_s = {timeout_s!r}: give a number of seconds > 0")
        self.pulses_per_rev = int(pulses_per_rev)
        self.timeout_s = float(timeout_s)
        self.spacing = 2.0 * math.pi / self.pulses_per_rev
        self.reset()

    @property
    def min_speed_rad_s(self) -> float:
        """Below this the reading is 0 (one pulse per timeout) [rad/s]."""
        return self.spacing / self.timeout_s

    def reset(self, t: float = 0.0, speed: float = 0.0) -> None:
        """Start at time t turning at ``speed`` (in steady rotation the pulses are regular)."""
        self._travel = 0.0
        self._next = self.spacing
        self._t = float(t)
        self._speed = abs(float(speed))
        if self._speed > 0.0:
            period = self.spacing / self._speed
            self._last = self._t - 0.5 * period
            self._previous = self._last - period
        else:
            self._last = self._previous = -math.inf

    def advance(self, t1: float, speed1: float) -> None:
        """The shaft moved from the last time to t1, its speed going linearly to ``speed1``."""
        t0, s0, s1 = self._t, self._speed, abs(float(speed1))
        dt = t1 - t0
        if dt <= 0.0:
            return
        travel1 = self._travel + 0.5 * (s0 + s1) * dt
        while self._next <= travel1:
            # Time at which the travel reaches the pulse (quadratic in time for a linear speed).
            need = self._next - self._travel
            a = 0.5 * (s1 - s0) / dt
            if abs(a) * dt * dt < 1e-12 * max(need, 1e-300):
                tau = need / s0 if s0 > 0 else dt
            else:
                disc = max(s0 * s0 + 4.0 * a * need, 0.0)
                tau = (-s0 + math.sqrt(disc)) / (2.0 * a) if a != 0 else need / s0
            self._previous, self._last = self._last, t0 + min(max(tau, 0.0), dt)
            self._next += self.spacing
        self._travel, self._t, self._speed = travel1, t1, s1

    def reading(self, t: float) -> float:
        """Shaft speed [rad/s] from the last two pulses; 0 after ``timeout_s`` without a pulse."""
        period = self._last - self._previous
        if t - self._last > self.timeout_s or not period <= self.timeout_s:
            return 0.0      # the timer overflowed: the firmware cannot time so slow a shaft
        return self.spacing / period
