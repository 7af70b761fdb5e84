"""The bump test against a plant model, without the engine: for tests and benchmarks.

The profile runs through :func:`rigloop.plants.offline.run_offline` — the device's timing, the
actuator shaping (clamp and slew limit) and the sensor model — so the record is what the engine
would have recorded from the simulated device, sample for sample in timing, and the same
analysis, verdict and suggestions apply.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from rigloop.analysis.identify.fitting import EstimationError
from rigloop.analysis.identify.plan import BumpPlan
from rigloop.analysis.identify.steps import BumpEstimates, analyse_bump
from rigloop.analysis.identify.suggest import Suggestions, suggest_settings
from rigloop.analysis.identify.verdict import Refusal, judge
from rigloop.control.shaping import ActuatorShaper
from rigloop.plants.offline import OfflineResult, run_offline


class ProfileController:
    """A ``run_offline`` controller that plays the bump profile open loop (no law)."""

    def __init__(self, plan: BumpPlan, ts: float) -> None:
        self.plan, self.ts = plan, ts
        self.k = 0
        self.f_hat = math.nan

    def reset(self, u_hold: float | None = None) -> None:
        self.k = 0

    def step(self, y: float, u_applied: float, r: float, dr: float, ddr: float) -> float:
        value = self.plan(self.k * self.ts)
        self.k += 1
        return value


class _Still:
    def at(self, t: float) -> tuple[float, float, float]:
        return (math.nan, 0.0, 0.0)


def record_bump(plant: Any, plan: BumpPlan, *, ts: float, output: str, sensor: Any = None) -> OfflineResult:
    """Run the profile on ``plant`` from its steady state at the safe value."""
    shaper = ActuatorShaper(plan.u_min, plan.u_max, plan.safe, plan.slew_per_s)
    return run_offline(plant, ProfileController(plan, ts), _Still(), shaper, ts=ts,
                       duration_s=plan.duration_s + 2 * ts, output=output, sensor=sensor,
                       u0=plan.safe)


@dataclass
class OfflineIdentification:
    """What ``rigloop identify`` would have said: estimates, refusals, notes, suggestions."""

    record: OfflineResult
    estimates: BumpEstimates | None
    refusals: list[Refusal] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    suggestions: Suggestions | None = None
    error: str | None = None


def identify_offline(plant: Any, plan: BumpPlan, *, ts: float, output: str, order: int,
                     sensor: Any = None, kind: str = "algebraic",
                     tau_cl: float | None = None) -> OfflineIdentification:
    """The whole bump test on a plant model: record, estimate, judge, suggest."""
    record = record_bump(plant, plan, ts=ts, output=output, sensor=sensor)
    try:
        est = analyse_bump(record.t, record.y, record.u, order=order, plan=plan, ts=ts, output=output)
    except EstimationError as exc:
        return OfflineIdentification(record, None, error=str(exc))
    refusals, notes = judge(est, plan)
    result = OfflineIdentification(record, est, refusals, list(est.warnings) + notes)
    if not refusals:
        try:
            result.suggestions = suggest_settings(est, plan, kind=kind, tau_cl=tau_cl)
        except EstimationError as exc:
            result.error = str(exc)
    return result
