"""Unit tests of the engine's parts: the state table, the supervisor, the telemetry ring, the
status block, the recorder and the flat-memory timing histogram."""

from __future__ import annotations

import math
import types

import numpy as np
import pytest
import yaml

from engine_helpers import fan_config
from rigloop.engine.records import EventRecord, TickRecord
from rigloop.engine.recorder import SessionRecorder, make_session_dir
from rigloop.engine.states import State, TransitionRefused, next_state
from rigloop.engine.status_block import StatusBlock
from rigloop.engine.supervisor import Supervisor
from rigloop.engine.telemetry import TelemetryRing
from rigloop.engine.timing import LogHistogram


def test_state_table_latches_trips_and_reset_never_restarts_motion():
    s = next_state(State.DISCONNECTED, "connected")
    assert s is State.IDLE
    s = next_state(s, "arm")
    assert s is State.RUNNING
    s = next_state(s, "trip")
    assert s is State.TRIPPED
    with pytest.raises(TransitionRefused, match="reset"):
        next_state(s, "arm")                      # must reset first
    assert next_state(s, "reset") is State.IDLE   # reset leads to idle, never to running
    assert next_state(State.RUNNING, "ramp_down") is State.STOPPING
    assert next_state(State.STOPPING, "ramped_out") is State.IDLE


def _sup(tmp_path, *sets):
    return Supervisor(fan_config(tmp_path, *sets))


def test_supervisor_limits_and_rates(tmp_path):
    sup = _sup(tmp_path, "limits.speed_rpm.rate_max=1000")
    ts = 0.002                                      # the demo's 500 Hz
    for k in range(6):                              # a straight line at 500 rpm/s: the LS slope is exact
        trip = sup.check_sample(k * ts, [1000.0 + 500.0 * k * ts, 0.1, 30.0, 30.0], True)
        assert trip is None
    for k in range(6, 12):                          # now 2500 rpm/s: trips once the slope sees it
        trip = sup.check_sample(k * ts, [1006.0 + 2500.0 * (k - 6) * ts, 0.1, 30.0, 30.0], True)
        if trip is not None:
            break
    assert trip.cause == "rate-limit" and trip.limit == 1000 and trip.value > 1000
    assert "above" not in trip.message and "changing faster" in trip.message
    trip = sup.check_sample(1.0, [3400.0, 0.1, 30.0, 30.0], True)
    assert trip.cause == "limit" and trip.limit == 3300.0 and trip.channel == "speed_rpm"
    assert trip.value == 3400.0 and "3400" not in trip.message and "3300" not in trip.message  # said once, in value/limit
    trip = sup.check_sample(1.002, [1000.0, math.nan, 30.0, 30.0], True)
    assert trip.cause == "non-finite" and trip.channel == "current_a"


def test_supervisor_rate_is_a_slope_not_a_difference(tmp_path):
    """Noise of std 8 rpm at 500 Hz: raw differences reach ~ 8*sqrt(2)*4/0.002 = 23 000 rpm/s; the
    six-sample least-squares slope keeps its noise at 8*||c|| = 956 rpm/s, so a limit of 10 000 rpm/s
    holds for 20 000 samples (rng noise, seeded)."""
    sup = _sup(tmp_path, "limits.speed_rpm.rate_max=10000")
    rng = np.random.default_rng(3)
    trips = [sup.check_sample(k * 0.002, [1500.0 + 8.0 * rng.standard_normal(), 0.1, 30.0, 30.0], True)
             for k in range(20000)]
    assert all(t is None for t in trips)
    raw = np.abs(np.diff(1500.0 + 8.0 * rng.standard_normal(20000))) / 0.002
    assert raw.max() > 10000                         # what the old raw-difference check tripped on


def test_supervisor_frozen_channel_needs_a_moving_command(tmp_path):
    sup = _sup(tmp_path, "limits.current_a.frozen_s=0.05")
    # at rest: the command stays at the safe value, the reading repeats exactly: never a trip
    trips = [sup.check_sample(k * 0.01, [0.0, 0.0, 1.0, 1.0], True) for k in range(100)]
    assert all(t is None for t in trips)
    sup.note_command(60.0, 1)                        # the command moved by 60 % of the range
    trips = [sup.check_sample(1.0 + k * 0.01, [0.0, 0.0, 1.0, 1.0], True) for k in range(10)]
    first = next(i for i, t in enumerate(trips) if t is not None)
    assert trips[first].cause == "frozen-sensor" and trips[first].channel == "current_a"
    # a second of rest before the command moved does not count: frozen_s (5 sample periods)
    # from the last sample before the command moved
    assert first == 4


def test_supervisor_frozen_channel_answering_within_frozen_s_after_a_long_rest(tmp_path):
    sup = _sup(tmp_path, "limits.current_a.frozen_s=0.05")
    for k in range(100):                             # a second at rest, the reading repeating
        assert sup.check_sample(k * 0.01, [0.0, 0.0, 1.0, 1.0], True) is None
    sup.note_command(60.0, 1)
    readings = [0.0, 0.0, 0.0, 0.2, 0.5, 0.9]        # current_a answers after 3 samples (< 5)
    assert all(sup.check_sample(1.0 + k * 0.01, [0.0, r, 1.0, 1.0], True) is None
               for k, r in enumerate(readings))


def test_supervisor_bursts_and_stale(tmp_path):
    sup = _sup(tmp_path)
    assert sup.check_link(0.0, 10, now=0.0) is None                 # 10 rejected: at the limit
    assert sup.check_link(0.0, 11, now=0.5).cause == "link-errors"  # 11 within 1 s
    sup2 = _sup(tmp_path)
    assert sup2.check_link(0.0, 10, now=0.0) is None
    assert sup2.check_link(0.0, 11, now=2.0) is None                # spread over 2 s: fine
    assert sup.check_stale(1.0, 0.049) is None
    assert sup.check_stale(1.0, 0.051).cause == "stale-data"


def test_telemetry_ring_wraps_and_reader_keeps_up():
    ring = TelemetryRing(3, 5, create=True)
    try:
        reader = TelemetryRing(0, 0, name=ring.name)
        for k in range(4):
            ring.write([k, 2 * k, 3 * k])
        cur, rows = reader.read_since(0)
        assert cur == 4 and rows[:, 0].tolist() == [0, 1, 2, 3]
        for k in range(4, 12):
            ring.write([k, 0, 0])
        cur, rows = reader.read_since(cur)
        # capacity 5: the oldest still intact rows are returned, in order
        assert cur == 12 and rows[:, 0].tolist() == [8, 9, 10, 11]
        reader.close()
    finally:
        ring.close()


def test_status_block_round_trip_and_nan_is_null():
    block = StatusBlock(create=True)
    try:
        assert block.read() is None
        block.write({"state": "running", "t": math.nan, "n": [1, 2]})
        other = StatusBlock(block.name)
        assert other.read() == {"state": "running", "t": None, "n": [1, 2]}
        other.close()
    finally:
        block.close()


def test_recorder_writes_while_running_and_closes_cleanly(tmp_path):
    cfg = fan_config(tmp_path)
    folder = make_session_dir(tmp_path / "s", cfg.rig)
    assert make_session_dir(tmp_path / "s", cfg.rig) != folder     # same second: a new folder
    rec = SessionRecorder(folder, cfg, device_url="sim://fan")
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "running" and meta["config"]["rig"] == cfg.rig
    for k in range(10):
        rec.on_tick(TickRecord(k * 0.01, k, 1.0, 0.0, 1.5, 0.5, 2.0, 2.0, math.nan, "running",
                               [1.5, 0.1, 3.0, 25.0], 33, 0.1, 50.0, 0))
    rec.on_event(EventRecord("param", "control.kp: 4 -> 5", t=0.05, value=5.0))
    rec.flush()
    text = (folder / "samples.csv").read_text().splitlines()
    assert len(text) == 11                                          # header + rows, already on disk
    assert text[0].split(",")[:9] == ["t", "seq", "ref", "dref", "y", "e", "u_cmd", "u", "f_hat"]
    rec.close(outcome="completed", stop_reason="duration reached", trip=None, summary={"samples": 10})
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "completed" and meta["ended_utc"]
    arr = np.genfromtxt(folder / "samples.csv", delimiter=",", names=True, dtype=None, encoding="utf-8")
    assert len(arr) == 10 and np.isnan(arr["f_hat"]).all()


def test_recorder_failure_trips_the_rig(tmp_path):
    """A critical subscriber that fails stops the rig instead of letting it run unrecorded."""
    from rigloop.engine.loop import Engine

    eng = Engine.__new__(Engine)
    trips = []
    eng.subscribers = []
    eng.t_last = 1.0
    eng._trip = trips.append
    broken = types.SimpleNamespace(critical=True)
    eng.subscribers.append(broken)
    eng._subscriber_failed(broken, OSError("disk full"))
    assert trips and trips[0].cause == "recorder-failed" and "disk full" in trips[0].message


def test_log_histogram_percentiles_within_resolution():
    rng = np.random.default_rng(1)
    x = rng.lognormal(mean=-8, sigma=0.5, size=20000)
    h = LogHistogram()
    for v in x:
        h.add(float(v))
    for p in (50, 99):
        assert h.percentile(p) == pytest.approx(np.percentile(x, p), rel=0.03)
    assert len(h.counts) == h.n_bins < 1000                         # flat memory whatever the count


def test_plain_data_is_strict_json_and_yaml():
    import json
    from pathlib import Path

    from rigloop.plain_data import plain

    data = {"a": math.nan, 1: (np.float64(2.5), np.int64(3), math.inf), "p": Path("/x"), "ok": True}
    out = plain(data)
    assert out == {"a": None, "1": [2.5, 3, None], "p": "/x", "ok": True}
    assert type(out["1"][1]) is int
    json.dumps(out, allow_nan=False)                 # would raise on NaN or numpy types
    assert yaml.safe_load(yaml.safe_dump(out)) == out
