"""`rigloop report`: text, JSON, comparisons and figures from recorded sessions."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from rigloop.analysis.plan import plan_duration, plan_reference_spec
from rigloop.analysis.report import analyse, fmt
from rigloop.analysis.session import load_session
from rigloop.cli import main

from analysis_testdata import PLAN

REQUIRED = ("outcome", "samples", "rms_error", "iae", "max_abs_error", "transitions")


def run_report(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(["report", *map(str, argv)])
    out, err = capsys.readouterr()
    return code, out, err


def _json(capsys, *argv) -> dict:
    code, out, err = run_report(capsys, *argv, "--json")
    assert code == 0, err
    return json.loads(out)


def test_json_has_the_required_keys_and_matches_numpy_on_samples_csv(make_session, capsys):
    folder = make_session(noise=5.0)
    data = _json(capsys, folder)
    for key in REQUIRED:
        assert key in data
    for tr in data["transitions"]:
        assert {"rise_time_s", "settling_time_s", "overshoot_pct"} <= set(tr)

    # independent computation: pandas reads samples.csv, numpy does the arithmetic
    rows = pd.read_csv(folder / "samples.csv")
    run = rows[rows["state"] == "running"]
    t, e = run["t"].to_numpy(), run["e"].to_numpy()
    assert data["samples"] == len(rows) and data["samples_running"] == len(run)
    assert data["rms_error"] == pytest.approx(np.sqrt(np.mean(e**2)), rel=1e-12)
    assert data["iae"] == pytest.approx(np.sum((np.abs(e[1:]) + np.abs(e[:-1])) / 2 * np.diff(t)), rel=1e-12)
    assert data["ise"] == pytest.approx(np.sum((e[1:]**2 + e[:-1]**2) / 2 * np.diff(t)), rel=1e-12)
    assert data["max_abs_error"] == pytest.approx(np.max(np.abs(e)), rel=1e-12)
    u = run["u"].to_numpy()
    assert data["u_total_variation"] == pytest.approx(np.sum(np.abs(np.diff(u))), rel=1e-12)
    assert data["f_hat_min"] == pytest.approx(run["f_hat"].min())   # pandas skips NaN
    assert data["outcome"] == "completed" and data["clean_end"] is True
    assert data["lost_samples"] == 2 and data["rejected_frames_total"] == 4


def test_transitions_follow_the_reference_from_the_first_running_row(make_session, capsys):
    data = _json(capsys, make_session(t_arm=0.5))
    trs = data["transitions"]
    assert [(tr["r_from"], tr["r_to"]) for tr in trs] == [(1200.0, 2400.0), (2400.0, 1600.0)]
    # the reference's steps are at 1.0 s and 5.0 s of reference time, which starts at arm (0.5 s)
    assert [tr["t_start"] for tr in trs] == pytest.approx([1.5, 5.5])
    assert trs[0]["t_end"] == pytest.approx(5.5) and trs[1]["t_end"] == pytest.approx(10.0)
    assert all(math.isfinite(tr["settling_time_s"]) for tr in trs)


def test_setpoint_events_make_transitions_and_cut_the_profile(make_session, capsys):
    data = _json(capsys, make_session(setpoints=[(3.0, 2000.0, 0.5)]))
    trs = data["transitions"]
    # step 1 (1.5 s) then the setpoint at 3.0 s replaces the rest of the profile (step 2 at 5.5 s)
    assert [(tr["source"], tr["t_start"], tr["r_to"]) for tr in trs] == [
        ("reference", pytest.approx(1.5), 2400.0), ("setpoint", pytest.approx(3.0), 2000.0)]
    assert trs[1]["r_from"] == pytest.approx(2400.0, abs=1e-6)


def test_text_report_shows_tables_trips_and_units(make_session, capsys):
    code, out, _ = run_report(capsys, make_session(zeta=0.3, trip_at=8.0))
    assert code == 0
    assert "Transitions of speed_rpm [rpm]" in out and "settle s" in out
    assert "RMS error" in out and " rpm·s" in out
    assert "Trips (1)" in out and "limit" in out and "value" in out and "2000" in out
    assert "outcome  tripped" in out


def test_a_crashed_session_says_so_first_and_still_reports(make_session, capsys):
    folder = make_session(duration_s=6.0, cut_last_line=True)
    code, out, _ = run_report(capsys, folder)
    assert code == 0
    first_lines = out.splitlines()[:3]
    n = len(pd.read_csv(folder / "samples.csv", on_bad_lines="skip")) - 1   # the cut row is partial
    assert any(f"session ended without a clean stop (outcome: running) — metrics from the {n} rows"
               in line for line in first_lines), first_lines
    data = _json(capsys, folder)
    assert data["clean_end"] is False and data["outcome"] == "running"
    assert math.isfinite(data["rms_error"])


def test_two_sessions_are_compared_side_by_side(make_session, capsys):
    a = make_session("a", zeta=0.9)
    b = make_session("b", zeta=0.3)
    data = _json(capsys, a, b)
    assert set(data) == {"a", "b", "diff"}
    d = data["diff"]["rms_error"]
    assert d["b_minus_a"] == pytest.approx(data["b"]["rms_error"] - data["a"]["rms_error"])
    assert d["pct"] == pytest.approx(100 * d["b_minus_a"] / data["a"]["rms_error"])
    tr = data["diff"]["transitions"][0]["overshoot_pct"]
    assert tr["b_minus_a"] > 0                       # the lightly damped B overshoots more
    code, out, _ = run_report(capsys, a, b)
    assert code == 0 and "B − A" in out and "RMS error [rpm]" in out


def test_nan_becomes_null_in_json(make_session, capsys):
    folder = make_session(duration_s=2.0)
    rows = (folder / "samples.csv").read_text().splitlines(keepends=True)
    header = rows[0].rstrip("\n").split(",")
    col = header.index("latency_ms")
    for i in range(1, len(rows)):
        cells = rows[i].rstrip("\n").split(",")
        cells[col] = ""
        rows[i] = ",".join(cells) + "\n"
    (folder / "samples.csv").write_text("".join(rows))
    code, out, _ = run_report(capsys, folder, "--json")
    assert "NaN" not in out
    assert json.loads(out)["latency_ms_p99"] is None


def test_png_and_svg_figures_are_written(make_session, capsys, tmp_path):
    a = make_session("a", trip_at=8.0)
    b = make_session("b", zeta=0.4)
    png, svg, both = tmp_path / "a.png", tmp_path / "a.svg", tmp_path / "ab.png"
    code, out, _ = run_report(capsys, a, "--png", png, "--svg", svg)
    assert code == 0 and f"figure written: {png}" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 50_000
    assert "<svg" in svg.read_text()[:2000]
    assert "trip: limit" in svg.read_text()
    code, _, err = run_report(capsys, a, b, "--png", both, "--json")
    assert code == 0 and both.stat().st_size > 50_000 and "figure written" in err


def test_a_figure_into_a_missing_folder_is_a_clear_error(make_session, capsys, tmp_path):
    code, _, err = run_report(capsys, make_session(duration_s=1.0), "--png", tmp_path / "no" / "f.png")
    assert code == 2 and "cannot write the figure" in err and "Traceback" not in err


def test_a_missing_session_exits_2_with_a_message(capsys, tmp_path):
    code, out, err = run_report(capsys, tmp_path / "missing")
    assert code == 2 and out == ""
    assert "no such session folder" in err and "Traceback" not in err


def test_plan_verdicts_are_reported(make_session, capsys):
    spec = plan_reference_spec(PLAN)
    folder = make_session(reference=spec, duration_s=0.5 + plan_duration(PLAN), plan=PLAN,
                          zeta=0.2, omega=12.0)
    code, out, _ = run_report(capsys, folder)
    assert "Test plan 'fixture acceptance': FAILED (evaluated by this report)" in out
    assert "[FAIL] step up: overshoot_pct" in out
    data = _json(capsys, folder)
    assert data["plan"]["passed"] is False and data["plan_source"] == "evaluated"
    assert [tr["label"] for tr in data["transitions"]] == ["step up", "step down"]


def test_recorded_verdicts_are_shown_as_recorded(make_session, capsys):
    verdicts = {"name": "recorded plan", "passed": True, "failed": 0, "criteria": [
        {"segment": None, "name": "no_trip", "limit": True, "value": True, "passed": True,
         "message": "no trip (outcome: completed)"}]}
    code, out, _ = run_report(capsys, make_session(plan_verdicts=verdicts))
    assert "Test plan 'recorded plan': PASSED — 1 of 1 criteria met" in out


def test_analysis_of_a_session_without_running_rows(make_session):
    s = load_session(make_session(duration_s=1.0, t_arm=5.0))
    an = analyse(s)
    assert an.run.samples == 0 and an.segments == []
    assert any("running state" in n for n in an.notes)


@pytest.mark.parametrize("x, text", [(None, "n/a"), (math.nan, "n/a"), (1200.0, "1200"),
                                     (0.12345, "0.1235"), (267047.3, "267047"), (1.75e-6, "1.750e-06")])
def test_number_format(x, text):
    assert fmt(x) == text


def test_trips_from_events_keep_their_cause():
    """Trip events are written "<cause>: <message>" by the engine; a second trip (not the one in
    session.yaml) and an e-stop must come back with their causes, not as anonymous trips."""
    from types import SimpleNamespace

    from rigloop.analysis.report import session_trips
    from rigloop.analysis.session import SessionEvent

    first = {"cause": "limit", "t": 1.0, "channel": "speed_rpm", "value": 3400.0, "limit": 3300.0,
             "stop": "immediate", "message": "speed_rpm above its maximum"}
    events = [SessionEvent(t=1.0, wall_utc="", kind="trip", detail="limit: speed_rpm above its maximum",
                           value=3400.0, limit=3300.0),
              SessionEvent(t=6.0, wall_utc="", kind="trip", detail="stale-data: no fresh sample for 60 ms",
                           value=0.06, limit=0.05),
              SessionEvent(t=9.0, wall_utc="", kind="estop", detail="e-stop (gui)", value=None, limit=None)]
    trips = session_trips(SimpleNamespace(meta={"trip": first}, events=events))
    assert [(t["cause"], t["t"]) for t in trips] == [("limit", 1.0), ("stale-data", 6.0), ("e-stop", 9.0)]
    assert trips[1]["message"] == "no fresh sample for 60 ms"


def test_band_option_sets_the_stated_band_and_is_checked(make_session, capsys):
    folder = make_session(zeta=0.5)
    default = _json(capsys, folder)
    wide = _json(capsys, folder, "--band", "10")
    assert {t["band_stated_pct"] for t in default["transitions"]} == {2.0}
    assert {t["band_stated_pct"] for t in wide["transitions"]} == {10.0} and wide["band_pct"] == 10.0
    # an underdamped response enters a wider band earlier (or both never leave it)
    for a, b in zip(default["transitions"], wide["transitions"]):
        assert b["settling_time_s"] <= a["settling_time_s"]
    for bad in ("0", "100", "-3"):
        code, _, err = run_report(capsys, folder, "--band", bad)
        assert code == 2 and f"--band {float(bad):g}" in err and "percentage" in err


def test_text_says_band_below_the_noise_and_not_settled_in_words(make_session, capsys):
    # noise of 60 output units on changes of several hundred: the 2 % band is below the noise
    code, out, _ = run_report(capsys, make_session(noise=60.0))
    assert code == 0
    assert "* band below the noise: the stated band is narrower than 4× the noise" in out
    assert "Savitzky–Golay" in out
    slow = make_session("slow", zeta=1.0, omega=0.3)      # far too slow to settle in a segment
    code, out, _ = run_report(capsys, slow)
    table = out.split("Transitions of")[1].split("rise, settle")[0]
    assert "not settled" in table
