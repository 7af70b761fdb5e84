"""Real-time scheduling is announced on the console and recorded (asked, obtained), and a config
key declines it."""

from __future__ import annotations

import pytest
import yaml

from engine_helpers import DEMO_FAN

pytestmark = pytest.mark.slow


def _run(tmp_path, capsys, *sets):
    from rigloop.cli import main

    out = tmp_path / "sessions"
    code = main(["run", str(DEMO_FAN), "--out", str(out), "--duration", "0.3", *sum((["--set", s] for s in sets), [])])
    console = capsys.readouterr().out
    meta = yaml.safe_load((next(out.iterdir()) / "session.yaml").read_text())
    return code, console, meta


def test_real_time_clock_asks_for_sched_fifo_and_says_what_it_got(tmp_path, capsys, monkeypatch):
    asked = []

    def fake_raise(realtime):                         # the test process keeps its own scheduling
        asked.append(realtime)
        return "scheduling: SCHED_FIFO refused (Operation not permitted); nice -10 obtained"

    monkeypatch.setattr("rigloop.engine.priority._raise", fake_raise)
    code, console, meta = _run(tmp_path, capsys)
    assert code == 0 and asked == [True]
    assert "[scheduling] scheduling: SCHED_FIFO refused" in console
    assert meta["scheduling"]["asked"] == "SCHED_FIFO" and meta["scheduling"]["obtained"] == "nice -10"
    assert meta["scheduling"]["result"].startswith("SCHED_FIFO refused")


def test_engine_realtime_false_declines_and_says_so(tmp_path, capsys, monkeypatch):
    asked = []
    monkeypatch.setattr("rigloop.engine.priority._raise", lambda realtime: asked.append(realtime))
    code, console, meta = _run(tmp_path, capsys, "engine.realtime=false")
    assert code == 0 and asked == []                  # not even the nice step
    assert "[scheduling]" in console and "engine.realtime: false" in console
    assert meta["scheduling"]["asked"] == "none" and meta["scheduling"]["obtained"] == "normal"


def test_lockstep_simulation_does_not_ask(tmp_path, capsys, monkeypatch):
    asked = []

    def fake_raise(realtime):
        asked.append(realtime)
        return "scheduling: SCHED_FIFO not attempted; nice -10 refused (test); running at normal priority"

    monkeypatch.setattr("rigloop.engine.priority._raise", fake_raise)
    code, console, meta = _run(tmp_path, capsys, "device.sim.clock=lockstep")
    assert code == 0 and asked == [] and meta["scheduling"]["asked"] == "none"
    assert meta["scheduling"]["obtained"] == "normal"
    assert "lockstep" in meta["scheduling"]["result"]


def test_an_engine_run_in_process_gives_its_priority_back(tmp_path, capsys):
    """An engine inside another process (a script, the tests) must not leave that process, or
    the children it starts later, at a raised priority that starves the machine."""
    import os

    before = (os.sched_getscheduler(0), os.sched_getparam(0).sched_priority,
              os.getpriority(os.PRIO_PROCESS, 0))
    code, console, meta = _run(tmp_path, capsys)
    assert code == 0 and meta["scheduling"]["asked"] == "SCHED_FIFO"
    after = (os.sched_getscheduler(0), os.sched_getparam(0).sched_priority,
             os.getpriority(os.PRIO_PROCESS, 0))
    assert after == before
