"""A session armed twice through the real engine (front-end requests, lockstep simulated fan),
reported run by run."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import yaml

from rigloop.analysis.plan import evaluate_plan
from rigloop.analysis.report import analyse
from rigloop.analysis.report_text import render_text
from rigloop.analysis.runs import count_arms, listing_words, session_runs
from rigloop.analysis.session import load_session
from rigloop.cli import main
from rigloop.config import load_config
from rigloop.engine.loop import Engine

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
ESTOP_AFTER_S = 4.0        # run 1: e-stopped after its first step has settled (before 6 s)
RUN_S = 6.0                # run 2: completes its duration (its first step at 2 s settles)
RESET_AFTER_ROWS = 40      # tripped rows before the front end resets and arms again


class FrontEnd:
    """Plays the operator of the desktop app: e-stop in run 1, reset, arm, then quit when run 2
    is back to idle. Requests are queued from the engine's own subscriber calls (no sleeps)."""

    critical = False

    def __init__(self, engine: Engine):
        self.engine = engine
        self.first_t = None
        self.phase = "run1"
        self.tripped_rows = 0

    def on_tick(self, rec) -> None:
        if self.phase == "run1" and rec.state == "running":
            self.first_t = rec.t if self.first_t is None else self.first_t
            if rec.t - self.first_t >= ESTOP_AFTER_S:
                self.engine.request("estop", source="test")
                self.phase = "tripped"
        elif self.phase == "tripped" and rec.state == "tripped":
            self.tripped_rows += 1
            if self.tripped_rows == RESET_AFTER_ROWS:
                self.engine.request("reset")
                self.engine.request("arm", source="test")
                self.phase = "run2"
        elif self.phase == "run2" and rec.state == "idle":
            self.engine.request("quit")
            self.phase = "done"

    def on_event(self, ev) -> None:
        pass

    def poll(self, now) -> None:
        pass


def _two_run_session(folder: Path, plan: dict | None = None) -> Path:
    sets = ["device.sim.clock=lockstep", "device.rate_hz=100", "device.watchdog_ms=100",
            "limits.stale_periods=10000"]            # a busy machine is not a dead link
    if plan is not None:
        plan_file = folder / "plan.yaml"
        plan_file.write_text(yaml.safe_dump(plan))
        sets.append(f"plan={plan_file}")
    cfg = load_config(CONFIGS / "demo_fan.yaml", sets)
    engine = Engine(cfg, out_dir=folder / "sessions", autostart=True, front_end="gui",
                    duration_s=RUN_S if plan is None else None, exit_after_trip=False,
                    end_when_done=False)
    engine.add_subscriber(FrontEnd(engine))
    engine.run()
    [session] = list((folder / "sessions").iterdir())
    return session


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory) -> Path:
    return _two_run_session(tmp_path_factory.mktemp("two_runs"))


@pytest.mark.slow
def test_each_run_is_found_with_how_it_ended(two_runs):
    session = load_session(two_runs)
    runs = session_runs(session)
    assert len(runs) == 2 == count_arms(two_runs)
    assert runs[0].ended.startswith("e-stop")
    assert "duration reached" in runs[1].ended
    assert runs[0].t_end < runs[1].t_start
    assert runs[1].duration_s == pytest.approx(RUN_S, abs=0.05)
    # the desktop app's past-sessions list: outcome and number of runs, from the files alone
    assert listing_words(two_runs) == f"{session.outcome} · 2 runs"


@pytest.mark.slow
def test_steps_are_measured_only_inside_their_run(two_runs):
    session = load_session(two_runs)
    an = analyse(session)
    runs = {r.index: r for r in an.runs}
    assert {seg.run for seg in an.segments} == {1, 2}
    for seg in an.segments:
        run = runs[seg.run]
        assert run.t_start <= seg.t_start and seg.t_end <= run.t_end + 1e-9
        # measured on the loop's own output: a modest overshoot and a small steady-state error,
        # not the spin-up of the next run or the coast-down after the e-stop
        assert seg.step.overshoot_pct < 10.0
        assert abs(seg.step.steady_state_error) < 50.0
    # the reference's step at 7 s of run 1 falls after the e-stop: not measured, and said so
    assert any("not running" in n for n in an.notes)
    # "N while running (T s)": the time spent running, not the span from the first to the last row
    t = session.samples["t"][session.active_mask()]
    assert an.run.samples == int(session.active_mask().sum())
    assert an.run.duration_s == pytest.approx(sum(r.duration_s for r in an.runs))
    assert an.run.duration_s < t[-1] - t[0] - 0.3


@pytest.mark.slow
def test_integrals_do_not_bridge_the_time_between_runs(two_runs):
    # IAE of the whole session = the sum of the runs' IAE (scipy's trapezoid on each run)
    from scipy.integrate import trapezoid

    session = load_session(two_runs)
    an = analyse(session)
    parts = []
    for run in an.runs:
        rows = run.running_rows(session)
        e = session.column("e", rows)
        ok = np.isfinite(e)
        parts.append(trapezoid(np.abs(e[ok]), session.samples["t"][rows][ok]))
    assert an.run.iae == pytest.approx(sum(parts), rel=1e-9)
    assert [m.iae for m in an.run_metrics] == pytest.approx(parts, rel=1e-9)


@pytest.mark.slow
def test_text_report_has_a_runs_table_and_run_n_reports_one_run(two_runs, capsys):
    assert main(["report", str(two_runs)]) == 0
    text = capsys.readouterr().out
    assert "Runs (each ARM … stop" in text and "in 2 runs" in text
    assert "run 1" in text and "run 2" in text and "all runs" in text
    assert main(["report", str(two_runs), "--run", "2", "--json"]) == 0
    import json

    data = json.loads(capsys.readouterr().out)
    assert data["runs_in_session"] == 2 and [r["index"] for r in data["runs"]] == [2]
    assert {t["run"] for t in data["transitions"]} == {2}
    assert data["trips"] == []                       # the e-stop belongs to run 1
    assert main(["report", str(two_runs), "--run", "3"]) == 2
    err = capsys.readouterr().err
    assert "--run 3" in err and "numbered 1 to 2" in err


@pytest.mark.slow
def test_the_figure_has_a_column_of_panels_per_run(two_runs, tmp_path):
    from rigloop.analysis.figures import session_figure

    fig = session_figure([analyse(load_session(two_runs))])
    titles = [ax.get_title() for ax in fig.axes if ax.get_title()]
    assert len(fig.axes) == 8 and titles[0].startswith("run 1 of 2") and titles[1].startswith("run 2")
    one = session_figure([analyse(load_session(two_runs), run=2)])
    assert len(one.axes) == 4


@pytest.mark.slow
def test_plan_verdicts_time_each_run_from_its_own_arm(tmp_path):
    # The plan is replayed on every arm; its verdicts and the report's transition table must
    # use the same origin (the run's first running row) and so the same segment start times.
    plan = {"name": "two runs", "initial": 1200.0, "lead_s": 2.0, "blend_s": 1.0,
            "settle_band_pct": 5.0,
            "segments": [{"name": "up", "to": 2000.0, "hold_s": 2.0,
                          "criteria": {"settling_time_s": {"max": 2.5}}}],
            "criteria": {"no_trip": True}}
    session = load_session(_two_run_session(tmp_path, plan))
    result = evaluate_plan(plan, session)
    covered = [c for c in result.criteria if c.name == "completed" and c.segment == "up"]
    assert [c.run for c in covered] == [1, 2]
    an = analyse(session)
    starts = {seg.run: seg.t_start for seg in an.segments}
    for c in covered:
        assert f"t = {starts[c.run]:.3f}" in c.message      # same origin as the table
    no_trip = {c.run: c.passed for c in result.criteria if c.name == "no_trip"}
    assert no_trip == {1: False, 2: True}                   # run 1 was e-stopped
    assert not result.passed
    text = render_text(an)
    assert "[FAIL] run 1, whole run" in text and "[pass] run 2, up" in text
