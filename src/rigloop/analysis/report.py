"""Assemble what a session report says, as data (JSON) and as text; compare two sessions.

The analysis is computed once (:func:`analyse`) and rendered twice: :func:`render_text` for
people, :meth:`SessionAnalysis.as_dict` for scripts. Every definition lives in
:mod:`rigloop.analysis.metrics`; this module only chooses rows, labels and layout.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from typing import Any

from rigloop.analysis.metrics import RunMetrics, metric_unit
from rigloop.analysis.plan import evaluate_plan, plan_reference_spec, plan_segments, session_plan
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
        out["trips"] = self.trips
        out["transitions"] = [seg.as_dict() for seg in self.segments]
        out["plan"] = self.plan
        out["plan_source"] = self.plan_source
        out["notes"] = list(self.notes)
        out["warnings"] = list(s.warnings)
        return out


def analyse(session: Session) -> SessionAnalysis:
    """Compute the report's content for one session."""
    notes: list[str] = []
    plan = None
    try:
        plan = session_plan(session)
    except ValueError as exc:
        notes.append(f"test plan not evaluated: {exc}")
    if plan is not None:
        spec = plan_reference_spec(plan)
        steps = [ProfileStep(p.name, p.settle_band) for p in plan_segments(plan)]
        segments, seg_notes = analyse_segments(session, spec, source="plan", steps=steps)
    else:
        spec = session.config.get("reference")
        segments, seg_notes = analyse_segments(session, spec if isinstance(spec, dict) else None)
    notes += seg_notes

    run = rows_metrics(session, session.active_mask())
    if not run.samples:
        notes.append("no rows were recorded in the running state: no tracking metric or "
                      "transition can be measured")

    verdicts, source = None, None
    recorded = session.meta.get("plan")
    if isinstance(recorded, dict) and "criteria" in recorded:
        verdicts, source = recorded, "recorded"
    elif plan is not None:
        verdicts, source = evaluate_plan(plan, session).as_dict(), "evaluated"
    return SessionAnalysis(session, run, segments, session_trips(session), verdicts, source, notes)


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


# --- text ---------------------------------------------------------------------------------

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


def _value_with_unit(value: object, unit: str) -> str:
    text = fmt(value)
    return f"{text} {unit}" if unit and text != "n/a" else text


def render_text(analysis: SessionAnalysis) -> str:
    s, a = analysis.session, analysis.as_dict()
    units = analysis.units
    lines = [f"Session report: {s.name}"]
    if s.truncated:
        lines.append(f"WARNING: {s.truncated}")
    lines += [
        f"  folder   {s.path}",
        f"  rig      {s.rig}",
        f"  started  {a['started_utc'] or '?'}   ended {a['ended_utc'] or 'not recorded'}",
        f"  outcome  {s.outcome}" + (f" ({a['stop_reason']})" if a["stop_reason"] else ""),
        f"  samples  {s.n_rows} recorded, {analysis.run.samples} while running "
        f"({fmt(analysis.run.duration_s)} s)",
        "",
    ]
    lines += _transition_table(analysis.segments, s.output_name, units["y"])
    lines.append("")
    lines.append("Run metrics (running rows only)")
    width = max(len(label) for _, label in RUN_ROWS)
    for key, label in RUN_ROWS:
        lines.append(f"  {label:<{width}}  {_value_with_unit(a.get(key), metric_unit(key, units))}")
    lines.append("")
    lines += _trip_lines(analysis.trips)
    if analysis.plan is not None:
        lines.append("")
        lines += _plan_lines(analysis.plan, analysis.plan_source)
    remarks = analysis.notes + s.warnings
    if remarks:
        lines.append("")
        lines.append("Notes")
        lines += [f"  - {n}" for n in remarks]
    return "\n".join(lines) + "\n"


def _transition_table(segments: list[Segment], output: str, unit: str) -> list[str]:
    title = f"Transitions of {output}" + (f" [{unit}]" if unit else "")
    if not segments:
        return [title, "  none (the reference held one level, or no transition was reached)"]
    bands = {seg.settle_band for seg in segments}
    head = ["#", "label", "from", "to", "start s"] + [c for _, c in STEP_COLUMNS]
    if len(bands) > 1:
        head.append("band %")
    rows = []
    for seg in segments:
        row = [str(seg.index), seg.label, fmt(seg.r_from), fmt(seg.r_to), f"{seg.t_start:.3f}"]
        row += [fmt(getattr(seg.step, key)) for key, _ in STEP_COLUMNS]
        if len(bands) > 1:
            row.append(fmt(100.0 * seg.settle_band))
        rows.append(row)
    band = f"±{fmt(100.0 * bands.pop())} %" if len(bands) == 1 else "the band given per row"
    return [title] + _table(head, rows, text_cols=(1,)) + [
        "  rise: 10–90 % of the change; ss error: target − mean output over the last 10 % of "
        "the segment;",
        f"  settle: from the start of the blend until the output stays within {band} of the change"]


def _table(head: list[str], rows: list[list[str]], text_cols: tuple[int, ...] = (0,)) -> list[str]:
    """Aligned columns: text columns left, numbers right."""
    widths = [max(len(head[i]), *(len(r[i]) for r in rows)) for i in range(len(head))]

    def line(cells: list[str]) -> str:
        return "  " + "  ".join(c.ljust(w) if i in text_cols else c.rjust(w)
                                for i, (c, w) in enumerate(zip(cells, widths))).rstrip()
    return [line(head)] + [line(r) for r in rows]


def _trip_lines(trips: list[dict]) -> list[str]:
    if not trips:
        return ["Trips: none"]
    out = [f"Trips ({len(trips)})"]
    for tr in trips:
        where = f"t = {fmt(tr.get('t'))} s" if tr.get("t") is not None else "t = ?"
        cause = tr.get("cause") or "trip"
        parts = [f"  {where}  {cause}"]
        if tr.get("channel"):
            parts.append(f"channel {tr['channel']}")
        if tr.get("value") is not None:
            parts.append(f"value {fmt(tr['value'])}")
        if tr.get("limit") is not None:
            parts.append(f"limit {fmt(tr['limit'])}")
        text = ", ".join(parts)
        if tr.get("message"):
            text += f" — {tr['message']}"
        out.append(text)
    return out


def _plan_lines(plan: dict, source: str | None) -> list[str]:
    criteria = plan.get("criteria") or []
    failed = [c for c in criteria if not c.get("passed")]
    verdict = "PASSED" if plan.get("passed") else "FAILED"
    origin = " (evaluated by this report)" if source == "evaluated" else ""
    out = [f"Test plan '{plan.get('name', 'test plan')}': {verdict}{origin} — "
           f"{len(criteria) - len(failed)} of {len(criteria)} criteria met"]
    if plan.get("error"):
        out.append(f"  the plan could not be evaluated: {plan['error']}")
    for c in criteria:
        mark = "pass" if c.get("passed") else "FAIL"
        where = c.get("segment") or "whole run"
        out.append(f"  [{mark}] {where}: {c.get('message')}")
    return out


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


def render_comparison(a: SessionAnalysis, b: SessionAnalysis) -> str:
    comp = comparison_dict(a, b)
    da, db, diff = comp["a"], comp["b"], comp["diff"]
    units = a.units
    lines = ["Session comparison (B − A)"]
    for tag, an in (("A", a), ("B", b)):
        s = an.session
        lines.append(f"  {tag}  {s.name}  rig {s.rig}, outcome {s.outcome}, {s.n_rows} samples")
        if s.truncated:
            lines.append(f"     WARNING: {s.truncated}")
    if a.units != b.units:
        lines.append(f"  note: the units differ (A: {a.units}, B: {b.units}); A's are shown")
    lines.append("")
    head = ["metric", "A", "B", "B − A", "%"]
    rows = []
    for key, label in RUN_ROWS:
        unit = metric_unit(key, units)
        rows.append([f"{label}" + (f" [{unit}]" if unit else ""), fmt(da.get(key)),
                     fmt(db.get(key)), fmt(diff[key]["b_minus_a"]), fmt(diff[key]["pct"], 3)])
    lines += _table(head, rows)
    lines.append("")
    n = min(len(da["transitions"]), len(db["transitions"]))
    lines.append(f"Transitions compared by index ({n} in both; A has {len(da['transitions'])}, "
                 f"B has {len(db['transitions'])})")
    if n:
        head = ["#", "metric", "A", "B", "B − A", "%"]
        rows = []
        for ta, tb, td in zip(da["transitions"], db["transitions"], diff["transitions"]):
            for key, title in STEP_COLUMNS:
                rows.append([str(ta["index"]), title, fmt(ta[key]), fmt(tb[key]),
                             fmt(td[key]["b_minus_a"]), fmt(td[key]["pct"], 3)])
        lines += _table(head, rows, text_cols=(1,))
    for tag, an in (("A", a), ("B", b)):
        if an.trips:
            lines.append("")
            lines += [f"{tag}: " + line.strip() if i == 0 else line
                      for i, line in enumerate(_trip_lines(an.trips))]
    return "\n".join(lines) + "\n"


# --- JSON ---------------------------------------------------------------------------------

def json_ready(obj: Any) -> Any:
    """Replace NaN/inf with None (JSON has no NaN) and numpy scalars with Python numbers."""
    return plain(obj)


def to_json(obj: Any) -> str:
    return json.dumps(json_ready(obj), indent=2, ensure_ascii=False, allow_nan=False)
