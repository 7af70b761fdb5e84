"""The bump test's suggestions on the geared arm, end to end through the engine (lockstep).

The scenario (configs/scenarios/geared_arm_backlash.yaml): a 20:1 gearbox with play, an encoder
of 1024 counts per turn on the output shaft, a weight whose torque changes sign at 0 rad. The
sequence a user follows: ``rigloop identify`` → paste the snippet → ``rigloop run`` with a test
plan of steps and ramps (configs/plans/arm_plan.yaml). Both the suggested iPD and the PID
baseline the same bump test suggests (SIMC rules, "Simple analytic rules for model reduction and
PID controller tuning", Journal of Process Control, 2003) run the plan. In the holds (the
reference still, from 0.5 s after it stopped moving):

* the iPD's actuator total variation is at most 3 times the PID's (a still output must not
  dither the actuator);
* its hunting — the range of encoder counts the arm visits after it first reaches the count it
  ends the hold at — is at most 2 counts.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from rigloop.analysis.identify.suggest import Suggestions, snippet_overrides
from rigloop.analysis.session import load_session
from rigloop.cli import main
from rigloop.plants.scenario import SCENARIO_DIR, Scenario

ARM = SCENARIO_DIR / "geared_arm_backlash.yaml"
PLAN = "plan=../plans/arm_plan.yaml"            # relative to the scenario's folder
LOCKSTEP = ["--set", "device.sim.clock=lockstep", "--set", "limits.stale_periods=250",
            "--set", "device.watchdog_ms=100"]
SETTLE_S = 0.5


def _sets(items):
    return [x for item in items for x in ("--set", item)]


def _run(tmp_path, name, overrides, capsys):
    out = tmp_path / name
    code = main(["run", str(ARM), *LOCKSTEP, *_sets([PLAN, *overrides]), "--set", f"recording.dir={out}"])
    err = capsys.readouterr().err
    [folder] = list(out.iterdir())
    return code, err, load_session(folder)


def _holds(session):
    """Masks of the running rows in each hold: the reference still, from SETTLE_S on."""
    s = session.samples
    t, ref, dref = s["t"], s["ref"], s["dref"]
    still = session.active_mask() & (dref == 0) & np.isfinite(ref)
    holds, i, n = [], 0, t.size
    while i < n:
        if not still[i]:
            i += 1
            continue
        j = i
        while j < n and still[j] and ref[j] == ref[i]:
            j += 1
        mask = np.zeros(n, bool)
        mask[i:j] = t[i:j] >= t[i] + SETTLE_S
        if mask.sum() > 50:
            holds.append(mask)
        i = j
    return holds


def _hunting_counts(y, q):
    counts = np.round(y / q).astype(int)
    first = int(np.flatnonzero(counts == counts[-1])[0])
    return int(np.ptp(counts[first:]))


@pytest.mark.slow
def test_the_suggested_ipd_runs_steps_and_ramps_on_the_geared_arm(tmp_path, capsys):
    code = main(["identify", str(ARM), *LOCKSTEP, "--json", "--record-dir", str(tmp_path / "bump")])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    sugg = Suggestions(**json.loads(captured.out)["suggestions"])
    assert sugg.law == "iPD"
    pid = ["control.law=PID", f"control.kp={sugg.pid_kp!r}", f"control.ki={sugg.pid_ki!r}",
           f"control.kd={sugg.pid_kd!r}", f"control.pid_u0={sugg.pid_u0!r}",
           f"control.estimator.window_s={sugg.window_s!r}"]
    runs = {"iPD": _run(tmp_path, "ipd", snippet_overrides(sugg), capsys),
            "PID": _run(tmp_path, "pid", pid, capsys)}
    code, err, ipd = runs["iPD"]
    assert code == 0, err                               # the plan passed: no trip, completed
    assert ipd.outcome == "completed" and not [e for e in ipd.events if e.kind == "trip"]
    q = Scenario(ARM).truth().resolution
    tv, hunting = {}, []
    for name, (_, _, session) in runs.items():
        holds = _holds(session)
        assert len(holds) >= 6, name                   # the lead-in and the six segments' holds
        u = session.samples["u"]
        tv[name] = sum(float(np.abs(np.diff(u[m])).sum()) for m in holds)
        if name == "iPD":
            hunting = [_hunting_counts(session.samples["y"][m], q) for m in holds]
    assert tv["iPD"] <= 3.0 * tv["PID"], tv
    assert max(hunting) <= 2, hunting
    assert math.isfinite(tv["PID"]) and tv["PID"] > 0
