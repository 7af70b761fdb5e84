"""Every trip cause, end to end: engine <-> simulated device (separate process, lockstep clock)
over UDP loopback with the real protocol. For each: the trip is decided on the first offending
sample, the STOP frame is the next frame the device receives, the recorded output goes safe,
and session.yaml names the cause."""

from __future__ import annotations

import math

import pytest

from engine_helpers import fan_config, run_engine

pytestmark = pytest.mark.slow

SAFE = 0.0   # the demo fan's actuator.safe


def _after_arm(rx):
    i = next(i for i, r in enumerate(rx) if r["type"] == "ARM")
    return rx[i + 1:]


def assert_stop_is_next_frame(rx, trip_seq: int, samples_follow: bool = True):
    """After the last COMMAND answering a sample before the trip, the device receives STOP."""
    frames = _after_arm(rx)
    first_stop = next(i for i, r in enumerate(frames) if r["type"] == "STOP")
    before = frames[:first_stop]
    assert all(r["type"] == "COMMAND" for r in before), [r["type"] for r in before][-5:]
    assert all(r["answers"] < trip_seq for r in before), "a COMMAND answered the tripping sample before STOP"
    # and nothing but safe commands follow
    after = [r for r in frames[first_stop + 1:] if r["type"] == "COMMAND"]
    assert all(r["value"] == SAFE for r in after)
    assert after or not samples_follow


def arm_t(s) -> float:
    """Device time (from the first sample) at which the run armed: fault times count from the
    first ARM the device accepts, and the engine arms after its idle samples (the noise floor)."""
    return float(s.events[s.events.kind == "armed"].t.iloc[0])


def trip_row(s, cause):
    """Index of the row of the sample that tripped (its state is the first 'tripped')."""
    tripped = s.samples.index[s.samples.state == "tripped"]
    assert len(tripped), "no tripped rows recorded"
    i = int(tripped[0])
    assert s.meta["outcome"] == "tripped"
    assert s.trip["cause"] == cause
    assert s.trip["t"] == pytest.approx(s.samples.t[i], abs=1e-6)
    return i


def test_channel_limit_trips_on_first_breaching_sample(tmp_path):
    cfg = fan_config(tmp_path, "limits.speed_rpm.max=1000")
    result, s, rx = run_engine(cfg, tmp_path)
    assert result.exit_code == 3
    i = trip_row(s, "limit")
    y = s.samples.speed_rpm
    assert y[i] > 1000 and (y[:i] <= 1000).all()        # the first breaching sample, not later
    assert s.trip["channel"] == "speed_rpm" and s.trip["limit"] == 1000
    assert s.trip["value"] == pytest.approx(y[i], rel=1e-6)
    assert (s.samples.u_cmd[i:] == SAFE).all()
    assert (s.samples.u[i + 1:] == SAFE).all()            # the device applied safe at once
    assert len(s.samples) > i + 5                         # rows keep coming after the trip
    assert_stop_is_next_frame(rx, int(s.samples.seq[i]))
    assert "trip" in set(s.events.kind)


def test_limit_with_ramped_stop_ramps_then_stops(tmp_path):
    cfg = fan_config(tmp_path, "limits.speed_rpm.max=2000", "limits.speed_rpm.stop=ramped")
    _, s, rx = run_engine(cfg, tmp_path)
    assert s.trip["cause"] == "limit" and s.trip["stop"] == "ramped"
    stopping = s.samples[s.samples.state == "stopping"]
    assert len(stopping) > 3
    u = stopping.u_cmd.to_numpy()
    assert (u[1:] <= u[:-1] + 1e-9).all()                 # monotone down at the slew limit
    slew = cfg.actuator.slew_per_s * cfg.device.period_s
    assert (u[:-1] - u[1:]).max() <= slew + 1e-6
    assert s.samples.u.iloc[-1] == SAFE
    assert any(r["type"] == "STOP" for r in rx)


def test_stale_data_when_device_goes_silent(tmp_path):
    cfg = fan_config(tmp_path, "device.sim.faults=['silent:at=3']")
    result, s, rx = run_engine(cfg, tmp_path)
    assert result.exit_code == 3
    assert s.meta["outcome"] == "tripped" and s.trip["cause"] == "stale-data"
    last_seq = int(s.samples.seq.iloc[-1])
    assert s.samples.t.iloc[-1] <= arm_t(s) + 3.0 + cfg.device.period_s + 1e-9
    assert_stop_is_next_frame(rx, last_seq + 1, samples_follow=False)


def test_crc_burst_trips_on_link_errors(tmp_path):
    # Half the samples arrive corrupted, so the lockstep device waits for answers that never
    # come; a generous stale limit makes sure the burst, not the silence, is what trips.
    cfg = fan_config(tmp_path, "device.sim.faults=['corrupt:p=0.5,at=3']", "limits.stale_periods=500")
    _, s, rx = run_engine(cfg, tmp_path)
    # decided between samples (when the burst is counted): the trip names the last good sample
    assert s.meta["outcome"] == "tripped" and s.trip["cause"] == "link-errors"
    assert s.meta["summary"]["rejected_frames"]["crc"] > cfg.limits.link_errors_max
    after = s.samples[s.samples.t > s.trip["t"]]
    assert len(after) and (after.state == "tripped").all() and (after.u_cmd == SAFE).all()
    assert (s.samples[s.samples.t <= s.trip["t"]].state != "tripped").all()
    assert_stop_is_next_frame(rx, int(after.seq.iloc[0]))


def test_nan_channel_trips_non_finite(tmp_path):
    cfg = fan_config(tmp_path, "device.sim.faults=['nan:channel=speed_rpm,at=3']")
    _, s, rx = run_engine(cfg, tmp_path)
    i = trip_row(s, "non-finite")
    assert math.isnan(s.samples.speed_rpm[i]) and not s.samples.speed_rpm[:i].isna().any()
    assert s.trip["channel"] == "speed_rpm"
    assert (s.samples.u[i + 1:] == SAFE).all()
    assert_stop_is_next_frame(rx, int(s.samples.seq[i]))


def test_frozen_channel_with_frozen_s_trips_once_the_command_moves(tmp_path):
    """limits.<channel>.frozen_s on a channel other than the output (the output's own frozen check
    is part of the plausibility checks, tests/engine/test_feedback_checks.py)."""
    cfg = fan_config(tmp_path, "device.sim.faults=['freeze:channel=current_a,at=3']",
                     "limits.current_a.frozen_s=0.2", "limits.plausibility.enabled=false")
    _, s, rx = run_engine(cfg, tmp_path)
    i = trip_row(s, "frozen-sensor")
    assert s.trip["channel"] == "current_a"
    # frozen_s after the command moved a quarter of the range from where it was when the value
    # froze: at the demo's step at 7 s at the latest (its slew and the law take a few tenths)
    assert 3.2 - 2 * cfg.device.period_s <= s.samples.t[i] <= 7.0 + 0.2 + 0.6
    assert (s.samples.u[i + 1:] == SAFE).all()
    assert_stop_is_next_frame(rx, int(s.samples.seq[i]))


def _top_acceleration_rpm_s() -> float:
    """The fan's largest acceleration: full duty at standstill, current at its quasi-static value
    (the plant model's own y' at u = 100 %)."""
    from rigloop.plants import make_plant

    plant = make_plant("fan")
    plant.reset()
    return plant.quasi_static_rate("speed_rpm", 1, 100.0)


def test_rate_limit_at_a_physical_limit_holds_on_noise(tmp_path):
    """2.5x the fan's top acceleration (about 4300 rpm/s, so ~10 700 rpm/s) on the nominal sensor
    noise at 500 Hz: the whole demo runs through (the raw-difference check tripped within 0.4 s)."""
    limit = 2.5 * _top_acceleration_rpm_s()
    assert 3000 < limit / 2.5 < 6000
    cfg = fan_config(tmp_path, f"limits.speed_rpm.rate_max={limit}")
    result, s, _ = run_engine(cfg, tmp_path, duration_s=8.0)
    assert result.exit_code == 0 and s.meta["outcome"] == "completed", s.trip
    assert "warning" not in set(s.events.kind)         # the limit is far above the noise


def test_spike_trips_rate_limit(tmp_path):
    limit = 2.5 * _top_acceleration_rpm_s()
    cfg = fan_config(tmp_path, "device.sim.faults=['spike:channel=speed_rpm,at=3,value=3200']",
                     f"limits.speed_rpm.rate_max={limit}")
    _, s, rx = run_engine(cfg, tmp_path)
    i = trip_row(s, "rate-limit")
    assert s.samples.speed_rpm[i] == pytest.approx(3200, rel=1e-6)   # on the spike's own sample
    assert abs(s.trip["value"]) > limit and s.trip["limit"] == pytest.approx(limit)
    assert_stop_is_next_frame(rx, int(s.samples.seq[i]))


def test_rate_limit_below_the_noise_is_warned_at_run_time(tmp_path):
    cfg = fan_config(tmp_path, "limits.speed_rpm.rate_max=5000")   # 5.2 sigma of the rate noise: below 6
    _, s, _ = run_engine(cfg, tmp_path, duration_s=0.5)
    warnings = s.events[s.events.kind == "warning"].detail.tolist()
    assert any("rate_max" in w and "noise" in w for w in warnings), warnings


def test_device_watchdog_trips(tmp_path):
    cfg = fan_config(tmp_path, "device.sim.faults=['deaf:at=3']")
    _, s, _ = run_engine(cfg, tmp_path)
    i = trip_row(s, "device-watchdog")
    # the device went safe by itself within watchdog_ms + one period of its last heard command
    assert s.samples.t[i] - (arm_t(s) + 3.0) <= cfg.device.watchdog_ms / 1000 + 3 * cfg.device.period_s
    assert s.samples.u[i] == SAFE
    assert "device_fault" in set(s.events.kind)


def test_max_duration_trips_with_ramped_stop(tmp_path):
    cfg = fan_config(tmp_path, "limits.max_duration_s=2", "duration_s=null")
    result, s, rx = run_engine(cfg, tmp_path)
    assert result.exit_code == 3
    assert s.trip["cause"] == "max-duration" and s.trip["stop"] == "ramped"
    assert s.samples.u.iloc[-1] == SAFE
    assert any(r["type"] == "STOP" for r in rx)


def test_device_that_ignores_stop_is_driven_safe_and_reported(tmp_path):
    cfg = fan_config(tmp_path, "limits.speed_rpm.max=1000", "device.sim.faults=['ignore-stop']")
    _, s, rx = run_engine(cfg, tmp_path)
    i = trip_row(s, "limit")
    # the device stayed armed (it ignored STOP) but the host's safe commands drove it safe
    assert (s.samples.status[i + 2:] & 1).all()           # ARMED bit still set
    assert (s.samples.u[i + 1:] == SAFE).all()
    warnings = s.events[s.events.kind == "warning"].detail
    assert any("did not latch STOP" in w for w in warnings)
