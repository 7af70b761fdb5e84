"""A session recorded by the real engine against the simulated fan (lockstep clock), reported."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import yaml

from rigloop.analysis.plan import evaluate_plan
from rigloop.analysis.report import analyse
from rigloop.analysis.session import load_session
from rigloop.cli import main

CONFIGS = Path(__file__).resolve().parents[2] / "configs"

SHORT_PLAN = {
    "name": "short fan check",
    "initial": 1200.0,
    "lead_s": 3.0,
    "blend_s": 1.0,
    "settle_band_pct": 5.0,
    "segments": [
        {"name": "up", "to": 2000.0, "hold_s": 2.0,
         "criteria": {"settling_time_s": {"max": 2.5}, "overshoot_pct": {"max": 8.0}}},
        {"name": "impossible", "to": 1500.0, "hold_s": 2.0,
         "criteria": {"settling_time_s": {"max": 0.01}}},         # cannot be met: blend is 1 s
    ],
    "criteria": {"no_trip": True, "completed": True},
}


@pytest.mark.slow
def test_engine_session_report_agrees_with_the_engine_summary(tmp_path, capsys):
    plan_file = tmp_path / "plan.yaml"
    plan_file.write_text(yaml.safe_dump(SHORT_PLAN))
    code = main(["run", str(CONFIGS / "demo_fan.yaml"), "--set", "device.sim.clock=lockstep",
                 "--set", "device.rate_hz=100", "--set", "device.watchdog_ms=100",
                 "--plan", str(plan_file), "--record-dir", str(tmp_path / "sessions"), "--quiet"])
    capsys.readouterr()
    assert code == 4, "completed with one failing criterion: rigloop run exits 4"
    [folder] = list((tmp_path / "sessions").iterdir())

    session = load_session(folder)
    assert session.clean_end and session.outcome == "completed" and session.warnings == []
    an = analyse(session)
    summary = session.summary
    # the engine accumulates its own error statistics while running; the report recomputes
    # them from samples.csv (written with 9 significant digits)
    assert an.run.samples == summary["running_samples"]
    assert an.run.rms_error == pytest.approx(summary["rms_error"], rel=1e-6)
    assert an.run.max_abs_error == pytest.approx(summary["max_abs_error"], rel=1e-6)
    assert [(s.label, s.r_from, s.r_to) for s in an.segments] == [
        ("up", 1200.0, 2000.0), ("impossible", 2000.0, 1500.0)]

    # the verdicts the engine recorded are the ones the report computes again
    assert an.plan_source == "recorded"
    again = evaluate_plan(session.config["plan"], session).as_dict()
    assert again == json.loads(json.dumps(an.plan))
    failed = [(c["segment"], c["name"]) for c in an.plan["criteria"] if not c["passed"]]
    assert failed == [("impossible", "settling_time_s")]
    up = next(c for c in an.plan["criteria"] if c["segment"] == "up" and c["name"] == "settling_time_s")
    assert up["passed"]
