"""The bump test against a plant model, without the engine: for tests and benchmarks.

The profile runs with the timing of :func:`rigloop.plants.offline.run_offline` (its docstring,
steps 1–5: the sensor reads sample k, the profile answers it, the command is shaped — clamp and
slew limit — and applied from tick k + 1, the plant advances) and ends when the profile has
finished, as the engine ends the run. The record is what the engine would have recorded from
the simulated device, and the same analysis, verdict and suggestions apply.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from rigloop.analysis.identify.driver import BumpDriver, Schedule
from rigloop.analysis.identify.fitting import EstimationError
from rigloop.analysis.identify.plan import BumpPlan
from rigloop.analysis.identify.steps import BumpEstimates, analyse_bump
from rigloop.analysis.identify.suggest import Suggestions, suggest_settings
from rigloop.analysis.identify.verdict import Refusal, judge
from rigloop.control.shaping import ActuatorShaper


@dataclass
class BumpRecord:
    """Samples of an offline bump test: time, measured and exact output, applied input."""

    t: np.ndarray
    y: np.ndarray
    y_true: np.ndarray
    u: np.ndarray
    schedule: Schedule


def record_bump(plant: Any, plan: BumpPlan, *, ts: float, output: str, order: int = 1,
                sensor: Any = None, output_limits: tuple[float | None, float | None] = (None, None)
                ) -> BumpRecord:
    """Run the profile on ``plant`` from its steady state at the safe value until it finishes."""
    driver = BumpDriver(plan, ts, order, output_limits)
    shaper = ActuatorShaper(plan.u_min, plan.u_max, plan.safe, plan.slew_per_s)
    plant.reset(plan.safe)
    shaper.reset(plan.safe)
    index = plant.channel_index(output)
    names = tuple(plant.channel_names)
    u_applied = plan.safe
    t_out, y_out, yt_out, u_out = [], [], [], []
    n_max = int(math.ceil(plan.duration_s / ts)) + 2
    for k in range(n_max):
        tk = k * ts
        true_values = plant.read()
        y = float(sensor.measure(true_values, names)[index]) if sensor is not None else float(true_values[index])
        driver.observe(tk, y)
        command = shaper.shape(driver(tk), ts)
        t_out.append(tk)
        y_out.append(y)
        yt_out.append(float(plant.outputs(plant.state)[index]))
        u_out.append(u_applied)
        if driver.finished:
            break
        plant.advance(u_applied, ts)
        if math.isfinite(command):
            u_applied = min(max(float(command), plan.u_min), plan.u_max)
    return BumpRecord(np.asarray(t_out), np.asarray(y_out), np.asarray(yt_out), np.asarray(u_out),
                      driver.schedule())


@dataclass
class OfflineIdentification:
    """What ``rigloop identify`` would have said: estimates, refusals, notes, suggestions."""

    record: BumpRecord
    estimates: BumpEstimates | None
    refusals: list[Refusal] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    suggestions: Suggestions | None = None
    error: str | None = None


def identify_offline(plant: Any, plan: BumpPlan, *, ts: float, output: str, order: int,
                     sensor: Any = None, kind: str = "algebraic", tau_cl: float | None = None,
                     output_limits: tuple[float | None, float | None] = (None, None),
                     delay_aware: bool = False) -> OfflineIdentification:
    """The whole bump test on a plant model: record, estimate, judge, suggest."""
    record = record_bump(plant, plan, ts=ts, output=output, order=order, sensor=sensor,
                         output_limits=output_limits)
    try:
        est = analyse_bump(record.t, record.y, record.u, order=order, plan=plan,
                           schedule=record.schedule, ts=ts, output=output)
    except EstimationError as exc:
        return OfflineIdentification(record, None, error=str(exc))
    refusals, notes = judge(est, plan)
    result = OfflineIdentification(record, est, refusals, list(est.warnings) + notes)
    if not refusals:
        try:
            result.suggestions = suggest_settings(est, plan, kind=kind, tau_cl=tau_cl,
                                                  delay_aware=delay_aware)
        except EstimationError as exc:
            result.error = str(exc)
    return result
