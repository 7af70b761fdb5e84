"""Playing a bump plan: the actuator profile, holding each level until the output has settled.

The engine calls :meth:`BumpDriver.observe` with each running sample's output and then the
driver itself for the requested actuator value (``observe`` is optional: without it every hold
lasts its longest, a profile of time alone). When the plan is done, :attr:`BumpDriver.finished`
turns True and the engine ends the run; :meth:`BumpDriver.schedule` then tells the analysis
when each step was requested and where the last hold ended.

**Settled** (checked every few samples once a hold has lasted ``hold_min_s``): over the hold so
far, the mean of y over its last quarter and over the quarter before differ by at most
:data:`SETTLE_FRACTION` of the hold's change from the previous level, plus one standard error of
the noise (m = 2: the same with the rate, the least-squares slope of each quarter). For a
first-order response the two quarters' means differ by 3 % of the change after about five time
constants (``(e^(−E/2τ) − e^(−3E/4τ))·4τ/E`` at E = 5.2τ). A noisy output can pass that test
early, so for m = 1 the hold must also have lasted :data:`HOLD_T63_MULTIPLE` times the time its
moving mean took to reach 63 % of the change (τ + θ): a hold lasts about 5τ. For m = 2 a hold
away from u0 (a start or a step while moving) has settled once it has lasted
:data:`HOLD_T63_MULTIPLE` times the time the **rate** took to reach 63 % of its change: a load
that changes with position (an arm's weight) keeps the rate drifting, so the quarters may never
agree before the limits guard, while the fit (:mod:`.fitting`) models that drift.

**Limits guard** (m = 2): a hold away from u0 also ends at once when the output, moving away
from where the hold began, leaves the inner part of its channel limits (:data:`GUARD_FRACTION` of the range from
each limit). An integrating output (a position) keeps moving while a step is held, so without
this the test would run into the position limit and trip. The profile then skips to the stop of
that excursion (the input that holds the output) and goes the other way.

**Budget**: at the operating level, the next excursion (out and back: two holds, four for
m = 2) starts only when the budget left holds that many holds as long as the longest so far
(plus 10 %); the way back is always taken, within what is left. Fixed holds (``--hold``) ignore the budget: the plan's duration was
checked against the run limit.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from rigloop.analysis.identify.noise import second_difference_sigma
from rigloop.analysis.identify.plan import BumpPlan

#: A hold has settled when the last two quarters differ by at most this fraction of its change.
SETTLE_FRACTION = 0.03
#: ... plus this many standard errors of the noise (one: a noisy output is not declared settled
#: while its trend hides in the noise; a false "not yet" only lengthens the hold, within its bound).
SETTLE_SIGMAS = 1.0
#: The limits guard keeps the output this fraction of its limit range away from each limit.
GUARD_FRACTION = 0.25
#: ... and (m = 1) at least this many times the time the output took to reach 63 % of its change
#: (five time constants: 99.3 % of a first-order response; common practice).
HOLD_T63_MULTIPLE = 5.0
#: The rate of an integrating output is taken over this fraction of the hold so far (at least 8
#: samples) when timing its 63 % rise.
RATE_WINDOW_FRACTION = 0.05
#: Margin on the longest hold so far when deciding whether another excursion fits the budget.
BUDGET_MARGIN = 1.1


@dataclass
class Schedule:
    """When the profile did what: the input to the analysis."""

    ramp_s: float
    settle_s: float               # length of the settle hold
    starts: list[float]           # request time of each transition
    levels: list[float]           # requested level after each transition
    t_end: float                  # end of the last hold
    #: what each transition is (:meth:`.plan.BumpPlan.kind`); empty: every one a ``step``
    kinds: list[str] = field(default_factory=list)

    def kind(self, k: int) -> str:
        return self.kinds[k] if k < len(self.kinds) else "step"

    def holds(self) -> list[tuple[float, float]]:
        """(start, end) of the settle hold and of each step's hold."""
        edges = [self.ramp_s] + list(self.starts) + [self.t_end]
        return list(zip(edges[:-1], edges[1:]))

    def as_dict(self) -> dict:
        return asdict(self)


class BumpDriver:
    """The open-loop profile of one bump test (module docstring); call with monotonic times."""

    def __init__(self, plan: BumpPlan, ts: float, order: int = 1,
                 output_limits: tuple[float | None, float | None] = (None, None)) -> None:
        self.plan, self.ts, self.order = plan, float(ts), int(order)
        self.output_limits = output_limits
        self._band: tuple[float, float] | None = None
        self._guarded = False
        self.guarded_holds: list[int] = []
        self.finished = False
        self.starts: list[float] = []
        self.indices: list[int] = []          # the plan's transition number of each start
        self.hold_lengths: list[float] = []
        self.t_end: float | None = None
        self._t_hold = plan.ramp_s            # start of the current hold (the settle hold first)
        self._hold_max = plan.settle_max_s
        self._hold_min = plan.settle_min_s
        self._level = plan.u0
        self._prev_level: float | None = None   # the output's level (or rate) of the hold before
        self._t: list[float] = []
        self._y: list[float] = []
        self._settled = False
        self._next_check = 0

    # ------------------------------------------------------------------ the engine's hooks
    def observe(self, t: float, y: float) -> None:
        """One running sample's output (run time ``t``)."""
        if self.finished or not math.isfinite(y):
            return
        if t < self.plan.ramp_s:
            if self._prev_level is None:              # at rest before the ramp (m = 2: no rate)
                self._prev_level = float(y) if self.order == 1 else 0.0
            return
        self._t.append(float(t))
        self._y.append(float(y))
        n = len(self._t)
        if self.order == 2 and self._level != self.plan.u0 and self._outside_band(float(y)):
            self._guarded = True                  # an excursion runs towards a limit
        if not self._settled and t - self._t_hold >= self._hold_min and n >= self._next_check:
            self._next_check = n + max(5, n // 20)
            self._settled = self._check_settled()

    def __call__(self, t: float) -> float:
        """Requested actuator value at run time ``t``."""
        plan = self.plan
        if t < plan.ramp_s:
            return plan.ramp(t)
        if not self.finished:
            elapsed = t - self._t_hold
            if elapsed >= self._hold_max - 1e-9 or (self._settled and elapsed >= self._hold_min) \
                    or self._guarded:
                if self._guarded:
                    self.guarded_holds.append(len(self.starts))
                self._advance(t)
        return self._level

    # ------------------------------------------------------------------------ the schedule
    def schedule(self) -> Schedule:
        """The realised profile (the end of the last hold: when it finished, else now)."""
        t_end = self.t_end if self.t_end is not None else (self._t[-1] + self.ts if self._t else self._t_hold)
        settle = (self.starts[0] if self.starts else t_end) - self.plan.ramp_s
        return Schedule(self.plan.ramp_s, settle, list(self.starts),
                        [self.plan.level(k) for k in self.indices], t_end,
                        [self.plan.kind(k) for k in self.indices])

    def _advance(self, t: float) -> None:
        plan = self.plan
        level = self._hold_level()
        if level is not None:
            self._prev_level = level
        if self.starts:
            self.hold_lengths.append(t - self._t_hold)
        done = len(self.starts)
        per = plan.transitions_per_excursion
        nxt = self.indices[-1] + 1 if self.indices else 0
        if self._guarded:                      # back to u0 at once: skip the rest of the excursion
            while nxt % per != per - 1:
                nxt += 1
        remaining = plan.budget_s - t
        longest = max(self.hold_lengths + [plan.hold_min_s])
        if nxt >= plan.steps:
            return self._finish(t)
        left = per - nxt % per                 # holds until back at u0, this one included
        going_out = nxt % per == 0
        if plan.fixed:
            hold_max = plan.hold_max_s
        elif going_out:                        # at u0: go out only if the whole excursion fits
            if done >= 2 and remaining < left * BUDGET_MARGIN * longest:
                return self._finish(t)
            hold_max = min(plan.hold_max_s, remaining / left)
        else:                                  # out: always come back, within what is left
            hold_max = min(plan.hold_max_s, remaining / left)
        if hold_max < plan.hold_min_s and done >= 2 and going_out:
            return self._finish(t)
        self.starts.append(t)
        self.indices.append(nxt)
        self._level = plan.level(nxt)
        self._t_hold = t
        self._hold_min = min(plan.hold_min_s, max(hold_max, 0.0))
        self._hold_max = max(hold_max, self._hold_min)
        self._t, self._y = [], []
        self._settled = self._guarded = False
        self._next_check = 0

    def _outside_band(self, y: float) -> bool:
        """True when y left the guard band, moving away from where the hold began."""
        lo, hi = self.output_limits
        if lo is None and hi is None:
            return False
        if self._band is None:                  # fixed on the first sample seen
            if lo is not None and hi is not None:
                g = GUARD_FRACTION * (hi - lo)
                self._band = (lo + g, hi - g)
            else:
                self._band = (lo + GUARD_FRACTION * abs(y - lo) if lo is not None else -math.inf,
                              hi - GUARD_FRACTION * abs(hi - y) if hi is not None else math.inf)
        b_lo, b_hi = self._band
        y0 = self._y[0]
        margin = 0.01 * (b_hi - b_lo) if math.isfinite(b_hi - b_lo) else 0.0
        return (y > b_hi and y > y0 + margin) or (y < b_lo and y < y0 - margin)

    def _finish(self, t: float) -> None:
        self.finished = True
        self.t_end = t
        self._level = self.plan.u0      # every excursion ends there; the run's stop follows

    # -------------------------------------------------------------------------- settling
    def _quarters(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None:
        n = len(self._y)
        if n < 16:
            return None
        t = np.asarray(self._t)
        y = np.asarray(self._y)
        return t[n // 2: 3 * n // 4], y[n // 2: 3 * n // 4], t[3 * n // 4:], y[3 * n // 4:]

    def _hold_level(self) -> float | None:
        """The level (m = 1) or rate (m = 2) at the end of the current hold."""
        q = self._quarters()
        if q is None:
            return None
        return _level(self.order, q[2], q[3])

    def _check_settled(self) -> bool:
        q = self._quarters()
        if q is None:
            return False
        if self._prev_level is None:            # no ramp: the hold started from rest
            self._prev_level = self._y[0] if self.order == 1 else 0.0
        t3, y3, t4, y4 = q
        a3, a4 = _level(self.order, t3, y3), _level(self.order, t4, y4)
        sigma, _ = second_difference_sigma([np.asarray(self._y)])
        if not math.isfinite(sigma):
            return False
        if self.order == 1:
            se = sigma * math.sqrt(1.0 / y3.size + 1.0 / y4.size)
        else:
            se = sigma * math.sqrt(12.0 / (y4.size ** 3 * self.ts ** 2)) * math.sqrt(2.0)
        if self.order == 2 and self.starts and self._level != self.plan.u0:
            t63 = self._rate_time_to_63(a4, sigma)
            return t63 is not None and self._t[-1] - self._t_hold >= HOLD_T63_MULTIPLE * t63
        if abs(a4 - a3) > SETTLE_FRACTION * abs(a4 - self._prev_level) + SETTLE_SIGMAS * se:
            return False
        if self.order == 1 and self.starts:        # and five of its own 63 % times have passed
            t63 = self._time_to_63(a4)
            return t63 is not None and self._t[-1] - self._t_hold >= HOLD_T63_MULTIPLE * t63
        return True

    def _time_to_63(self, final: float) -> float | None:
        """Time from the hold's start until a moving mean of y first crossed 63.2 % of the way
        from the previous level to ``final`` (τ + θ of a first-order response with dead time)."""
        y = np.asarray(self._y)
        w = max(1, y.size // 40)
        smooth = np.convolve(y, np.ones(w) / w, mode="valid")
        change = final - self._prev_level
        if change == 0:
            return 0.0
        crossed = np.flatnonzero((smooth - (self._prev_level + 0.632 * change)) * np.sign(change) >= 0)
        if crossed.size == 0:
            return None
        return self._t[int(crossed[0]) + w // 2] - self._t_hold

    def _rate_time_to_63(self, final: float, sigma: float) -> float | None:
        """Time from the hold's start until the rate — least-squares slopes over a sliding
        window of :data:`RATE_WINDOW_FRACTION` of the hold — first crossed 63.2 % of the way
        from the previous hold's rate to ``final``; None while the change is within the
        slopes' noise."""
        y = np.asarray(self._y)
        w = max(8, int(y.size * RATE_WINDOW_FRACTION))
        if y.size < 2 * w:
            return None
        j = np.arange(w) - (w - 1) / 2.0
        kernel = j / float(np.dot(j, j)) / self.ts
        rate = np.convolve(y, kernel[::-1], mode="valid")
        change = final - self._prev_level
        if abs(change) <= 3.0 * sigma * float(np.linalg.norm(kernel)):
            return None
        crossed = np.flatnonzero((rate - (self._prev_level + 0.632 * change)) * np.sign(change) >= 0)
        if crossed.size == 0:
            return None
        return self._t[int(crossed[0]) + w // 2] - self._t_hold


def _level(order: int, t: np.ndarray, y: np.ndarray) -> float:
    if order == 1:
        return float(np.mean(y))
    x = t - t[0]
    return float(np.polyfit(x, y, 1)[0])
