"""The report as text: what ``rigloop report`` prints for one session, or for two side by side.

Every number comes from :func:`rigloop.analysis.report.analyse`; this module only chooses
words, columns and layout.
"""

from __future__ import annotations

from rigloop.analysis.metrics import metric_unit
from rigloop.analysis.report import (
    RUN_ROWS, STEP_COLUMNS, SessionAnalysis, comparison_dict, fmt, value_with_unit,
)
from rigloop.analysis.runs import Run
from rigloop.analysis.segments import Segment
from rigloop.analysis.transition import NEVER_LEFT, NOISE_MULTIPLE, NOT_SETTLED

#: An overshoot's noise resolution is printed beside it from this many percentage points on.
OVERSHOOT_NOISE_SHOWN = 1.0


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
                         f"{value_with_unit(a.get(key), metric_unit(key, units))}")
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
    widened = [seg for seg in segments if seg.transition.band_widened]
    if widened:
        rows = ", ".join(f"row {seg.index}: ±{seg.transition.band_pct:.3g} %" for seg in widened)
        out.append(f"  * band below the noise: the stated band is narrower than "
                   f"{NOISE_MULTIPLE:g}× the noise left after smoothing and was widened to it "
                   f"({rows} of the change)")
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
