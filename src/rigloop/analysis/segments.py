"""Cut a session into transition segments and measure each one.

A *transition* is a change of the reference from one level to another (``Transition(t_start,
t_end, r_from, r_to)``: the blend runs from ``t_start`` to ``t_end``). Each transition's
*segment* runs from its ``t_start`` until the next transition starts or the running data end.

Where the transitions are in session time follows how the engine drives the reference:

- the reference time starts at the first ``running`` row after each arm (the profile's
  transitions are shifted by that row's time ``t``);
- a ``profile`` event restarts the profile with its time origin at the event's ``t``;
- a ``setpoint`` event (``value`` = new level, ``detail`` = ``blend_s=<seconds>``) replaces the
  rest of the current reference by one blend from the present level to the new one (the level
  it starts from is read from the recorded ``ref`` column). A later re-arm replays the current
  reference, setpoint change included.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from rigloop.analysis.metrics import SETTLE_BAND, RunMetrics, StepMetrics, run_metrics
from rigloop.analysis.runs import Run, run_labels, session_runs
from rigloop.analysis.session import Session
from rigloop.analysis.transition import TransitionMetrics, not_measured, transition_metrics
from rigloop.control.reference import Transition, build_reference

_BLEND_IN_DETAIL = re.compile(r"blend_s\s*=\s*([-+0-9.eE]+)")


@dataclass(frozen=True)
class Segment:
    """One transition and what the loop made of it, in session time (s from the first sample)."""

    index: int                 # 1-based, in time order
    source: str                # "reference", "plan" or "setpoint"
    label: str
    t_start: float
    t_blend_end: float
    t_end: float               # end of the segment: next transition or end of its run
    r_from: float
    r_to: float
    settle_band: float         # stated band, fraction of the change
    transition: TransitionMetrics
    tracking: RunMetrics
    run: int = 1               # the run (ARM … stop) it belongs to

    @property
    def step(self) -> StepMetrics:
        return self.transition.step

    def as_dict(self) -> dict:
        out = {"index": self.index, "run": self.run, "source": self.source, "label": self.label,
               "t_start": self.t_start, "t_blend_end": self.t_blend_end, "t_end": self.t_end,
               "r_from": self.r_from, "r_to": self.r_to, "settle_band_pct": 100.0 * self.settle_band}
        out.update(self.transition.as_dict())
        out.update({"rms_error": self.tracking.rms_error, "iae": self.tracking.iae,
                    "max_abs_error": self.tracking.max_abs_error,
                    "max_abs_u": self.tracking.max_abs_u})
        return out


def spec_transitions(spec: dict | None) -> tuple[list[Transition], str | None]:
    """Transitions of a reference spec in reference time, and a note when the spec cannot be
    rebuilt (the report then measures setpoint events only)."""
    if not isinstance(spec, dict):
        return [], None
    try:
        return list(build_reference(spec).transitions), None
    except (ValueError, OSError) as exc:
        return [], f"reference profile not rebuilt, its transitions are not measured: {exc}"


class ProfileStep(NamedTuple):
    """How to name and judge one transition of the profile."""

    label: str
    settle_band: float = SETTLE_BAND


class _Labelled(NamedTuple):
    source: str
    label: str
    tr: Transition
    settle_band: float = SETTLE_BAND


def running_starts(session: Session) -> list[float]:
    """Times of the first row of every stretch of ``running`` rows (where reference time is 0)."""
    t = session.samples["t"]
    if "state" not in session.samples:
        return [float(t[0])] if t.size else []
    active = session.active_mask().astype(np.int8)
    starts = np.flatnonzero(np.diff(np.concatenate(([0], active))) == 1)
    return [float(t[i]) for i in starts]


def session_transitions(session: Session, spec: dict | None, *, source: str = "reference",
                        steps: list[ProfileStep] | None = None) -> tuple[list[_Labelled], list[str]]:
    """Every transition the session's reference went through, in session time, sorted.

    ``steps`` names the profile's transitions (and sets their settling bands) in order;
    unnamed ones are called "step N".
    """
    profile, note = spec_transitions(spec)
    notes = [note] if note else []
    steps = list(steps or [])
    steps += [ProfileStep(f"step {i + 1}") for i in range(len(steps), len(profile))]
    profile_items = [_Labelled(source, st.label, tr, st.settle_band)
                     for st, tr in zip(steps, profile)]
    # (time, order among equal times, kind, event): arms first, then profile restarts, setpoints
    timeline: list[tuple[float, int, str, object]] = [
        (t0, 0, "arm", None) for t0 in running_starts(session)]
    for ev in session.events:
        if ev.t is None:
            continue
        if ev.kind == "profile":
            timeline.append((ev.t, 1, "profile", None))
        elif ev.kind == "setpoint":
            if isinstance(ev.value, float) and math.isfinite(ev.value):
                timeline.append((ev.t, 2, "setpoint", ev))
            else:
                notes.append(f"setpoint event at t = {ev.t} s has no numeric level; ignored")
    timeline.sort(key=lambda item: (item[0], item[1]))

    current, origin = list(profile_items), None
    epochs: list[tuple[float, float, list[_Labelled]]] = []
    for t_ev, _, kind, ev in timeline:
        if kind == "profile":
            current = list(profile_items)
        if kind in ("arm", "profile") or origin is None:
            origin = t_ev
        if kind == "setpoint":
            tau = t_ev - origin
            m = _BLEND_IN_DETAIL.search(ev.detail or "")
            blend = max(float(m.group(1)), 0.0) if m else 0.0
            level = float(ev.value)
            change = Transition(tau, tau + blend, _recorded_ref(session, t_ev), level)
            current = [x for x in current if x.tr.t_start < tau] + [
                _Labelled("setpoint", f"setpoint {level:g}", change)]
        epochs.append((t_ev, origin, current))

    out: list[_Labelled] = []
    for i, (t_begin, origin, items) in enumerate(epochs):
        t_next = epochs[i + 1][0] if i + 1 < len(epochs) else math.inf
        for item in items:
            t_start = item.tr.t_start + origin
            if t_begin - 1e-9 <= t_start < t_next - 1e-9:
                tr = Transition(t_start, item.tr.t_end + origin, item.tr.r_from, item.tr.r_to)
                out.append(item._replace(tr=tr))
    return out, notes


def _recorded_ref(session: Session, t_at: float) -> float:
    t, ref = session.samples["t"], session.column("ref")
    ok = np.isfinite(t) & np.isfinite(ref)
    return float(np.interp(t_at, t[ok], ref[ok])) if ok.any() else math.nan


def rows_metrics(session: Session, rows: np.ndarray) -> RunMetrics:
    """:func:`~rigloop.analysis.metrics.run_metrics` of the selected rows of a session; rows of
    different runs are integrated run by run (nothing bridges the time between two runs)."""
    col = session.column
    act = session.actuator
    return run_metrics(session.samples["t"][rows], col("e", rows), col("u", rows),
                       f_hat=col("f_hat", rows), u_min=act["min"], u_max=act["max"],
                       latency_ms=col("latency_ms", rows), compute_us=col("compute_us", rows),
                       late=col("late", rows), piece=run_labels(session)[rows])


def segment_metrics(session: Session, t_from: float, t_to: float, r_from: float, r_to: float,
                    *, include_end: bool = False, settle_band: float = SETTLE_BAND,
                    within: np.ndarray | None = None) -> tuple[TransitionMetrics, RunMetrics]:
    """Step and tracking metrics of the running rows with ``t_from <= t < t_to`` (and in the
    mask ``within``, e.g. one run's rows, when given)."""
    t = session.samples["t"]
    in_span = (t >= t_from) & ((t <= t_to) if include_end else (t < t_to))
    rows = session.active_mask() & in_span
    if within is not None:
        rows &= within
    tracking = rows_metrics(session, rows)
    if math.isfinite(r_from) and math.isfinite(r_to) and r_from != r_to:
        step = transition_metrics(t[rows], session.column("y", rows), t_step=t_from,
                                  y_initial=r_from, y_final=r_to, settle_band=settle_band)
    else:
        step = not_measured(settle_band)
    return step, tracking


def _run_of(runs: list[Run], t_at: float) -> Run | None:
    """The run whose running rows span ``t_at`` (a transition may start on its first row)."""
    for run in runs:
        if run.t_start - 1e-9 <= t_at <= run.t_end + 1e-9:
            return run
    return None


def analyse_segments(session: Session, spec: dict | None, *, source: str = "reference",
                     steps: list[ProfileStep] | None = None, band: float | None = None,
                     runs: list[Run] | None = None) -> tuple[list[Segment], list[str]]:
    """Segments of the session for the reference ``spec`` plus setpoint/profile events; returns
    ``(segments, notes)`` where notes explain what could not be measured.

    A segment belongs to the run in which its transition starts and ends with that run at the
    latest; a transition that starts while the rig was idle, stopping or tripped is not
    measured. ``band`` (a fraction of the change) replaces every stated settling band;
    ``runs`` limits the segments to those runs (default: every run)."""
    items, notes = session_transitions(session, spec, source=source, steps=steps)
    all_runs = session_runs(session)
    if not all_runs:
        return [], notes
    chosen = {r.index for r in (all_runs if runs is None else runs)}
    owned: list[tuple[_Labelled, Run]] = []
    outside = 0
    for item in items:
        run = _run_of(all_runs, item.tr.t_start)
        if run is None:
            outside += 1
        elif run.index in chosen:
            owned.append((item, run))
    if outside:
        notes.append(f"{outside} transition(s) start where the loop was not running (before an "
                     f"arm, after a stop or a trip, or after the running data end) and are not "
                     f"measured")
    segments = []
    for k, ((src, label, tr, stated), run) in enumerate(owned):
        nxt = owned[k + 1] if k + 1 < len(owned) else None
        ends_run = nxt is None or nxt[1].index != run.index or nxt[0].tr.t_start > run.t_end
        t_next = run.t_end if ends_run else nxt[0].tr.t_start
        if tr.r_from == tr.r_to:
            continue
        use = stated if band is None else band
        step, tracking = segment_metrics(session, tr.t_start, t_next, tr.r_from, tr.r_to,
                                         include_end=ends_run, settle_band=use,
                                         within=run.running_rows(session))
        segments.append(Segment(len(segments) + 1, src, label, tr.t_start, tr.t_end, t_next,
                                tr.r_from, tr.r_to, use, step, tracking, run.index))
    return segments, notes
