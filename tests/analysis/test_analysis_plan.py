"""Test plans: schema validation, the reference they drive, and verdicts on recorded sessions."""

from __future__ import annotations

import copy
from pathlib import Path

import pytest
import yaml

from rigloop.analysis.plan import (
    evaluate_plan, load_plan, plan_duration, plan_reference_spec, plan_segments, validate_plan,
)
from rigloop.exit_codes import EXIT_PLAN_FAILED
from rigloop.analysis.session import load_session
from rigloop.control.reference import build_reference

from analysis_testdata import PLAN

PLANS = Path(__file__).resolve().parents[2] / "configs" / "plans"


def test_shipped_plans_are_valid_and_build_a_reference():
    for path in sorted(PLANS.glob("*.yaml")):
        plan = load_plan(path)
        assert validate_plan(plan) == [], path.name
        ref = build_reference(plan_reference_spec(plan))
        assert len(ref.transitions) == len(plan["segments"])
        assert plan_duration(plan) > plan_segments(plan)[-1].at


def test_plan_reference_spec_and_duration():
    spec = plan_reference_spec(PLAN)
    assert spec == {"kind": "levels", "initial": 1200.0, "blend_s": 0.5,
                    "steps": [{"at": 1.0, "to": 2400.0, "blend_s": 0.5},
                              {"at": 5.0, "to": 1600.0, "blend_s": 1.0}]}
    assert plan_duration(PLAN) == pytest.approx(1.0 + 0.5 + 3.5 + 1.0 + 3.0)
    assert EXIT_PLAN_FAILED == 4


def test_plan_file_may_wrap_the_plan_in_a_plan_key(tmp_path):
    (tmp_path / "p.yaml").write_text(yaml.safe_dump({"plan": PLAN}))
    assert load_plan(tmp_path / "p.yaml") == PLAN
    assert validate_plan("p.yaml", base_dir=tmp_path) == []


def test_a_missing_plan_file_is_a_problem_naming_the_key(tmp_path):
    [problem] = validate_plan("nope.yaml", key="plan", base_dir=tmp_path)
    assert problem.key == "plan" and "not found" in problem.message


def _with(change) -> dict:
    plan = copy.deepcopy(PLAN)
    change(plan)
    return plan


@pytest.mark.parametrize("change, key, words", [
    (lambda p: p.pop("initial"), "plan.initial", "missing"),
    (lambda p: p.update(initial="fast"), "plan.initial", "finite number"),
    (lambda p: p.update(initial=True), "plan.initial", "finite number"),
    (lambda p: p.update(segmens=[]), "plan.segmens", "did you mean 'segments'"),
    (lambda p: p.update(segments=[]), "plan.segments", "non-empty list"),
    (lambda p: p.update(lead_s=-1.0), "plan.lead_s", ">= 0"),
    (lambda p: p.update(settle_band_pct=150), "plan.settle_band_pct", "between 0 and 100"),
    (lambda p: p["segments"][0].pop("hold_s"), "plan.segments.0.hold_s", "missing"),
    (lambda p: p["segments"][1].update(blend_s=0), "plan.segments.1.blend_s", "> 0"),
    (lambda p: p["segments"][1].update(to=2400.0), "plan.segments.1.to", "need a change of level"),
    (lambda p: p["segments"][0]["criteria"].update(settle_time={"max": 1}),
     "plan.segments.0.criteria.settle_time", "did you mean 'settling_time_s'"),
    (lambda p: p["segments"][0]["criteria"].update(overshoot_pct={"maximum": 1}),
     "plan.segments.0.criteria.overshoot_pct.maximum", "use min or max"),
    (lambda p: p["segments"][0]["criteria"].update(overshoot_pct={"min": 5, "max": 1}),
     "plan.segments.0.criteria.overshoot_pct.min", "must not exceed max"),
    (lambda p: p["segments"][0]["criteria"].update(overshoot_pct=5),
     "plan.segments.0.criteria.overshoot_pct", "{min: X, max: Y}"),
    (lambda p: p["criteria"].update(no_trip="yes"), "plan.criteria.no_trip", "true or false"),
    (lambda p: p["criteria"].update(no_trip_s=True), "plan.criteria.no_trip_s", "did you mean 'no_trip'"),
    (lambda p: p["segments"][0]["criteria"].update(no_trip=True),
     "plan.segments.0.criteria.no_trip", "'no_trip' belongs under plan.criteria"),
    (lambda p: p["criteria"].update(settle_time={"max": 1}),
     "plan.criteria.settle_time", "did you mean 'settling_time_s'? 'settling_time_s' belongs under a segment"),
])
def test_validation_problems_name_the_key(change, key, words):
    problems = validate_plan(_with(change), key="plan")
    assert [p.key for p in problems] == [key], problems
    assert words in problems[0].message


def test_a_plan_that_is_not_a_mapping_is_one_problem():
    [problem] = validate_plan([1, 2], key="plan")
    assert problem.key == "plan" and "mapping" in problem.message


def test_plan_functions_refuse_an_invalid_plan_with_the_problems():
    with pytest.raises(ValueError, match="plan.initial"):
        plan_duration(_with(lambda p: p.pop("initial")))


def _plan_session(make_session, name, **options):
    spec = plan_reference_spec(PLAN)
    return load_session(make_session(name, reference=spec, duration_s=0.5 + plan_duration(PLAN),
                                     plan=PLAN, **options))


def test_a_good_session_passes_every_criterion(make_session):
    s = _plan_session(make_session, "good", zeta=0.9, omega=12.0)
    result = evaluate_plan(PLAN, s)
    assert result.passed, [c.message for c in result.failed]
    names = [(c.segment, c.name) for c in result.criteria]
    assert ("step up", "completed") in names and ("step up", "settling_time_s") in names
    assert (None, "no_trip") in names and (None, "rms_error") in names
    d = result.as_dict()
    assert d["passed"] is True and d["failed"] == 0 and len(d["criteria"]) == len(result.criteria)


def test_an_underdamped_session_fails_and_names_the_criterion(make_session):
    s = _plan_session(make_session, "bad", zeta=0.2, omega=12.0)
    result = evaluate_plan(PLAN, s)
    assert not result.passed
    failed = {(c.segment, c.name) for c in result.failed}
    assert ("step up", "overshoot_pct") in failed
    msg = next(c.message for c in result.failed if c.name == "overshoot_pct")
    assert "above the maximum 5 %" in msg


def test_a_tripped_session_fails_no_trip_and_the_unfinished_segment(make_session):
    s = _plan_session(make_session, "tripped", zeta=0.9, omega=12.0, trip_at=6.0)
    result = evaluate_plan(PLAN, s)
    failed = {(c.segment, c.name): c for c in result.failed}
    assert (None, "no_trip") in failed and "tripped" in failed[(None, "no_trip")].message
    assert ("step down", "completed") in failed
    assert "not completed" in failed[("step down", "completed")].message
    assert ("step down", "settling_time_s") in failed
    assert ("step up", "completed") not in failed


def test_a_wider_settling_band_gives_an_earlier_settling_time(make_session):
    s = _plan_session(make_session, "band", zeta=0.45, omega=8.0)
    narrow = evaluate_plan(PLAN, s)
    wide = evaluate_plan({**PLAN, "settle_band_pct": 10.0}, s)

    def settle(result):
        return next(c.value for c in result.criteria
                    if c.segment == "step up" and c.name == "settling_time_s")
    assert settle(wide) < settle(narrow)


def test_nan_values_fail_with_a_reason(make_session):
    plan = _with(lambda p: p["segments"][0]["criteria"].update(settling_time_s={"max": 9.0}))
    s = _plan_session(make_session, "slow", zeta=1.0, omega=0.8)      # far too slow to settle
    result = evaluate_plan(plan, s)
    c = next(c for c in result.criteria if c.segment == "step up" and c.name == "settling_time_s")
    assert not c.passed and "not settled within the segment (band ±2 % of the change)" in c.message
    assert c.as_dict()["value"] is None
