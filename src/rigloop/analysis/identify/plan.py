"""The bump test's excitation: the open-loop actuator profile and the checks on it.

The profile (:class:`BumpPlan`) drives the actuator open loop through the engine, so every trip,
the clamp and the slew limit stay active:

1. a slow **ramp** from ``actuator.safe`` to the operating level ``u0`` over ``ramp_s`` — where
   the output starts to move on it tells the actuator's dead zone (:mod:`.deadzone`);
2. a **settle** hold at u0;
3. ``steps`` **transitions** of ``hold_s`` each, both ways around u0:
   u0 + du, u0, u0 − du, u0, u0 + du, … (du < 0 goes down first). Each excursion above u0 is
   matched by one below, so a rig whose slope changes with u is measured on both sides, and an
   integrating output (a position) comes back near where it started.

The number of transitions is as many as the time budget allows (an even number, at least two,
at most :data:`MAX_STEPS`), unless given. The holds are fixed: the engine runs a profile of
``u(t)`` alone and the analysis finds every step in the recorded applied actuator column.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

#: Default hold at the operating level before the first step (s).
DEFAULT_SETTLE_S = 4.0
#: Default hold after each step (s).
DEFAULT_HOLD_S = 3.0
#: Default duration of the ramp from the safe value to u0 (s): slow against most rigs' time
#: constants, so that the output follows the ramp closely (common practice for a dead-zone probe).
DEFAULT_RAMP_S = 4.0
#: Default time budget of the whole profile (s); the transitions fill what the ramp and the
#: settle hold leave of it.
DEFAULT_BUDGET_S = 30.0
#: Default step: this fraction of the actuator range.
DEFAULT_STEP_FRACTION = 0.10
#: Most transitions a profile plans (more cost time and add little to the spread).
MAX_STEPS = 8
#: A hold must span at least this many samples to be analysed.
MIN_HOLD_SAMPLES = 25


class PlanError(ValueError):
    """A bump test that cannot be run as asked; ``option`` names the command-line option."""

    def __init__(self, option: str, message: str) -> None:
        super().__init__(message)
        self.option = option


@dataclass(frozen=True)
class BumpPlan:
    """The open-loop profile ``u(t)`` of one bump test (t from the first running sample)."""

    u0: float                  # operating level
    du: float                  # step (may be negative: step down first)
    safe: float                # actuator.safe, where the ramp starts
    ramp_s: float              # duration of the ramp from safe to u0
    slew_per_s: float | None   # actuator.slew_per_s (None: steps are not slew-limited)
    settle_s: float
    hold_s: float
    steps: int                 # number of transitions (even)
    u_min: float
    u_max: float
    unit: str = ""

    @property
    def ramp_rate(self) -> float:
        """Actuator units per second of the ramp (0 when u0 is the safe value)."""
        return abs(self.u0 - self.safe) / self.ramp_s if self.ramp_s > 0 else 0.0

    @property
    def t_first(self) -> float:
        """Time the first step is requested (s)."""
        return self.ramp_s + self.settle_s

    @property
    def duration_s(self) -> float:
        """Length of the open-loop profile; the engine's ramped stop follows."""
        return self.t_first + self.steps * self.hold_s

    @property
    def slew_time_s(self) -> float:
        """Time the shaper takes to move the actuator by |du| (0 without a slew limit)."""
        return abs(self.du) / self.slew_per_s if self.slew_per_s else 0.0

    def level(self, k: int) -> float:
        """Requested level after transition k (k = −1: the operating level before the first)."""
        if k < 0 or k % 2 == 1:
            return self.u0
        return self.u0 + (self.du if k % 4 == 0 else -self.du)

    def transitions(self) -> list[tuple[float, float, float]]:
        """``(t_request, level_before, level_after)`` of every transition."""
        return [(self.t_first + k * self.hold_s, self.level(k - 1), self.level(k))
                for k in range(self.steps)]

    def __call__(self, t: float) -> float:
        """Requested actuator value at run time ``t`` (the engine's open-loop hook)."""
        if t < self.ramp_s:
            return self.safe + (self.u0 - self.safe) * max(t, 0.0) / self.ramp_s
        if t < self.t_first:
            return self.u0
        k = min(int((t - self.t_first) // self.hold_s), self.steps - 1)
        return self.level(k)

    def as_dict(self) -> dict:
        return {"u0": self.u0, "du": self.du, "safe": self.safe, "ramp_s": self.ramp_s,
                "slew_per_s": self.slew_per_s, "settle_s": self.settle_s, "hold_s": self.hold_s,
                "steps": self.steps, "t_first": self.t_first, "duration_s": self.duration_s,
                "unit": self.unit}


def default_operating_point(u_min: float, u_max: float, safe: float) -> float:
    """The middle of [u_min, u_max]; halfway from ``safe`` to ``u_max`` when the middle is the
    safe value.

    Why not ``safe`` itself: on our rigs (and most) the safe value is "off" — 0 % duty, 0 V —
    where the output does not respond smoothly (a stopped fan, a motor held by static friction).
    A bipolar drive has its safe value in the middle of its range, so the middle is no good
    either; halfway to the top of the range runs the rig forward at a moderate level.
    """
    middle = 0.5 * (u_min + u_max)
    if abs(middle - safe) <= 1e-9 * (u_max - u_min):
        return 0.5 * (safe + u_max)
    return middle


def plan_bump(u_min: float, u_max: float, safe: float, slew_per_s: float | None, *,
              rate_hz: float, at: float | None = None, step: float | None = None,
              settle_s: float | None = None, hold_s: float | None = None,
              ramp_s: float | None = None, steps: int | None = None,
              budget_s: float | None = None, max_duration_s: float | None = None,
              unit: str = "") -> BumpPlan:
    """Check the wanted bump test against the actuator range and the run limits.

    Raises :class:`PlanError` naming the option (``--at``, ``--step``, ``--settle``, ``--hold``,
    ``--ramp``, ``--steps``, ``--budget``), the value and what is allowed. ``u0 ± du`` must stay
    inside [u_min, u_max] since the test steps both ways from u0. The ramp is never faster than
    the slew limit.
    """
    span = u_max - u_min
    u_text = f" {unit}" if unit else ""
    u0 = default_operating_point(u_min, u_max, safe) if at is None else _finite("--at", at)
    if not u_min <= u0 <= u_max:
        raise PlanError("--at", f"--at {u0:g}: the operating level must lie in the actuator range "
                                f"[{u_min:g}, {u_max:g}]{u_text}")
    du = DEFAULT_STEP_FRACTION * span if step is None else _finite("--step", step)
    if du == 0:
        raise PlanError("--step", "--step 0: the step must be non-zero (default: 10 % of the "
                                  f"actuator range, {DEFAULT_STEP_FRACTION * span:g}{u_text})")
    room = min(u0 - u_min, u_max - u0)
    if abs(du) > room:
        given = f"--step {du:g}" if step is not None else f"the default step {du:g}{u_text} (--step)"
        raise PlanError("--step", f"{given}: u0 ± du = {u0:g} ± {abs(du):g}{u_text} leaves the "
                                  f"actuator range [{u_min:g}, {u_max:g}]{u_text}; at --at {u0:g} "
                                  f"the step may be at most {room:g}{u_text} "
                                  f"(allowed: 0 < |--step| <= {room:g})")
    ts = 1.0 / rate_hz
    slew_time = abs(du) / slew_per_s if slew_per_s else 0.0
    shortest = max(MIN_HOLD_SAMPLES * ts, 4.0 * slew_time)
    settle = DEFAULT_SETTLE_S if settle_s is None else _finite("--settle", settle_s)
    hold = DEFAULT_HOLD_S if hold_s is None else _finite("--hold", hold_s)
    for option, value in (("--settle", settle), ("--hold", hold)):
        if value < shortest:
            raise PlanError(option, f"{option} {value:g}: too short to measure a level; allowed: "
                                    f">= {shortest:.3g} s ({MIN_HOLD_SAMPLES} samples and 4x the "
                                    f"{slew_time:.3g} s the slew limit takes for the step)")
    ramp = DEFAULT_RAMP_S if ramp_s is None else _finite("--ramp", ramp_s)
    fastest = abs(u0 - safe) / slew_per_s if slew_per_s else 0.0
    if ramp < 0:
        raise PlanError("--ramp", f"--ramp {ramp:g}: must be >= 0 s")
    ramp = max(ramp, fastest)
    if abs(u0 - safe) == 0:
        ramp = 0.0
    limit = math.inf if max_duration_s is None else float(max_duration_s)
    if steps is None:
        budget = DEFAULT_BUDGET_S if budget_s is None else _finite("--budget", budget_s)
        budget = min(budget, 0.95 * limit)
        n = int(math.floor((budget - ramp - settle) / hold + 1e-9))
        n = min(MAX_STEPS, n - n % 2)
        if n < 2:
            raise PlanError("--budget", f"--budget {budget:g}: the ramp ({ramp:.3g} s), the settle "
                                        f"hold ({settle:g} s) and two holds of {hold:g} s do not fit "
                                        f"(need {ramp + settle + 2 * hold:.3g} s, and below "
                                        "limits.max_duration_s); raise --budget or shorten --hold")
    else:
        if isinstance(steps, bool) or not isinstance(steps, int) or steps < 2 or steps % 2:
            raise PlanError("--steps", f"--steps {steps!r}: must be an even whole number >= 2 (each "
                                       "excursion from u0 has a step out and a step back)")
        n = steps
    plan = BumpPlan(float(u0), float(du), float(safe), float(ramp),
                    float(slew_per_s) if slew_per_s else None, float(settle), float(hold), int(n),
                    float(u_min), float(u_max), unit)
    if plan.duration_s >= limit:
        raise PlanError("--steps" if steps is not None else "--settle",
                        f"the bump test would last {plan.duration_s:.3g} s, not below "
                        f"limits.max_duration_s = {limit:g} s; use fewer --steps, shorter --settle "
                        "and --hold, or raise the limit")
    return plan


def _finite(option: str, value: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise PlanError(option, f"{option} {value!r}: must be a finite number")
    return float(value)
