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

import numpy as np

from rigloop.analysis.metrics import RunMetrics, metric_unit
from rigloop.analysis.plan import evaluate_plan, plan_reference_spec, plan_segments, session_plan
from rigloop.analysis.runs import Run, session_runs
from rigloop.analysis.segments import ProfileStep, Segment, analyse_segments, rows_metrics
from rigloop.analysis.session import Session
from rigloop.analysis.transition import NEVER_LEFT, NOISE_MULTIPLE, NOT_SETTLED
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
#: An overshoot's noise resolution is printed beside it from this many percentage points on.
OVERSHOOT_NOISE_SHOWN = 1.0
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
        f"  samples  {s.n_rows} recorded, {_running_words(analysis)}",
        "",
    ]
    several = analysis.all_runs > 1
    if several and len(analysis.runs) > 1:
        lines += _run_table(analysis.runs)
        lines.append("")
    lines += _transition_table(analysis.segments, s.output_name, units["y"], several)
    lines.append("")
    lines += _metric_table(analysis, a)
    lines.append("")
    lines += _trip_lines(analysis.trips)
    if analysis.plan is not None:
        lines.append("")
        lines += plan_lines(analysis.plan, analysis.plan_source)
    remarks = analysis.notes + s.warnings
    if remarks:
        lines.append("")
        lines.append("Notes")
        lines += [f"  - {n}" for n in remarks]
    return "\n".join(lines) + "\n"


def _running_words(analysis: SessionAnalysis) -> str:
    run = analysis.run
    if analysis.all_runs > 1 and len(analysis.runs) == 1:
        r = analysis.runs[0]
        return (f"run {r.index} of {analysis.all_runs}: {run.samples} while running "
                f"({fmt(run.duration_s)} s, t = {r.t_start:.3f} … {r.t_end:.3f} s)")
    text = f"{run.samples} while running ({fmt(run.duration_s)} s)"
    if analysis.all_runs > 1:
        text += f" in {analysis.all_runs} runs"
    return text


def _run_table(runs: list[Run]) -> list[str]:
    head = ["#", "start s", "end s", "running s", "samples", "how it ended"]
    rows = [[str(r.index), f"{r.t_start:.3f}", f"{r.t_end:.3f}", fmt(r.duration_s),
             str(r.samples), r.ended] for r in runs]
    return (["Runs (each ARM … stop; times in session time, s)"]
            + _table(head, rows, text_cols=(5,)))


def _metric_table(analysis: SessionAnalysis, a: dict) -> list[str]:
    units = analysis.units
    title = ("Run metrics (all running rows, lead-in included; integrals and total variation "
             "run by run)")
    if not (analysis.all_runs > 1 and len(analysis.runs) > 1):
        lines = [title]
        width = max(len(label) for _, label in RUN_ROWS)
        for key, label in RUN_ROWS:
            lines.append(f"  {label:<{width}}  "
                         f"{_value_with_unit(a.get(key), metric_unit(key, units))}")
        return lines
    per = [m.as_dict() for m in analysis.run_metrics]
    head = ["metric"] + [f"run {r.index}" for r in analysis.runs] + ["all runs"]
    rows = []
    for key, label in RUN_ROWS:
        unit = metric_unit(key, units)
        rows.append([label + (f" [{unit}]" if unit else "")] + [fmt(m.get(key)) for m in per]
                    + [fmt(a.get(key))])
    return [title] + _table(head, rows) + [
        "  lost samples and rejected frames are counted for the whole session (all runs)"]


def _settle_cell(seg: Segment) -> str:
    status = seg.transition.settled
    if status == NOT_SETTLED:
        return "not settled"
    if status == NEVER_LEFT:
        return "0 (in band)"
    return fmt(seg.step.settling_time_s)


def _transition_table(segments: list[Segment], output: str, unit: str,
                      several_runs: bool = False) -> list[str]:
    title = f"Transitions of {output}" + (f" [{unit}]" if unit else "")
    if not segments:
        return [title, "  none (the reference held one level, or no transition was reached)"]
    head = (["#"] + (["run"] if several_runs else []) + ["label", "from", "to", "start s"]
            + [c for _, c in STEP_COLUMNS] + ["band ±", "noise σ", "smooth s"])
    rows = []
    for seg in segments:
        tm = seg.transition
        row = [str(seg.index)] + ([str(seg.run)] if several_runs else [])
        row += [seg.label, fmt(seg.r_from), fmt(seg.r_to), f"{seg.t_start:.3f}"]
        overshoot = fmt(seg.step.overshoot_pct)
        if tm.overshoot_noise_pct >= OVERSHOOT_NOISE_SHOWN and overshoot != "n/a":
            overshoot += f" ±{tm.overshoot_noise_pct:.2g}"
        row += [fmt(seg.step.rise_time_s), _settle_cell(seg), overshoot,
                fmt(seg.step.steady_state_error)]
        row += [fmt(tm.band, 3) + ("*" if tm.band_widened else ""), fmt(tm.noise_std, 3),
                fmt(tm.smoothing_s, 3)]
        rows.append(row)
    stated = sorted({100.0 * seg.settle_band for seg in segments})
    stated_text = " or ".join(f"±{fmt(b)} %" for b in stated)
    out = [title] + _table(head, rows, text_cols=(2 if several_runs else 1,))
    out += [
        "  rise, settle, overshoot: read on the output smoothed without lag (cubic Savitzky–Golay "
        "over 'smooth s'; 0 = not",
        "    smoothed), so that the noise does not set them; noise σ: the output's noise, from its "
        "second differences;",
        f"  settle: from the start of the blend until the output stays within the band: "
        f"{stated_text} of the change, or",
        f"    {NOISE_MULTIPLE:g}× the noise left after smoothing where that is wider (marked *: "
        f"the stated band is below the noise);",
        "  not settled: outside the band at the segment's end, or inside it only for the last "
        "10 % of the segment;",
        "  rise: 10–90 % of the change; ss error: target − mean raw output over the last 10 % of "
        "the segment"]
    if any(seg.transition.overshoot_noise_pct >= OVERSHOOT_NOISE_SHOWN for seg in segments):
        out.append(f"  overshoot ±x: the noise left after smoothing ({NOISE_MULTIPLE:g}σ) can move "
                   f"it by up to x points; an overshoot that small may be noise")
    if any(seg.transition.band_widened for seg in segments):
        out.append("  * band below the noise: " + next(
            seg.transition.band_note for seg in segments if seg.transition.band_widened))
    return out


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


def plan_lines(plan: dict, source: str | None = None) -> list[str]:
    """The plan's verdicts as sentences (the report's and ``rigloop run``'s wording)."""
    criteria = plan.get("criteria") or []
    failed = [c for c in criteria if not c.get("passed")]
    verdict = "PASSED" if plan.get("passed") else "FAILED"
    origin = " (evaluated by this report)" if source == "evaluated" else ""
    of_run = f", run {plan['run']}" if plan.get("run") is not None else ""
    out = [f"Test plan '{plan.get('name', 'test plan')}'{of_run}: {verdict}{origin} — "
           f"{len(criteria) - len(failed)} of {len(criteria)} criteria met"]
    if plan.get("error"):
        out.append(f"  the plan could not be evaluated: {plan['error']}")
    for c in criteria:
        mark = "pass" if c.get("passed") else "FAIL"
        where = c.get("segment") or "whole run"
        if c.get("run") is not None and plan.get("run") is None:
            where = f"run {c['run']}, {where}"
        out.append(f"  [{mark}] {where}: {c.get('message') or _criterion_sentence(c)}")
    return out


def _criterion_sentence(c: dict) -> str:
    """Words for a verdict recorded without a message (older session files)."""
    limit, value = c.get("limit"), c.get("value")
    if isinstance(limit, dict):
        bounds = " and ".join(f"{'at least' if k == 'min' else 'at most'} {fmt(v)}"
                              for k, v in limit.items())
        return f"{c.get('name')} = {fmt(value)}, allowed {bounds}"
    return f"{c.get('name')}: {'yes' if value else 'no'}"


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
