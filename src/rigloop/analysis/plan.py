"""Test plans: a scripted sequence of reference levels with pass/fail criteria.

A plan drives the reference (it becomes a ``levels`` reference spec) and, once the run is
recorded, judges it: each segment's step and tracking metrics and the whole run's metrics are
compared with the limits the plan gives. ``rigloop run`` exits with :data:`rigloop.exit_codes.EXIT_PLAN_FAILED`
when the run completed but a criterion failed. The schema is documented in docs/reports.md::

    plan:
      name: fan acceptance
      initial: 1200.0          # level held from t = 0 until the first segment
      lead_s: 3.0              # how long `initial` is held (default 2.0 s)
      blend_s: 1.0             # default blend time of the segments (default 1.0 s)
      settle_band_pct: 2.0     # default settling band, percent of each change (default 2)
      segments:
        - {name: step up, to: 2400.0, hold_s: 6.0, criteria: {settling_time_s: {max: 3.0}}}
      criteria: {no_trip: true, rms_error: {max: 80.0}}
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from rigloop.analysis.metrics import SETTLE_BAND
from rigloop.analysis.session import Session
from rigloop.config.problems import MISSING, Problem


DEFAULT_LEAD_S = 2.0
DEFAULT_BLEND_S = 1.0
DEFAULT_SETTLE_BAND_PCT = 100.0 * SETTLE_BAND
MAX_SEGMENTS = 500

#: Criteria a segment may carry (metric names of rigloop.analysis.metrics).
SEGMENT_CRITERIA = (
    "rise_time_s", "settling_time_s", "overshoot_pct", "peak_time_s", "steady_state_error",
    "abs_steady_state_error", "rms_error", "iae", "max_abs_error", "max_abs_u", "u_rms",
    "time_at_limits_pct",
)
#: Numeric criteria of the whole run.
RUN_CRITERIA = (
    "rms_error", "iae", "ise", "itae", "max_abs_error", "max_abs_u", "u_rms", "u_total_variation",
    "time_at_limits_pct", "latency_ms_p99", "late_ticks", "lost_samples", "rejected_frames",
)
#: Yes/no criteria of the whole run.
RUN_FLAGS = ("no_trip", "completed")
_PLAN_KEYS = ("name", "initial", "lead_s", "blend_s", "settle_band_pct", "segments", "criteria")
_SEGMENT_KEYS = ("name", "to", "blend_s", "hold_s", "settle_band_pct", "criteria")
_STEP_CRITERIA = ("rise_time_s", "settling_time_s", "overshoot_pct", "peak_time_s",
                  "steady_state_error", "abs_steady_state_error")


# --- loading and validation ---------------------------------------------------------------

def load_plan(path: str | Path, base_dir: str | Path | None = None) -> dict:
    """Read a plan file (a YAML mapping, either the plan itself or ``{plan: {...}}``).

    Raises ``ValueError`` naming the file and the fix; the result is not validated.
    """
    from rigloop.config.problems import ConfigError
    from rigloop.config.yaml_source import read_yaml_file

    p = Path(path)
    if base_dir is not None and not p.is_absolute():
        p = Path(base_dir) / p
    try:
        data, _ = read_yaml_file(p, what="test plan")
    except ConfigError as exc:
        raise ValueError(str(exc)) from None
    if isinstance(data, Mapping) and set(data) == {"plan"}:
        data = data["plan"]
    if not isinstance(data, Mapping):
        raise ValueError(f"{p}: a test plan file must hold a mapping (name, initial, segments, "
                         f"…), found {type(data).__name__}; see docs/reports.md")
    return dict(data)


def validate_plan(value: object, key: str = "plan", *, base_dir: str | Path | None = None
                  ) -> list[Problem]:
    """Every problem of a plan (a mapping, or a path to a plan file relative to ``base_dir``)."""
    if isinstance(value, (str, Path)):
        try:
            value = load_plan(value, base_dir)
        except ValueError as exc:
            return [Problem(key, str(value), str(exc))]
    if not isinstance(value, Mapping):
        return [Problem(key, value, "must be a mapping with name, initial and segments, or the "
                                    "path of a plan file (see docs/reports.md)")]
    problems: list[Problem] = []
    _unknown_keys(value, _PLAN_KEYS, key, problems)
    if "name" in value and not (isinstance(value["name"], str) and value["name"].strip()):
        problems.append(Problem(f"{key}.name", value["name"], "must be a non-empty text"))
    if "initial" not in value:
        problems.append(Problem(f"{key}.initial", MISSING,
                                "missing: the level held before the first segment (output unit)"))
    else:
        _check_number(value["initial"], f"{key}.initial", problems)
    if "lead_s" in value:
        _check_number(value["lead_s"], f"{key}.lead_s", problems, low=0.0, low_open=False)
    if "blend_s" in value:
        _check_number(value["blend_s"], f"{key}.blend_s", problems, low=0.0)
    if "settle_band_pct" in value:
        _check_band(value["settle_band_pct"], f"{key}.settle_band_pct", problems)
    segments = value.get("segments")
    if segments is None:
        problems.append(Problem(f"{key}.segments", MISSING,
                                "missing: a list of segments, each {to, hold_s, ...}"))
    elif not isinstance(segments, list) or not segments:
        problems.append(Problem(f"{key}.segments", segments, "must be a non-empty list of "
                                "segments, each a mapping {to, hold_s, blend_s?, name?, criteria?}"))
    elif len(segments) > MAX_SEGMENTS:
        problems.append(Problem(f"{key}.segments", f"<{len(segments)} items>",
                                f"at most {MAX_SEGMENTS} segments; split the plan"))
    else:
        level = value.get("initial")
        for i, seg in enumerate(segments):
            level = _validate_segment(seg, f"{key}.segments.{i}", level, problems)
    if "criteria" in value:
        _validate_criteria(value["criteria"], f"{key}.criteria", RUN_CRITERIA, RUN_FLAGS, problems)
    return problems


def _validate_segment(seg: object, key: str, level_before: object, problems: list[Problem]):
    if not isinstance(seg, Mapping):
        problems.append(Problem(key, seg, "must be a mapping {to, hold_s, blend_s?, name?, criteria?}"))
        return None
    _unknown_keys(seg, _SEGMENT_KEYS, key, problems)
    if "name" in seg and not (isinstance(seg["name"], str) and seg["name"].strip()):
        problems.append(Problem(f"{key}.name", seg["name"], "must be a non-empty text"))
    to = seg.get("to")
    if "to" not in seg:
        problems.append(Problem(f"{key}.to", MISSING, "missing: the level this segment moves to"))
    else:
        _check_number(to, f"{key}.to", problems)
    if "hold_s" not in seg:
        problems.append(Problem(f"{key}.hold_s", MISSING,
                                "missing: how long the level is held after the blend (s, > 0)"))
    else:
        _check_number(seg["hold_s"], f"{key}.hold_s", problems, low=0.0)
    if "blend_s" in seg:
        _check_number(seg["blend_s"], f"{key}.blend_s", problems, low=0.0)
    if "settle_band_pct" in seg:
        _check_band(seg["settle_band_pct"], f"{key}.settle_band_pct", problems)
    criteria = seg.get("criteria")
    if criteria is not None:
        _validate_criteria(criteria, f"{key}.criteria", SEGMENT_CRITERIA, (), problems)
        steps = [c for c in _STEP_CRITERIA if isinstance(criteria, Mapping) and c in criteria]
        if steps and _is_number(to) and _is_number(level_before) and to == level_before:
            problems.append(Problem(f"{key}.to", to, f"equals the level before ({level_before}); "
                                    f"{', '.join(steps)} need a change of level"))
    return to


def _validate_criteria(value: object, key: str, numeric: tuple[str, ...], flags: tuple[str, ...],
                       problems: list[Problem]) -> None:
    if not isinstance(value, Mapping):
        problems.append(Problem(key, value, "must be a mapping of criterion name to "
                                            "{min: X, max: Y} (or true/false for yes/no criteria)"))
        return
    for name, limit in value.items():
        ckey = f"{key}.{name}"
        if name in flags:
            if not isinstance(limit, bool):
                problems.append(Problem(ckey, limit, "must be true or false"))
            continue
        if name not in numeric:
            allowed = list(numeric) + list(flags)
            problems.append(Problem(ckey, MISSING, _unknown_criterion(str(name), allowed)))
            continue
        if not isinstance(limit, Mapping) or not limit:
            problems.append(Problem(ckey, limit, "must be a mapping {min: X, max: Y} with at "
                                                 "least one of min and max"))
            continue
        for bound in limit:
            if bound not in ("min", "max"):
                problems.append(Problem(f"{ckey}.{bound}", MISSING,
                                        f"unknown bound{_suggest(bound, ['min', 'max'])}; use min or max"))
        for bound in ("min", "max"):
            if bound in limit:
                _check_number(limit[bound], f"{ckey}.{bound}", problems)
        lo, hi = limit.get("min"), limit.get("max")
        if _is_number(lo) and _is_number(hi) and lo > hi:
            problems.append(Problem(f"{ckey}.min", lo, f"must not exceed max ({hi})"))


def _unknown_criterion(name: str, allowed: list[str]) -> str:
    """Message for a criterion not allowed here, pointing at the other level when it exists there."""
    everywhere = {**{c: "a segment's criteria" for c in SEGMENT_CRITERIA},
                  **{c: "plan.criteria (whole run)" for c in (*RUN_CRITERIA, *RUN_FLAGS)}}
    close = difflib.get_close_matches(name, list(everywhere), n=1)
    guess = name if name in everywhere else (close[0] if close else None)
    if guess is not None and guess not in allowed:
        hint = f"did you mean '{guess}'? " if guess != name else ""
        return (f"not a criterion here ({hint}'{guess}' belongs under {everywhere[guess]}); "
                f"allowed here: {', '.join(allowed)}")
    return f"unknown criterion{_suggest(name, allowed)}; allowed: {', '.join(allowed)}"


def _unknown_keys(mapping: Mapping, allowed: tuple, key: str, problems: list[Problem]) -> None:
    for k in mapping:
        if k not in allowed:
            problems.append(Problem(f"{key}.{k}", MISSING,
                                    f"unknown key{_suggest(str(k), allowed)}; allowed: {', '.join(allowed)}"))


def _suggest(word: str, allowed) -> str:
    close = difflib.get_close_matches(str(word), list(allowed), n=1)
    return f" (did you mean '{close[0]}'?)" if close else ""


def _is_number(x: object) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def _check_number(x: object, key: str, problems: list[Problem], *, low: float | None = None,
                  low_open: bool = True) -> None:
    if not _is_number(x):
        problems.append(Problem(key, x, "must be a finite number"))
    elif low is not None and (x <= low if low_open else x < low):
        problems.append(Problem(key, x, f"must be {'>' if low_open else '>='} {low:g}"))


def _check_band(x: object, key: str, problems: list[Problem]) -> None:
    if not _is_number(x) or not 0.0 < x < 100.0:
        problems.append(Problem(key, x, "must be a percentage of the change between 0 and 100 "
                                        "(exclusive), e.g. 2 or 5"))


# --- the plan as a reference --------------------------------------------------------------

@dataclass(frozen=True)
class PlanSegment:
    name: str
    at: float            # reference time at which the blend starts, s
    r_from: float
    to: float
    blend_s: float
    hold_s: float
    settle_band: float   # fraction of the change
    criteria: dict

    @property
    def end(self) -> float:
        return self.at + self.blend_s + self.hold_s


def plan_segments(plan: Mapping) -> list[PlanSegment]:
    """The plan's segments with their start times; raises ValueError if the plan is invalid."""
    problems = validate_plan(plan)
    if problems:
        raise ValueError("invalid test plan:\n" + "\n".join(str(p) for p in problems))
    at = float(plan.get("lead_s", DEFAULT_LEAD_S))
    default_blend = float(plan.get("blend_s", DEFAULT_BLEND_S))
    default_band = float(plan.get("settle_band_pct", DEFAULT_SETTLE_BAND_PCT))
    level = float(plan["initial"])
    out = []
    for i, seg in enumerate(plan["segments"]):
        blend = float(seg.get("blend_s", default_blend))
        to = float(seg["to"])
        band = float(seg.get("settle_band_pct", default_band)) / 100.0
        out.append(PlanSegment(str(seg.get("name") or f"segment {i + 1}"), at, level, to, blend,
                               float(seg["hold_s"]), band, dict(seg.get("criteria") or {})))
        at += blend + float(seg["hold_s"])
        level = to
    return out


def plan_reference_spec(plan: Mapping) -> dict:
    """The ``levels`` reference spec that drives a run of the plan (used instead of ``reference:``)."""
    return {
        "kind": "levels",
        "initial": float(plan["initial"]),
        "blend_s": float(plan.get("blend_s", DEFAULT_BLEND_S)),
        "steps": [{"at": s.at, "to": s.to, "blend_s": s.blend_s} for s in plan_segments(plan)],
    }


def plan_duration(plan: Mapping) -> float:
    """Run length the plan needs: lead-in plus every segment's blend and hold, s."""
    segments = plan_segments(plan)
    return segments[-1].end if segments else float(plan.get("lead_s", DEFAULT_LEAD_S))


def session_plan(session: Session) -> dict | None:
    """The plan a session ran (from its config snapshot), or None. A plan given as a file path
    is read from that path as recorded; ValueError when it cannot be read or is invalid."""
    plan = session.config.get("plan")
    if plan is None:
        return None
    if isinstance(plan, (str, Path)):
        plan = load_plan(plan)
    problems = validate_plan(plan)
    if problems:
        raise ValueError("the recorded test plan is invalid:\n" + "\n".join(str(p) for p in problems))
    return dict(plan)


# --- evaluation (rigloop.analysis.verdicts) -----------------------------------------------

def evaluate_plan(plan: Mapping, session: Session):
    """Judge a recorded session against a plan's criteria, run by run; returns a
    :class:`~rigloop.analysis.verdicts.PlanResult` (see
    :func:`rigloop.analysis.verdicts.judge_plan`)."""
    from rigloop.analysis.verdicts import judge_plan

    return judge_plan(plan, session)
