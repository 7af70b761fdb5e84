"""Every key of the schema: one valid value is accepted, one invalid value is reported by path.

The table below must cover the schema exactly (a test checks it), so a key added to the schema
without a validation test fails here.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from config_testdata import base, with_values

from rigloop.config import ConfigError, parse_config
from rigloop.config.rules import get
from rigloop.config.schema import SCHEMA, markdown_table

MOTOR = {"channels": [{"name": "position_rad", "unit": "rad"}],
         "actuator": {"name": "voltage", "min": -12.0, "max": 12.0, "safe": 0.0},
         "control": {"output": "position_rad", "law": "iPD", "alpha": 50.0, "kp": 225.0, "kd": 30.0}}
RAMP = {"reference": {"kind": "ramp", "initial": 1000.0, "rate_per_s": 100.0, "to": 2000.0}}
SINE = {"reference": {"kind": "sine", "initial": 1500.0, "amplitude": 100.0, "freq_hz": 0.5}}
CHIRP = {"reference": {"kind": "chirp", "initial": 1500.0, "amplitude": 100.0, "f0_hz": 0.1,
                       "f1_hz": 2.0, "duration_s": 10.0}}
TABLE = {"reference": {"kind": "table", "file": "profile.csv"}}
STEPS = {"reference": {"kind": "levels", "initial": 1000.0, "steps": [{"at": 1.0, "to": 1500.0}]}}
LIMIT_MAX = {"limits": {"speed_rpm": {"max": 3000.0}}}
LIMIT_MIN = {"limits": {"speed_rpm": {"min": 0.0}}}
MOTOR_SIM = {**MOTOR, "device.sim.plant": "motor"}
LOAD_STEP = {"device.sim.rig.load.steps": [{"at_s": 1.0, "torque_nm": 1e-3}]}
PLAN = {"name": "short", "initial": 1000.0, "segments": [{"to": 1500.0, "hold_s": 2.0}]}

# schema path: (concrete path, valid value, invalid value, context applied first)
CASES: dict[str, tuple[str, object, object, dict]] = {
    "rig": ("rig", "fan_2.b", "bench fan", {}),
    "device": ("device", {"link": "sim"}, "sim", {}),
    "device.link": ("device.link", "udp", "tcp", {}),
    "device.url": ("device.url", "sim://fan?clock=lockstep", "udp://127.0.0.1", {}),
    "device.rate_hz": ("device.rate_hz", 1000, 20001, {}),
    "device.watchdog_ms": ("device.watchdog_ms", 50, 5, {}),
    "device.pacing": ("device.pacing", "host", "timer", {}),
    "device.sim": ("device.sim", {"plant": "fan"}, ["fan"], {}),
    "device.sim.plant": ("device.sim.plant", "motor", "pump", MOTOR),
    "device.sim.clock": ("device.sim.clock", "lockstep", "fast", {}),
    "device.sim.noise": ("device.sim.noise", 0, -1, {}),
    "device.sim.seed": ("device.sim.seed", 7, -1, {}),
    "device.sim.params": ("device.sim.params", {"supply_v": 12.0}, {"bogus_param": 1.0}, {}),
    "device.sim.params_file": ("device.sim.params_file", "fan_params.yaml", "missing.yaml", {}),
    "device.sim.faults": ("device.sim.faults", ["drop:p=0.1"], ["explode:p=1"], {}),
    "device.sim.rig": ("device.sim.rig", {"dead_zone": 5.0}, {"gear_ratio": 10.0}, {}),
    "device.sim.rig.dead_zone": ("device.sim.rig.dead_zone", 8.0, 100.0, {}),
    "device.sim.rig.input_delay_s": ("device.sim.rig.input_delay_s", 0.02, 2.0, {}),
    "device.sim.rig.drive_sign": ("device.sim.rig.drive_sign", -1, 0, {}),
    "device.sim.rig.gear_ratio": ("device.sim.rig.gear_ratio", 20.0, 0, MOTOR_SIM),
    "device.sim.rig.backlash_rad": ("device.sim.rig.backlash_rad", 0.01, -0.01, MOTOR_SIM),
    "device.sim.rig.tach_pulses_per_rev": ("device.sim.rig.tach_pulses_per_rev", 2, 1.5, {}),
    "device.sim.rig.tach_timeout_s": ("device.sim.rig.tach_timeout_s", 0.1, 0, {}),
    "device.sim.rig.load": ("device.sim.rig.load", {"walk_nm": 1e-4}, {"ripple_nm": 0.01}, {}),
    "device.sim.rig.load.drift_nm": ("device.sim.rig.load.drift_nm", 5e-4, -1, {}),
    "device.sim.rig.load.drift_period_s": ("device.sim.rig.load.drift_period_s", 10.0, 0, {}),
    "device.sim.rig.load.walk_nm": ("device.sim.rig.load.walk_nm", 1e-4, "lots", {}),
    "device.sim.rig.load.steps": ("device.sim.rig.load.steps", [{"at_s": 1.0, "torque_nm": 1e-3}],
                                  {"at_s": 1.0}, {}),
    "device.sim.rig.load.steps[].at_s": ("device.sim.rig.load.steps.0.at_s", 2.0, -1, LOAD_STEP),
    "device.sim.rig.load.steps[].torque_nm": ("device.sim.rig.load.steps.0.torque_nm", -1e-3,
                                              None, LOAD_STEP),
    "device.sim.rig.load.ripple_nm": ("device.sim.rig.load.ripple_nm", 0.02, -0.02, MOTOR_SIM),
    "device.sim.rig.load.ripple_per_rev": ("device.sim.rig.load.ripple_per_rev", 2.0, 0, MOTOR_SIM),
    "device.sim.sensors": ("device.sim.sensors", {"speed_rpm": {"quantum": 5.0}},
                           {"rotor_rpm": {"quantum": 5.0}}, {}),
    "device.sim.sensors.<channel>": ("device.sim.sensors.speed_rpm", {"noise_std": 3.0},
                                     [3.0], {}),
    "device.sim.sensors.<channel>.noise_std": ("device.sim.sensors.speed_rpm.noise_std", 3.0,
                                               -1, {}),
    "device.sim.sensors.<channel>.relative_noise": (
        "device.sim.sensors.speed_rpm.relative_noise", 0.02, "2%", {}),
    "device.sim.sensors.<channel>.quantum": ("device.sim.sensors.speed_rpm.quantum", 5.0, -5, {}),
    "device.udp": ("device.udp", {"port": 5000}, 5000, {}),
    "device.udp.host": ("device.udp.host", "rig.local", "", {}),
    "device.udp.port": ("device.udp.port", 5000, 0, {}),
    "device.udp.local_host": ("device.udp.local_host", "0.0.0.0", 5, {}),
    "device.udp.local_port": ("device.udp.local_port", 40000, 70000, {}),
    "device.auth": ("device.auth", {"key_file": None}, "rig.key", {}),
    "device.auth.key_file": ("device.auth.key_file", "rig.key", "missing.key", {}),
    "device.serial": ("device.serial", {"baud": 115200}, "COM3", {}),
    "device.serial.port": ("device.serial.port", "COM3", "", {}),
    "device.serial.baud": ("device.serial.baud", 115200, 0, {}),
    "channels": ("channels", [{"name": "speed_rpm"}], [], {}),
    "channels[].name": ("channels.1.name", "temp_c", "2bad", {}),
    "channels[].unit": ("channels.1.unit", "mA", 5, {}),
    "channels[].scale": ("channels.1.scale", 0.001, 0, {}),
    "channels[].offset": ("channels.1.offset", -1.5, "zero", {}),
    "channels[].resolution": ("channels.1.resolution", 0.001, -0.001, {}),
    "actuator": ("actuator", {"min": 0.0, "max": 50.0, "safe": 0.0}, 5, {}),
    "actuator.name": ("actuator.name", "pwm", "pwm duty", {}),
    "actuator.unit": ("actuator.unit", "", 3, {}),
    "actuator.min": ("actuator.min", 5.0, "low", {"actuator.safe": 20.0}),
    "actuator.max": ("actuator.max", 80.0, "high", {}),
    "actuator.safe": ("actuator.safe", 5.0, None, {}),
    "actuator.slew_per_s": ("actuator.slew_per_s", 100.0, 0, {}),
    "control": ("control", {"output": "current_a", "alpha": -2.0}, "iP", {}),
    "control.output": ("control.output", "current_a", "voltage", {}),
    "control.law": ("control.law", "iPI", "ip", {}),
    "control.order": ("control.order", 1, 3, {}),
    "control.alpha": ("control.alpha", -12.5, 0, {}),
    "control.kp": ("control.kp", 0.5, -1, {}),
    "control.ki": ("control.ki", 1.0, -1, {"control.law": "iPI"}),
    "control.kd": ("control.kd", 0.0, "none", {}),
    "control.anti_windup": ("control.anti_windup", "back-calculation", "clamp", {}),
    "control.pid_u0": ("control.pid_u0", 10.0, [1], {}),
    "control.estimator": ("control.estimator", {"kind": "averaging"}, "algebraic", {}),
    "control.estimator.kind": ("control.estimator.kind", "one-step", "observer", {}),
    "control.estimator.window_s": ("control.estimator.window_s", 0.2, 0.001, {}),
    "control.derivative_window_s": ("control.derivative_window_s", 0.05, 0.001, {}),
    "control.quantization_band": ("control.quantization_band", 2.0, -1, {}),
    "control.input_delay_s": ("control.input_delay_s", 0.03, -0.01, {}),
    "reference": ("reference", {"kind": "levels", "initial": 500.0}, 5, {}),
    "reference.kind": ("reference.kind", "sine", "square",
                       {"reference": {"amplitude": 100.0, "freq_hz": 0.5}}),
    "reference.initial": ("reference.initial", 800.0, "x", {}),
    "reference.blend_s": ("reference.blend_s", 0.5, 0, {}),
    "reference.steps": ("reference.steps", [{"at": 1.0, "to": 1500.0}], {"at": 1.0}, {}),
    "reference.steps[].at": ("reference.steps.0.at", 2.0, -1, STEPS),
    "reference.steps[].to": ("reference.steps.0.to", 1800.0, None, STEPS),
    "reference.steps[].blend_s": ("reference.steps.0.blend_s", 0.3, 0, STEPS),
    "reference.start_s": ("reference.start_s", 1.0, -1, RAMP),
    "reference.rate_per_s": ("reference.rate_per_s", 50.0, -50.0, RAMP),
    "reference.to": ("reference.to", 2500.0, "far", RAMP),
    "reference.amplitude": ("reference.amplitude", 50.0, 0, SINE),
    "reference.freq_hz": ("reference.freq_hz", 1.0, 60.0, SINE),
    "reference.f0_hz": ("reference.f0_hz", 0.0, -1, CHIRP),
    "reference.f1_hz": ("reference.f1_hz", 3.0, 50.0, CHIRP),
    "reference.duration_s": ("reference.duration_s", 5.0, 0, CHIRP),
    "reference.file": ("reference.file", "profile.csv", "missing.csv", TABLE),
    "limits": ("limits", {"speed_rpm": {"max": 3000.0}}, [1], {}),
    "limits.<channel>": ("limits.current_a", {"max": 1.5}, {}, {}),
    "limits.<channel>.min": ("limits.speed_rpm.min", 0.0, "low", LIMIT_MAX),
    "limits.<channel>.max": ("limits.speed_rpm.max", 3000.0, -5.0, LIMIT_MIN),
    "limits.<channel>.rate_max": ("limits.speed_rpm.rate_max", 5000.0, 0, LIMIT_MAX),
    "limits.<channel>.frozen_s": ("limits.speed_rpm.frozen_s", 0.5, -1, LIMIT_MAX),
    "limits.<channel>.stop": ("limits.speed_rpm.stop", "ramped", "brake", LIMIT_MAX),
    "limits.stale_periods": ("limits.stale_periods", 3, 0, {}),
    "limits.max_duration_s": ("limits.max_duration_s", 30.0, 0, {}),
    "limits.link_errors": ("limits.link_errors", {"max": 3}, 3, {}),
    "limits.link_errors.max": ("limits.link_errors.max", 0, -1, {}),
    "limits.link_errors.window_s": ("limits.link_errors.window_s", 2.0, 0, {}),
    "limits.overruns": ("limits.overruns", {"window_s": 0.5}, "often", {}),
    "limits.overruns.max": ("limits.overruns.max", 5, 1.5, {}),
    "limits.overruns.window_s": ("limits.overruns.window_s", 0.5, -1, {}),
    "recording": ("recording", {"dir": "out"}, "out", {}),
    "recording.dir": ("recording.dir", "out/sessions", 5, {}),
    "recording.flush_ms": ("recording.flush_ms", 50, 0, {}),
    "engine": ("engine", {"realtime": False}, "fast", {}),
    "engine.realtime": ("engine.realtime", False, "yes", {}),
    "duration_s": ("duration_s", None, 0, {}),
    "plan": ("plan", PLAN, 3, {}),
}

_FILE_KEYS = {"reference.file", "device.sim.params_file", "device.auth.key_file"}


@pytest.fixture
def rig_dir(tmp_path: Path) -> Path:
    (tmp_path / "profile.csv").write_text("t,r\n0,1000\n5,1500\n10,1200\n", encoding="utf-8")
    (tmp_path / "fan_params.yaml").write_text("supply_v: 12.0\n", encoding="utf-8")
    key = tmp_path / "rig.key"
    key.write_text("00112233445566778899aabbccddeeff\n", encoding="ascii")
    key.chmod(0o600)
    return tmp_path


def _mapping(context: dict, path: str, value: object) -> dict:
    mapping = with_values(base(), {k: v for k, v in context.items()})
    return with_values(mapping, {path: value})


def test_table_covers_every_schema_key():
    assert set(CASES) == {key.path for key in SCHEMA}


def test_every_schema_key_is_documented():
    text = (Path(__file__).parents[2] / "docs" / "config.md").read_text(encoding="utf-8")
    missing = [key.path for key in SCHEMA if f"`{key.path}`" not in text]
    assert missing == []


def test_docs_carry_the_generated_key_table_unchanged():
    text = (Path(__file__).parents[2] / "docs" / "config.md").read_text(encoding="utf-8")
    assert markdown_table() in text, ("docs/config.md is out of date: paste "
                                      "rigloop.config.schema.markdown_table() into it")


@pytest.mark.parametrize("schema_path", list(CASES))
def test_valid_value_is_accepted(schema_path, rig_dir):
    path, valid, _, context = CASES[schema_path]
    cfg = parse_config(_mapping(context, path, valid), base_dir=rig_dir)
    if not isinstance(valid, (dict, list)) and path not in _FILE_KEYS:
        assert get(cfg.raw, path) == valid


@pytest.mark.parametrize("schema_path", list(CASES))
def test_invalid_value_is_reported_with_its_key_path(schema_path, rig_dir):
    path, _, invalid, context = CASES[schema_path]
    with pytest.raises(ConfigError) as caught:
        parse_config(_mapping(context, path, invalid), base_dir=rig_dir)
    keys = [p.key for p in caught.value.problems]
    assert any(k == path or k.startswith(path + ".") for k in keys), keys
    # The message says what is allowed (not just "invalid") and never dumps Python internals.
    text = str(caught.value)
    assert re.search(r"must|missing|unknown|not |needs|guards|below|leads|file|give|use", text), text
    assert "Traceback" not in text and "INVALID" not in text
