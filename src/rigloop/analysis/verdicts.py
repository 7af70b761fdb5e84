"""Verdicts of a test plan on a recorded session, run by run (the plan itself: plan.py).

A criterion's verdict carries its measured value and a sentence that says what was measured,
over which span and against which limit — what ``rigloop run`` and ``rigloop report`` print.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace

import numpy as np

from rigloop.analysis.metrics import metric_unit
from rigloop.analysis.plan import plan_segments
from rigloop.analysis.runs import Run, session_runs
from rigloop.analysis.segments import rows_metrics, segment_metrics
from rigloop.analysis.session import Session
from rigloop.analysis.transition import TransitionMetrics

#: Said beside every whole-run verdict: the span it was measured over.
RUN_SPAN_WORDS = " (all the run's running rows, lead-in included, as in the run summary)"


@dataclass(frozen=True)
class CriterionResult:
    segment: str | None      # None for a whole-run criterion
    name: str
    limit: object            # {"min": x, "max": y} (the bounds given) or True for a yes/no criterion
    value: object            # the measured value (float, NaN when not measurable, or bool)
    passed: bool
    message: str
    run: int | None = None   # the run (ARM … stop) judged; None when the session has one run

    def as_dict(self) -> dict:
        value = self.value
        if isinstance(value, float) and not math.isfinite(value):
            value = None
        out = {"segment": self.segment, "name": self.name, "limit": self.limit,
               "value": value, "passed": self.passed, "message": self.message}
        if self.run is not None:
            out["run"] = self.run
        return out


@dataclass(frozen=True)
class PlanResult:
    name: str
    passed: bool
    criteria: list[CriterionResult] = field(default_factory=list)

    @property
    def failed(self) -> list[CriterionResult]:
        return [c for c in self.criteria if not c.passed]

    def as_dict(self) -> dict:
        """Plain types only, ready for session.yaml and JSON."""
        return {"name": self.name, "passed": self.passed, "failed": len(self.failed),
                "criteria": [c.as_dict() for c in self.criteria]}


def judge_plan(plan: Mapping, session: Session) -> PlanResult:
    """Judge a recorded session against a plan's criteria, run by run.

    Every arm replays the plan from its start, so each run (ARM … stop, see
    :mod:`rigloop.analysis.runs`) is judged on its own, with its first running row as the time
    origin — the same origin the report's transition table uses. Segment windows are
    ``[origin + at, origin + at + blend_s + hold_s)`` in session time, on the run's own running
    rows. Every segment gets a ``completed`` check (the run's running data cover its whole
    window); the criteria of a segment that was not completed fail. Whole-run criteria are
    measured over all the run's running rows — the span of the run summary, lead-in included
    (the engine blends from the measured output into ``initial``, so the lead-in is tracked
    too). A criterion whose metric cannot be measured (NaN, e.g. the output never settled)
    fails and says why. The plan passes when every run passes; a session with several runs
    tags each verdict with its run.
    """
    runs = session_runs(session)
    results: list[CriterionResult] = []
    if not runs:
        results += _judge_run(plan, session, None, None)
    for run in runs:
        results += _judge_run(plan, session, run, run.index if len(runs) > 1 else None)
    name = str(plan.get("name") or "test plan")
    return PlanResult(name, all(r.passed for r in results), results)


def _judge_run(plan: Mapping, session: Session, run: Run | None, tag: int | None
               ) -> list[CriterionResult]:
    segments = plan_segments(plan)
    units = session.units
    t = session.samples["t"]
    rows_of_run = run.running_rows(session) if run is not None else np.zeros(t.size, dtype=bool)
    origin = run.t_start if run is not None else 0.0
    t_last = run.t_end if run is not None else -math.inf
    period = float(np.median(np.diff(t))) if t.size >= 2 else 0.0
    results: list[CriterionResult] = []

    def add(result: CriterionResult) -> None:
        results.append(replace(result, run=tag))

    for seg in segments:
        t0, t1 = origin + seg.at, origin + seg.end
        done = t_last >= t1 - 1.5 * period
        msg = (f"running data cover the segment (t = {t0:.3f} … {t1:.3f} s)" if done else
               f"not completed: the running data end at t = {t_last:.3f} s, the segment needs "
               f"t = {t0:.3f} … {t1:.3f} s")
        add(CriterionResult(seg.name, "completed", True, done, done, msg))
        if not seg.criteria:
            continue
        step, tracking = segment_metrics(session, t0, t1, seg.r_from, seg.to,
                                         settle_band=seg.settle_band, within=rows_of_run)
        values = {**step.as_dict(), **tracking.as_dict()}
        values["abs_steady_state_error"] = abs(values["steady_state_error"])
        for name, limit in seg.criteria.items():
            if not done:
                add(CriterionResult(seg.name, name, dict(limit), math.nan, False,
                                    f"{name}: not judged, the segment was not completed"))
            else:
                add(_judge(seg.name, name, limit, values[name], units, step))

    criteria = dict(plan.get("criteria") or {})
    if criteria:
        values = rows_metrics(session, rows_of_run).as_dict()
        values["lost_samples"] = session.lost_samples
        values["rejected_frames"] = session.rejected_frames_total
        for name, limit in criteria.items():
            if name == "no_trip":
                if limit:
                    add(_judge_no_trip(session, run, tag is None))
            elif name == "completed":
                if limit:
                    ok, why = _run_completed(session, run, tag is None)
                    add(CriterionResult(None, name, True, ok, ok, why))
            else:
                res = _judge(None, name, limit, values[name], units)
                if name not in ("lost_samples", "rejected_frames"):
                    res = replace(res, message=res.message + RUN_SPAN_WORDS)
                add(res)
    return results


def _run_completed(session: Session, run: Run | None, only_run: bool) -> tuple[bool, str]:
    if only_run or run is None:
        return session.outcome == "completed", f"outcome: {session.outcome}"
    ok = "duration reached" in run.ended or run.ended.startswith("completed")
    return ok, f"run {run.index} ended: {run.ended}"


def _judge(segment: str | None, name: str, limit: Mapping, value: float, units: dict,
           step: TransitionMetrics | None = None) -> CriterionResult:
    unit = metric_unit(name, units)
    unit = f" {unit}" if unit else ""
    lo, hi = limit.get("min"), limit.get("max")
    bounds = {k: float(v) for k, v in limit.items() if k in ("min", "max")}
    if not math.isfinite(value):
        return CriterionResult(segment, name, bounds, value, False,
                               f"{name}: {_why_nan(name, step)}")
    shown = f"{name} = {value:.4g}{unit}"
    if lo is not None and value < lo:
        return CriterionResult(segment, name, bounds, value, False,
                               f"{shown} below the minimum {lo:g}{unit}")
    if hi is not None and value > hi:
        return CriterionResult(segment, name, bounds, value, False,
                               f"{shown} above the maximum {hi:g}{unit}")
    if lo is not None and hi is not None:
        allowed = f"within {lo:g} … {hi:g}{unit}"
    elif lo is not None:
        allowed = f"at least {lo:g}{unit}"
    else:
        allowed = f"at most {hi:g}{unit}"
    return CriterionResult(segment, name, bounds, value, True, f"{shown}, {allowed}")


def _judge_no_trip(session: Session, run: Run | None = None, only_run: bool = True
                   ) -> CriterionResult:
    if not only_run and run is not None:
        trips = [ev for ev in session.events if ev.kind in ("trip", "estop") and ev.t is not None
                 and run.t_start <= ev.t < run.t_next]
        ok = not trips and not run.ended.startswith("the session ended while running")
        msg = (f"no trip in run {run.index} ({run.ended})" if ok else
               f"run {run.index}: {trips[0].detail if trips else run.ended}")
        return CriterionResult(None, "no_trip", True, ok, ok, msg)
    trip = session.meta.get("trip")
    trips = [ev for ev in session.events if ev.kind in ("trip", "estop")]
    if isinstance(trip, Mapping):
        ok, msg = False, f"tripped: {trip.get('message') or trip.get('cause')}"
    elif trips:
        ok, msg = False, f"tripped at t = {trips[0].t} s: {trips[0].detail}"
    elif not session.clean_end:
        ok, msg = False, "cannot confirm: the session ended without a clean stop"
    else:
        ok, msg = True, f"no trip (outcome: {session.outcome})"
    return CriterionResult(None, "no_trip", True, ok, ok, msg)


def _why_nan(name: str, step: TransitionMetrics | None) -> str:
    if name == "settling_time_s" and step is not None:
        if step.band_widened:
            return f"{step.settled} ({step.band_note})"
        return f"{step.settled} (band ±{step.band_pct:.3g} % of the change)"
    if name == "rise_time_s":
        return "did not reach 90 % of the change"
    if name in ("lost_samples", "rejected_frames"):
        return "not recorded in session.yaml's summary"
    return "no value (no running samples to measure)"
