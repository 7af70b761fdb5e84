"""Feedback plausibility end to end: engine <-> simulated device (separate process, lockstep clock,
the real protocol over UDP). The protections are on by default: the demo configs are used as
they ship, faults are injected in the device, and nothing may trip at rest or in normal tracking."""

from __future__ import annotations

import subprocess
import sys

import pytest
import yaml

from engine_helpers import DEMO_FAN, DEMO_MOTOR, REPO, Session, fan_config, run_engine
from test_trips import SAFE, assert_stop_is_next_frame


def trip_row(s, cause):
    """Index of the sample that tripped. The plausibility checks judge a running sample (they
    need its reference), so that row still says 'running'; every later row is tripped."""
    assert s.meta["outcome"] == "tripped" and s.trip["cause"] == cause, s.trip
    i = int(s.samples.index[(s.samples.t - s.trip["t"]).abs() < 1e-6][0])
    assert (s.samples.state[i + 1:] == "tripped").all()
    return i

pytestmark = pytest.mark.slow

TEMPLATES = {"template_serial.yaml": "fan", "template_udp.yaml": "motor"}


def test_frozen_speed_reading_trips_within_3_s_with_the_demo_config(tmp_path):
    """The reported reproduction, through the command line, demo config unchanged."""
    proc = subprocess.run(
        [sys.executable, "-m", "rigloop", "run", str(DEMO_FAN), "--set", "device.sim.clock=lockstep",
         "--set", 'device.sim.faults=["freeze:channel=speed_rpm,at=1.0"]',
         "--set", f"recording.dir={tmp_path / 'sessions'}"],
        capture_output=True, text=True, timeout=300, cwd=tmp_path)
    assert proc.returncode == 3, proc.stdout + proc.stderr
    assert "Traceback" not in proc.stderr
    folder = next((tmp_path / "sessions").iterdir())
    s = Session(folder)
    assert s.meta["outcome"] == "tripped" and s.trip["cause"] == "no-response"
    assert s.trip["channel"] == "speed_rpm"
    # device time of the freeze is 1.0 s after the device's first sample (t = 0 here)
    assert 1.0 < s.trip["t"] <= 1.0 + 3.0
    trips = s.events[s.events.kind == "trip"]
    assert len(trips) == 1 and trips.detail.iloc[0].startswith("no-response")
    assert (s.samples.u[s.samples.t > s.trip["t"] + 0.01] == SAFE).all()


def test_noise_floor_is_measured_before_arm_and_recorded(tmp_path):
    cfg = fan_config(tmp_path)
    result, s, _ = run_engine(cfg, tmp_path, duration_s=0.5)
    floor = s.meta["noise_floor"]["speed_rpm"]
    assert floor["samples"] >= 16
    # the simulated tach: std 8 rpm (nominal noise), 1 rpm steps (plants/fan.py); MAD estimate on
    # 64 samples has ~15 % standard error
    assert floor["std"] == pytest.approx(8.0, rel=0.5) and floor["resolution"] == 1.0
    assert floor["stated_std"] == 8.0
    idle = s.samples[s.samples.state == "idle"]
    assert len(idle) >= floor["samples"]            # the run armed only after the idle samples
    assert (idle.u == SAFE).all()


def test_rest_with_a_noise_free_sensor_runs_8_s_without_a_trip(tmp_path):
    cfg = fan_config(tmp_path, "device.sim.noise=0", "reference.initial=0", "reference.steps=[]")
    result, s, _ = run_engine(cfg, tmp_path, duration_s=8.0)
    assert result.exit_code == 0 and s.meta["outcome"] == "completed", s.trip
    running = s.samples[s.samples.state == "running"]
    assert running.t.iloc[-1] - running.t.iloc[0] >= 8.0 - 0.01
    assert (running.speed_rpm == 0.0).all()         # bit-identical the whole time: and no trip


@pytest.mark.parametrize("config", [DEMO_FAN, DEMO_MOTOR], ids=["demo_fan", "demo_motor"])
def test_demos_run_through_with_every_protection_on(tmp_path, config):
    cfg = fan_config(tmp_path, base=config)
    result, s, _ = run_engine(cfg, tmp_path)
    assert result.exit_code == 0 and s.meta["outcome"] == "completed", s.trip
    assert cfg.limits.plausibility.enabled and cfg.limits.plausibility.applied


@pytest.mark.parametrize("name", list(TEMPLATES))
def test_templates_on_the_simulated_rig_run_through(tmp_path, name):
    cfg = fan_config(tmp_path, "device.link=sim", "device.url=null", f"device.sim.plant={TEMPLATES[name]}",
                     base=REPO / "configs" / name)
    result, s, _ = run_engine(cfg, tmp_path)
    assert result.exit_code == 0 and s.meta["outcome"] == "completed", s.trip


@pytest.mark.parametrize("fault, sets", [
    ("reverse:channel=speed_rpm,at=3", ()),
    ("disconnect:channel=speed_rpm,at=3", ()),
    ("disconnect:channel=speed_rpm,at=3,value=4095", ("limits.speed_rpm.max=5000",)),  # the ADC rail
    ("slip:at=3,fraction=0.2", ()),
    # a stalled fan draws 2 A at full duty: the demo's current limit (1.5 A) trips first, which
    # is right; with it out of the way the plausibility check must still see the stall
    ("locked-rotor:at=3", ("limits.current_a.max=5",)),
], ids=["reversed", "disconnected-0", "disconnected-rail", "slipping", "locked-rotor"])
def test_sensor_and_drive_faults_trip_no_response(tmp_path, fault, sets):
    cfg = fan_config(tmp_path, f"device.sim.faults=['{fault}']", *sets)
    result, s, rx = run_engine(cfg, tmp_path)
    assert result.exit_code == 3
    i = trip_row(s, "no-response")
    assert 3.0 < s.samples.t[i] <= 3.0 + 3.0
    assert (s.samples.u[i + 1:] == SAFE).all()
    assert_stop_is_next_frame(rx, int(s.samples.seq[i]))


def test_locked_rotor_with_the_demo_limits_is_stopped_by_the_current_limit(tmp_path):
    cfg = fan_config(tmp_path, "device.sim.faults=['locked-rotor:at=3']")
    _, s, _ = run_engine(cfg, tmp_path)
    i = trip_row(s, "limit")
    assert s.trip["channel"] == "current_a" and s.samples.t[i] < 3.5


def test_locked_motor_trips_no_response(tmp_path):
    """The motor demo (position, m = 2): a locked shaft while the reference moves."""
    cfg = fan_config(tmp_path, "device.sim.faults=['locked-rotor:at=0.5']", "limits.current_a.min=-20",
                     "limits.current_a.max=20", base=DEMO_MOTOR)
    result, s, _ = run_engine(cfg, tmp_path)
    assert result.exit_code == 3
    trip_row(s, "no-response")


def test_device_side_clamp_trips_applied_mismatch(tmp_path):
    cfg = fan_config(tmp_path, "device.sim.faults=['device-clamp:at=3,value=30']")
    result, s, rx = run_engine(cfg, tmp_path)
    i = trip_row(s, "applied-mismatch")
    assert s.trip["value"] == pytest.approx(30.0) and s.trip["limit"] > 30.0
    clamped = s.samples.index[((s.samples.u - 30.0).abs() < 1e-6) & (s.samples.u_cmd > 30.5)]
    assert i == clamped[0] + 2                        # the third mismatching sample in a row
    assert_stop_is_next_frame(rx, int(s.samples.seq[i]))


def test_switched_off_checks_do_not_trip(tmp_path):
    """The explicit keys really switch the checks off (rigloop check warns about them)."""
    cfg = fan_config(tmp_path, "device.sim.faults=['device-clamp:at=3,value=99', 'freeze:channel=speed_rpm,at=18']",
                     "limits.plausibility.enabled=false", "limits.plausibility.applied=false")
    result, s, _ = run_engine(cfg, tmp_path)
    assert result.exit_code == 0, s.trip


def test_check_prints_the_response_time_and_warns_when_switched_off(tmp_path):
    def check(*sets):
        args = [sys.executable, "-m", "rigloop", "check", str(DEMO_FAN)]
        for item in sets:
            args += ["--set", item]
        return subprocess.run(args, capture_output=True, text=True, timeout=120).stdout

    out = check()
    line = next(ln for ln in out.splitlines() if "response time" in ln)
    # 5/Kp + window + 10 periods = 5/12 + 0.06 + 0.02 s (config/feedback_checks.py)
    assert "0.4967 s" in line and not line.startswith("WARNING")
    out = check("limits.plausibility.enabled=false", "limits.plausibility.applied=false")
    warned = [ln for ln in out.splitlines() if ln.startswith("WARNING")]
    assert any("plausibility" in ln for ln in warned) and any("applied" in ln for ln in warned)
    out = check("limits.speed_rpm.rate_max=2000")
    assert any(ln.startswith("WARNING") and "rate" in ln for ln in out.splitlines())


def test_session_yaml_is_plain_yaml(tmp_path):
    cfg = fan_config(tmp_path)
    result, _, _ = run_engine(cfg, tmp_path, duration_s=0.3)
    meta = yaml.safe_load((result.session_dir / "session.yaml").read_text())
    assert set(meta["noise_floor"]) == {"speed_rpm", "current_a", "airflow_m3h", "temp_c"}


SCENARIOS = sorted((REPO / "configs" / "scenarios").glob("*.yaml"))


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_scenario_rigs_track_and_rest_without_a_trip(tmp_path, path):
    """Rigs other than the demo fan (dead zone and delay, drifting and stepping load, friction,
    backlash, a pulse tach, a heavy flywheel): every protection on, as shipped and at rest with
    a noise-free sensor."""
    from rigloop.config import load_config

    base = ["device.sim.clock=lockstep", f"recording.dir={tmp_path / 'sessions'}"]
    cfg = load_config(path, base)
    assert cfg.limits.plausibility.enabled and cfg.limits.plausibility.applied
    result, s, _ = run_engine(cfg, tmp_path, rx_log=False)
    assert result.exit_code == 0, s.trip
    rest = load_config(path, [*base, 'reference={"kind": "levels", "initial": 0}', "device.sim.noise=0"])
    result, s, _ = run_engine(rest, tmp_path, duration_s=4.0, rx_log=False)
    assert result.exit_code == 0, s.trip


@pytest.mark.parametrize("name", ["motor_speed_coulomb", "geared_arm_backlash"])
def test_locked_rotor_on_rigs_with_imperfections_trips_no_response(tmp_path, name):
    """Friction, backlash and a gear between the rotor and the reading: a locked rotor is still
    seen (current limits lifted so that the plausibility check, not the current, decides)."""
    from rigloop.config import load_config

    path = REPO / "configs" / "scenarios" / f"{name}.yaml"
    base = load_config(path)
    lifted = [f"limits.{n}.{side}={v}" for n in base.limits.channels if n.startswith("current")
              for side, v in (("min", -1000), ("max", 1000))]
    cfg = load_config(path, ["device.sim.clock=lockstep", f"recording.dir={tmp_path / 'sessions'}",
                             "device.sim.faults=['locked-rotor:at=1']", *lifted])
    result, s, _ = run_engine(cfg, tmp_path, rx_log=False)
    assert result.exit_code == 3
    trip_row(s, "no-response")
