"""Assemble what a session report says, as data; compare two sessions.

The analysis is computed once (:func:`analyse`) and rendered twice:
:func:`rigloop.analysis.report_text.render_text` for people, :meth:`SessionAnalysis.as_dict`
(JSON) for scripts. Every definition lives in
:mod:`rigloop.analysis.metrics`; this module only chooses rows, labels and layout.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from rigloop.analysis.metrics import RunMetrics
from rigloop.analysis.plan import evaluate_plan, plan_reference_spec, plan_segments, session_plan
from rigloop.analysis.runs import Run, session_runs
from rigloop.analysis.segments import ProfileStep, Segment, analyse_segments, rows_metrics
from rigloop.analysis.session import Session
from rigloop.plain_data import plain

#: Run metrics shown in the text report and compared between sessions: key, label.
RUN_ROWS = (
    ("rms_error", "RMS error"),
    ("mean_error", "mean error"),
    ("iae", "IAE"),
    ("ise", "ISE"),
    ("itae", "ITAE"),
    ("max_abs_error", "max |error|"),
    ("u_rms", "RMS actuator"),
    ("u_total_variation", "actuator total variation"),
    ("max_abs_u", "max |actuator|"),
    ("time_at_limits_pct", "time at actuator limits"),
    ("f_hat_min", "F estimate min"),
    ("f_hat_max", "F estimate max"),
    ("latency_ms_p50", "latency p50"),
    ("latency_ms_p99", "latency p99"),
    ("latency_ms_max", "latency max"),
    ("compute_us_p50", "compute p50"),
    ("compute_us_p99", "compute p99"),
    ("late_ticks", "late samples"),
    ("lost_samples", "lost samples"),
    ("rejected_frames_total", "rejected frames"),
)
#: Step metrics per transition: key, column title.
STEP_COLUMNS = (
    ("rise_time_s", "rise s"),
    ("settling_time_s", "settle s"),
    ("overshoot_pct", "overshoot %"),
    ("steady_state_error", "ss error"),
)


@dataclass
class SessionAnalysis:
    """Everything the report shows about one session."""

    session: Session
    run: RunMetrics
    segments: list[Segment]
    trips: list[dict]
    plan: dict | None                  # PlanResult.as_dict() shape
    plan_source: str | None            # "recorded" (session.yaml) or "evaluated" (by the report)
    notes: list[str] = field(default_factory=list)
    runs: list[Run] = field(default_factory=list)             # the runs reported
    run_metrics: list[RunMetrics] = field(default_factory=list)  # one per reported run
    all_runs: int = 0                  # runs in the session (``runs`` may be one of them)
    band: float | None = None          # --band: the settling band given, fraction of the change

    @property
    def units(self) -> dict[str, str]:
        return self.session.units

    def as_dict(self) -> dict[str, Any]:
        s = self.session
        summary = s.summary
        rejected = summary.get("rejected_frames")
        rejected = rejected if isinstance(rejected, dict) else {}
        out: dict[str, Any] = {
            "session": str(s.path), "name": s.name, "rig": s.rig,
            "started_utc": s.meta.get("started_utc"), "ended_utc": s.meta.get("ended_utc"),
            "outcome": s.outcome, "stop_reason": s.meta.get("stop_reason"),
            "clean_end": s.clean_end, "truncated": s.truncated,
            "samples": s.n_rows, "samples_running": self.run.samples,
            "output": s.output_name, "output_unit": self.units["y"],
            "actuator": s.actuator["name"], "actuator_unit": self.units["u"],
            "actuator_min": s.actuator["min"], "actuator_max": s.actuator["max"],
        }
        run = self.run.as_dict()
        run.pop("samples")
        out.update(run)
        out["lost_samples"] = s.lost_samples
        out["rejected_frames"] = rejected
        out["rejected_frames_total"] = s.rejected_frames_total
        out["runs_in_session"] = self.all_runs
        out["runs"] = [{**r.as_dict(), **_plain_run(m)} for r, m in zip(self.runs, self.run_metrics)]
        out["band_pct"] = None if self.band is None else 100.0 * self.band
        out["trips"] = self.trips
        out["transitions"] = [seg.as_dict() for seg in self.segments]
        out["plan"] = self.plan
        out["plan_source"] = self.plan_source
        out["notes"] = list(self.notes)
        out["warnings"] = list(s.warnings)
        return out


def _plain_run(m: RunMetrics) -> dict:
    out = m.as_dict()
    out.pop("samples")
    return out


def analyse(session: Session, *, band: float | None = None, run: int | None = None
            ) -> SessionAnalysis:
    """Compute the report's content for one session.

    ``band`` (a fraction of the change) replaces every settling band of the transition table
    (the plan's verdicts keep the plan's bands); ``run`` (1-based) reports that run alone.
    Raises ``ValueError`` naming the runs there are when ``run`` is not one of them.
    """
    notes: list[str] = []
    all_runs = session_runs(session)
    runs = all_runs
    if run is not None:
        if not 1 <= run <= len(all_runs):
            have = (f"it has {len(all_runs)} run(s), numbered 1 to {len(all_runs)}" if all_runs
                    else "it has no run (the loop never reached the running state)")
            raise ValueError(f"--run {run}: no such run in {session.name}; {have}")
        runs = [all_runs[run - 1]]
    plan = None
    try:
        plan = session_plan(session)
    except ValueError as exc:
        notes.append(f"test plan not evaluated: {exc}")
    if plan is not None:
        spec = plan_reference_spec(plan)
        steps = [ProfileStep(p.name, p.settle_band) for p in plan_segments(plan)]
        segments, seg_notes = analyse_segments(session, spec, source="plan", steps=steps,
                                               band=band, runs=runs)
    else:
        spec = session.config.get("reference")
        segments, seg_notes = analyse_segments(session, spec if isinstance(spec, dict) else None,
                                               band=band, runs=runs)
    notes += seg_notes

    mask = np.zeros(session.n_rows, dtype=bool)
    for r in runs:
        mask |= r.running_rows(session)
    total = rows_metrics(session, mask if run is not None else session.active_mask())
    per_run = [rows_metrics(session, r.running_rows(session)) for r in runs]
    if not total.samples:
        notes.append("no rows were recorded in the running state: no tracking metric or "
                      "transition can be measured")
    arms = sum(1 for ev in session.events if ev.kind == "armed")
    if arms > len(all_runs):
        notes.append(f"armed {arms} times, {len(all_runs)} of them reached the running state "
                     f"(an arm refused or tripped before the first running sample has no run)")

    verdicts, source = None, None
    recorded = session.meta.get("plan")
    if isinstance(recorded, dict) and "criteria" in recorded:
        verdicts, source = recorded, "recorded"
    elif plan is not None:
        verdicts, source = evaluate_plan(plan, session).as_dict(), "evaluated"
    if verdicts is not None and run is not None and len(all_runs) > 1:
        verdicts = _verdicts_of_run(verdicts, run)
    trips = session_trips(session)
    if run is not None:
        r = runs[0]
        trips = [tr for tr in trips if _in_run(tr.get("t"), r)]
    return SessionAnalysis(session, total, segments, trips, verdicts, source, notes, runs,
                           per_run, len(all_runs), band)


def _verdicts_of_run(verdicts: dict, run: int) -> dict:
    criteria = [c for c in verdicts.get("criteria") or [] if c.get("run") in (None, run)]
    failed = sum(1 for c in criteria if not c.get("passed"))
    return {**verdicts, "criteria": criteria, "failed": failed, "passed": failed == 0,
            "run": run}


def _in_run(t: object, run: Run) -> bool:
    try:
        return run.t_start <= float(t) < run.t_next
    except (TypeError, ValueError):
        return False


def session_trips(session: Session) -> list[dict]:
    """Trips of the session: session.yaml's ``trip`` plus any other trip/e-stop events."""
    trips: list[dict] = []
    recorded = session.meta.get("trip")
    if isinstance(recorded, dict):
        trips.append({k: recorded.get(k) for k in ("cause", "t", "channel", "value", "limit",
                                                    "stop", "message")})
    for ev in session.events:
        if ev.kind not in ("trip", "estop"):
            continue
        if any(_same_time(ev.t, tr.get("t")) for tr in trips):
            continue
        # the engine writes trip events as "<cause>: <message>" (rigloop.engine.loop._trip)
        cause, sep, message = (ev.detail or "").partition(": ")
        if ev.kind == "estop":
            cause, message = "e-stop", ev.detail
        elif not sep or " " in cause:
            cause, message = None, ev.detail
        trips.append({"cause": cause, "t": ev.t, "channel": None, "value": ev.value, "limit": ev.limit,
                      "stop": None, "message": message})
    return trips


def _same_time(a, b) -> bool:
    try:
        return abs(float(a) - float(b)) < 1e-6
    except (TypeError, ValueError):
        return False


# --- numbers as text (shared with report_text and figures) --------------------------------

def fmt(x: object, digits: int = 4) -> str:
    """A number with about ``digits`` significant digits, without an exponent for everyday
    magnitudes; whole numbers without decimals; ``n/a`` for missing and non-finite values."""
    if x is None:
        return "n/a"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if not isinstance(x, (int, float)):
        return str(x)
    if not math.isfinite(x):
        return "n/a"
    if float(x).is_integer() and abs(x) < 1e9:
        return str(int(x))
    mag = int(f"{x:.{digits - 1}e}".split("e")[1])   # exponent after rounding
    if mag >= 9 or mag < -4:
        return f"{x:.{digits - 1}e}"
    return f"{x:.{max(0, digits - 1 - mag)}f}"


def value_with_unit(value: object, unit: str) -> str:
    text = fmt(value)
    return f"{text} {unit}" if unit and text != "n/a" else text


# --- comparison ---------------------------------------------------------------------------

def _diff(a: object, b: object) -> dict[str, float]:
    if not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in (a, b)):
        return {"b_minus_a": math.nan, "pct": math.nan}
    d = float(b) - float(a)
    pct = 100.0 * d / abs(float(a)) if a != 0 and math.isfinite(float(a)) else math.nan
    return {"b_minus_a": d, "pct": pct}


def comparison_dict(a: SessionAnalysis, b: SessionAnalysis) -> dict[str, Any]:
    """``{"a": {...}, "b": {...}, "diff": {...}}``; diff holds ``b_minus_a`` and ``pct`` (of |A|)
    for every run metric, and per transition index present in both sessions."""
    da, db = a.as_dict(), b.as_dict()
    diff: dict[str, Any] = {key: _diff(da.get(key), db.get(key)) for key, _ in RUN_ROWS}
    diff["samples"] = _diff(da["samples"], db["samples"])
    diff["transitions"] = [
        {"index": ta["index"], **{k: _diff(ta[k], tb[k]) for k, _ in STEP_COLUMNS}}
        for ta, tb in zip(da["transitions"], db["transitions"])]
    return {"a": da, "b": db, "diff": diff}


# --- JSON ---------------------------------------------------------------------------------

def json_ready(obj: Any) -> Any:
    """Replace NaN/inf with None (JSON has no NaN) and numpy scalars with Python numbers."""
    return plain(obj)


def to_json(obj: Any) -> str:
    return json.dumps(json_ready(obj), indent=2, ensure_ascii=False, allow_nan=False)
