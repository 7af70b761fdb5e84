"""What `rigloop run --plan` prints: verdicts as sentences, and a whole-run RMS that is the
run summary's."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from rigloop.analysis.session import load_session
from rigloop.cli import main

CONFIGS = Path(__file__).resolve().parents[2] / "configs"


@pytest.mark.slow
def test_run_with_the_fan_plan_prints_sentences_and_the_summary_rms(tmp_path, capsys):
    code = main(["run", str(CONFIGS / "demo_fan.yaml"), "--plan",
                 str(CONFIGS / "plans" / "fan_plan.yaml"), "--set", "device.sim.clock=lockstep",
                 "--set", "limits.stale_periods=10000",       # a busy machine is not a dead link
                 "--out", str(tmp_path), "--quiet"])
    out = capsys.readouterr().out
    assert code in (0, 4), out
    # no Python dict or bool spelled out: "{'max': 2.5}", "(limit True)"
    assert not re.search(r"[{}]|\(limit |\bTrue\b|\bFalse\b", out), out
    assert "Test plan 'fan acceptance':" in out
    assert re.search(r"\[pass\] step up: settling_time_s = [0-9.]+ s, at most 2.5 s", out), out

    [folder] = list(tmp_path.iterdir())
    session = load_session(folder)
    summary_rms = session.summary["rms_error"]
    verdict = next(c for c in session.meta["plan"]["criteria"]
                   if c["segment"] is None and c["name"] == "rms_error")
    # the same span (every running row, lead-in included): the same number, and both outputs say so
    assert verdict["value"] == pytest.approx(summary_rms, rel=1e-6)
    assert "lead-in included" in verdict["message"]
    assert "(all running rows, lead-in included)" in out
