"""Actuator shaping: what the law asks for becomes what may be sent to the rig.

Always in this order (docs/architecture.md, safety): non-finite guard -> clamp to
``[u_min, u_max]`` -> slew limit -> send.

* Non-finite request (nan, ±inf): hold the last shaped value (the safe value before any).
* Clamp to the actuator range.
* Slew: move from the last shaped value by at most ``slew_per_s·dt``. The shaper starts at the
  safe value, which is where the device's output is before the first command, so the first
  command is slew limited too. A ``dt`` that is negative or not finite allows no movement.

The device clamps again on its own side; this is the host's half of the defence.
"""

from __future__ import annotations

import math


def _number(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ValueError(f"{name} = {value!r} is not a finite number")
    return float(value)


class ActuatorShaper:
    """Guard, clamp and slew-limit actuator requests; flags describe the last call."""

    def __init__(self, u_min: float, u_max: float, safe: float, slew_per_s: float | None) -> None:
        self.u_min = _number("u_min", u_min)
        self.u_max = _number("u_max", u_max)
        if not self.u_min < self.u_max:
            raise ValueError(f"u_min = {self.u_min} must be below u_max = {self.u_max}")
        self.safe = _number("safe", safe)
        if not self.u_min <= self.safe <= self.u_max:
            raise ValueError(f"safe = {self.safe} must lie within [u_min, u_max] = [{self.u_min}, {self.u_max}]")
        if slew_per_s is not None:
            slew_per_s = _number("slew_per_s", slew_per_s)
            if slew_per_s <= 0:
                raise ValueError(f"slew_per_s = {slew_per_s} must be > 0 (units per second), or None for no limit")
        self.slew_per_s = slew_per_s
        self.reset(self.safe)

    def shape(self, u_request: float, dt: float) -> float:
        """Return the value to send for ``u_request`` after ``dt`` seconds since the last one."""
        last = self.last
        u = u_request
        self.nonfinite = not math.isfinite(u)
        if self.nonfinite:
            u = last
        self.clamped = False
        if u > self.u_max:
            u, self.clamped = self.u_max, True
        elif u < self.u_min:
            u, self.clamped = self.u_min, True
        self.slewed = False
        if self.slew_per_s is not None:
            step = self.slew_per_s * dt if (math.isfinite(dt) and dt > 0) else 0.0
            if u > last + step:
                u, self.slewed = last + step, True
            elif u < last - step:
                u, self.slewed = last - step, True
        self.last = u
        return u

    def reset(self, value: float) -> None:
        """Take ``value`` as the last shaped value (e.g. what the device applies now).

        The value is clamped into the range first, so every later output stays in range.
        """
        self.last = min(max(_number("value", value), self.u_min), self.u_max)
        self.clamped = False
        self.slewed = False
        self.nonfinite = False
