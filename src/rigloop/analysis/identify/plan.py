"""The bump test's excitation: what the profile will do, checked against the rig's limits.

The profile drives the actuator open loop through the engine, so every trip, the clamp and the
slew limit stay active:

1. a slow **ramp** from ``actuator.safe`` to the operating level ``u0`` over ``ramp_s`` — where
   the output starts to move on it tells the actuator's dead zone (:mod:`.deadzone`);
2. a **settle** hold at u0;
3. up to ``steps`` **transitions**, both ways around u0: u0 + du, u0, u0 − du, u0, u0 + du, …
   (du < 0 goes down first). Each excursion above u0 is matched by one below, so a rig whose
   slope changes with u is measured on both sides.

An integrating output (m = 2, a position) is measured **while it moves**. From rest, static
friction and gear play act: the first moment of a step out of rest crosses the play with the
load disconnected, and a step back to the input that holds the output ends in a stop where
friction, not the model, sets the rate. Neither is the ultra-local model's alpha. So each
excursion is four transitions (:data:`POSITION_CYCLE`): a **start** to u0 + du, a **step while
moving** to u0 + 1.5·du and one back to u0 + du (teeth in contact, friction of one sign), and a
**stop** at u0; then the same below u0. Only the steps while moving are used for the estimates
(:mod:`.steps`). Holding a speed in one direction and stepping on top of it is common practice
in tuning servo drives for this reason.

Each hold lasts **until the output has settled** (:mod:`.driver`), at least ``hold_min_s`` and
at most ``hold_max_s``, and the whole profile stays within ``budget_s``: as many steps as the
budget allows. Given ``--initial-hold`` or ``--hold``, those holds have that fixed length instead.
:class:`BumpPlan` is the checked description; :class:`.driver.BumpDriver` plays it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

#: Shortest hold when holding until settled (s): the steady stretch at its end (30 %) must hold
#: enough samples to fit a level (common practice: half a second is ten time constants of a fast
#: motor and a few percent of a fan's).
DEFAULT_HOLD_MIN_S = 1.0
#: Default duration of the ramp from the safe value to u0 (s): slow against most rigs' time
#: constants, so that the output follows the ramp closely (common practice for a dead-zone probe).
DEFAULT_RAMP_S = 4.0
#: Default time budget of the whole profile (s), always below limits.max_duration_s. A rig that
#: settles in a few seconds uses a fraction of it; a slow one (a flywheel of ten seconds' time
#: constant) needs most of it.
DEFAULT_BUDGET_S = 120.0
#: The settle hold may use at most this fraction of the budget (the steps need the rest).
SETTLE_BUDGET_FRACTION = 0.2
#: Default step: this fraction of the actuator range.
DEFAULT_STEP_FRACTION = 0.10
#: Default and largest number of transitions (more cost time and add little to the spread).
DEFAULT_STEPS = 6
MAX_STEPS = 8
#: A hold must span at least this many samples to be analysed.
MIN_HOLD_SAMPLES = 25
#: Shortest hold of an integrating output (s): its holds end once the rate has settled (or at
#: the limits guard), a few of the drive's time constants, so the one-second floor of a speed
#: rig would only carry the output into its limits.
POSITION_HOLD_MIN_S = 0.2
#: One excursion of an integrating output: (offset from u0 in units of du, kind) per transition.
POSITION_CYCLE = ((1.0, "start"), (1.5, "moving"), (1.0, "moving"), (0.0, "stop"))


class PlanError(ValueError):
    """A bump test that cannot be run as asked; ``option`` names the command-line option."""

    def __init__(self, option: str, message: str) -> None:
        super().__init__(message)
        self.option = option


@dataclass(frozen=True)
class BumpPlan:
    """The checked description of one bump test (times in s from the first running sample)."""

    u0: float                  # operating level
    du: float                  # step (may be negative: step down first)
    safe: float                # actuator.safe, where the ramp starts
    ramp_s: float              # duration of the ramp from safe to u0
    slew_per_s: float | None   # actuator.slew_per_s (None: steps are not slew-limited)
    settle_min_s: float        # the settle hold: at least ...
    settle_max_s: float        # ... and at most (equal: a fixed hold)
    hold_min_s: float          # each step's hold: at least ...
    hold_max_s: float          # ... and at most (equal: fixed holds)
    steps: int                 # most transitions (even)
    budget_s: float            # the whole profile ends by then
    u_min: float
    u_max: float
    unit: str = ""
    order: int = 1             # 2: the excursions of an integrating output (module docstring)

    @property
    def ramp_rate(self) -> float:
        """Actuator units per second of the ramp (0 when u0 is the safe value)."""
        return abs(self.u0 - self.safe) / self.ramp_s if self.ramp_s > 0 else 0.0

    @property
    def fixed(self) -> bool:
        """True when every hold has a fixed length (the profile is a function of time alone)."""
        return self.settle_min_s == self.settle_max_s and self.hold_min_s == self.hold_max_s

    @property
    def duration_s(self) -> float:
        """Longest the profile can last; the engine's ramped stop follows."""
        if self.fixed:
            return self.ramp_s + self.settle_max_s + self.steps * self.hold_max_s
        return self.budget_s

    @property
    def slew_time_s(self) -> float:
        """Time the shaper takes to move the actuator by |du| (0 without a slew limit)."""
        return abs(self.du) / self.slew_per_s if self.slew_per_s else 0.0

    @property
    def transitions_per_excursion(self) -> int:
        """Transitions from leaving u0 to being back at it: out and back, or the four of
        :data:`POSITION_CYCLE`."""
        return 2 if self.order == 1 else len(POSITION_CYCLE)

    def level(self, k: int) -> float:
        """Requested level after transition k (k = −1: the operating level before the first)."""
        if k < 0:
            return self.u0
        n = self.transitions_per_excursion
        side = 1.0 if (k // n) % 2 == 0 else -1.0
        if self.order == 1:
            return self.u0 if k % 2 == 1 else self.u0 + side * self.du
        return self.u0 + side * POSITION_CYCLE[k % n][0] * self.du

    def kind(self, k: int) -> str:
        """What transition k is: ``step`` (m = 1), or ``start``, ``moving`` or ``stop`` (m = 2)."""
        return "step" if self.order == 1 else POSITION_CYCLE[k % len(POSITION_CYCLE)][1]

    def ramp(self, t: float) -> float:
        """The ramp's requested value at ``t`` (u0 from ramp_s on)."""
        if t >= self.ramp_s:
            return self.u0
        return self.safe + (self.u0 - self.safe) * max(t, 0.0) / self.ramp_s

    def as_dict(self) -> dict:
        return {"u0": self.u0, "du": self.du, "safe": self.safe, "ramp_s": self.ramp_s,
                "slew_per_s": self.slew_per_s, "settle_min_s": self.settle_min_s,
                "settle_max_s": self.settle_max_s, "hold_min_s": self.hold_min_s,
                "hold_max_s": self.hold_max_s, "steps": self.steps, "budget_s": self.budget_s,
                "duration_s": self.duration_s, "unit": self.unit, "order": self.order}


def default_operating_point(u_min: float, u_max: float, safe: float, order: int = 1) -> float:
    """The middle of [u_min, u_max]; halfway from ``safe`` to ``u_max`` when the middle is the
    safe value; the safe value itself for an integrating output (m = 2).

    Why the safe value for m = 2: at any other constant input a position runs away (into its
    limit); around the input that holds it still, the steps both ways bring it back.

    Why not ``safe`` itself: on our rigs (and most) the safe value is "off" — 0 % duty, 0 V —
    where the output does not respond smoothly (a stopped fan, a motor held by static friction).
    A bipolar drive has its safe value in the middle of its range, so the middle is no good
    either; halfway to the top of the range runs the rig forward at a moderate level.
    """
    if order == 2:
        return float(safe)
    middle = 0.5 * (u_min + u_max)
    if abs(middle - safe) <= 1e-9 * (u_max - u_min):
        return 0.5 * (safe + u_max)
    return middle


def plan_bump(u_min: float, u_max: float, safe: float, slew_per_s: float | None, *,
              rate_hz: float, at: float | None = None, step: float | None = None,
              settle_s: float | None = None, hold_s: float | None = None,
              ramp_s: float | None = None, steps: int | None = None,
              budget_s: float | None = None, max_duration_s: float | None = None,
              unit: str = "", order: int = 1) -> BumpPlan:
    """Check the wanted bump test against the actuator range and the run limits.

    Raises :class:`PlanError` naming the option (``--operating-level``, ``--step``, ``--initial-hold``, ``--hold``,
    ``--ramp``, ``--steps``, ``--budget``), the value and what is allowed. ``u0 ± du`` must stay
    inside [u_min, u_max] since the test steps both ways from u0. The ramp is never faster than
    the slew limit. ``settle_s``/``hold_s`` given: fixed holds; None: hold until settled.
    """
    span = u_max - u_min
    u_text = f" {unit}" if unit else ""
    u0 = default_operating_point(u_min, u_max, safe, order) if at is None else _finite("--operating-level", at)
    if not u_min <= u0 <= u_max:
        raise PlanError("--operating-level", f"--operating-level {u0:g}: the operating level must lie in the actuator range "
                                f"[{u_min:g}, {u_max:g}]{u_text}")
    du = DEFAULT_STEP_FRACTION * span if step is None else _finite("--step", step)
    if du == 0:
        raise PlanError("--step", "--step 0: the step must be non-zero (default: 10 % of the "
                                  f"actuator range, {DEFAULT_STEP_FRACTION * span:g}{u_text})")
    room = min(u0 - u_min, u_max - u0)
    reach = 1.0 if order == 1 else max(abs(c[0]) for c in POSITION_CYCLE)
    if reach * abs(du) > room:
        given = f"--step {du:g}" if step is not None else f"the default step {du:g}{u_text} (--step)"
        what = "u0 ± du" if order == 1 else "u0 ± 1.5·du (the steps while moving)"
        raise PlanError("--step", f"{given}: {what} = {u0:g} ± {reach * abs(du):g}{u_text} leaves the "
                                  f"actuator range [{u_min:g}, {u_max:g}]{u_text}; at --operating-level {u0:g} "
                                  f"the step may be at most {room / reach:g}{u_text} "
                                  f"(allowed: 0 < |--step| <= {room / reach:g})")
    ts = 1.0 / rate_hz
    slew_time = abs(du) / slew_per_s if slew_per_s else 0.0
    shortest = max(MIN_HOLD_SAMPLES * ts, 4.0 * slew_time)
    for option, value in (("--initial-hold", settle_s), ("--hold", hold_s)):
        if value is not None and _finite(option, value) < shortest:
            raise PlanError(option, f"{option} {value:g}: too short to measure a level; allowed: "
                                    f">= {shortest:.3g} s ({MIN_HOLD_SAMPLES} samples and 4x the "
                                    f"{slew_time:.3g} s the slew limit takes for the step)")
    ramp = DEFAULT_RAMP_S if ramp_s is None else _finite("--ramp", ramp_s)
    if ramp < 0:
        raise PlanError("--ramp", f"--ramp {ramp:g}: must be >= 0 s")
    ramp = 0.0 if u0 == safe else max(ramp, abs(u0 - safe) / slew_per_s if slew_per_s else 0.0)
    per = 2 if order == 1 else len(POSITION_CYCLE)
    if steps is not None and (isinstance(steps, bool) or not isinstance(steps, int) or steps < per
                              or steps % per or steps > MAX_STEPS):
        what = ("an even whole number from 2 to {MAX_STEPS} (each excursion from u0 has a step out "
                "and a step back)" if order == 1 else
                f"{per} or {2 * per} (each excursion of a position has a start, two steps while "
                "moving and a stop)")
        raise PlanError("--steps", f"--steps {steps!r}: must be {what.format(MAX_STEPS=MAX_STEPS)}")
    n = (DEFAULT_STEPS if order == 1 else MAX_STEPS) if steps is None else steps
    limit = math.inf if max_duration_s is None else float(max_duration_s)
    budget = DEFAULT_BUDGET_S if budget_s is None else _finite("--budget", budget_s)
    budget = min(budget, 0.95 * limit)
    hold_min = max(DEFAULT_HOLD_MIN_S if order == 1 else POSITION_HOLD_MIN_S, shortest)
    if hold_s is not None:
        hold_min = hold_max = float(hold_s)
    else:
        hold_max = max((budget - ramp - hold_min) / 2.0, hold_min)
    if settle_s is not None:
        settle_min = settle_max = float(settle_s)
    else:
        settle_min, settle_max = hold_min, max(SETTLE_BUDGET_FRACTION * budget, hold_min)
    plan = BumpPlan(float(u0), float(du), float(safe), float(ramp),
                    float(slew_per_s) if slew_per_s else None, settle_min, settle_max, hold_min,
                    hold_max, int(n), float(budget), float(u_min), float(u_max), unit, int(order))
    least = ramp + settle_min + 2 * hold_min
    if least > budget:
        raise PlanError("--budget", f"--budget {budget:g}: the ramp ({ramp:.3g} s), the settle hold "
                                    f"and two holds ({settle_min:g} s and 2 x {hold_min:g} s) do not "
                                    f"fit (need {least:.3g} s, and below limits.max_duration_s); "
                                    "raise --budget or shorten --hold")
    if plan.fixed and plan.duration_s >= limit:
        raise PlanError("--steps" if steps is not None else "--hold",
                        f"the bump test would last {plan.duration_s:.3g} s, not below "
                        f"limits.max_duration_s = {limit:g} s; use fewer --steps, shorter --initial-hold "
                        "and --hold, or raise the limit")
    return plan


def _finite(option: str, value: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise PlanError(option, f"{option} {value!r}: must be a finite number")
    return float(value)
