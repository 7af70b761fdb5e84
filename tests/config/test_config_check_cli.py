"""``rigloop check``: exit codes, messages that name the key, no tracebacks, shipped configs."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml
from config_testdata import base, with_values

CONFIGS = Path(__file__).parents[2] / "configs"
SHIPPED = ["demo_fan.yaml", "demo_motor.yaml", "template_serial.yaml", "template_udp.yaml"]


@pytest.mark.parametrize("name", SHIPPED)
def test_shipped_configs_pass_without_warnings(run_cli, name):
    code, out, err = run_cli("check", str(CONFIGS / name))
    assert code == 0, err
    assert out.startswith(f"{CONFIGS / name}: valid")
    if name == "template_udp.yaml":
        # a device on the network without a key: the one warning is the link's (protocol.md §14)
        warnings = [line for line in out.splitlines() if line.startswith("WARNING")]
        assert "1 warning" in out and len(warnings) == 1 and "link authentication" in warnings[0]
    else:
        assert "no warnings" in out and "WARNING" not in out
    assert err == ""


def test_check_warns_for_a_network_device_without_a_key_and_not_with_one(run_cli, tmp_path):
    text = (CONFIGS / "template_udp.yaml").read_text(encoding="utf-8")
    key = tmp_path / "rig.key"
    key.write_text("00112233445566778899aabbccddeeff\n", encoding="ascii")
    key.chmod(0o600)
    keyed = tmp_path / "keyed.yaml"
    keyed.write_text(text.replace("  # auth:\n  #   key_file: rig.key", f"  auth:\n    key_file: {key}"),
                     encoding="utf-8")
    code, out, err = run_cli("check", str(keyed))
    assert code == 0, err
    assert "no warnings" in out and "HMAC-SHA-256/64" in out
    key.chmod(0o644)
    code, out, err = run_cli("check", str(keyed))
    assert code == 2 and "device.auth.key_file" in err and f"chmod 600 {key}" in err
    assert "Traceback" not in err


def test_demo_configs_are_what_they_say(run_cli):
    from rigloop.config import load_config

    fan = load_config(CONFIGS / "demo_fan.yaml")
    assert (fan.rig, fan.device.link, fan.device.sim.plant, fan.device.sim.clock) == \
        ("bench-fan", "sim", "fan", "realtime")
    assert (fan.device.rate_hz, fan.control.law, fan.control.output) == (500.0, "iP", "speed_rpm")
    assert fan.control.estimator.kind == "algebraic" and len(fan.reference["steps"]) >= 3
    assert fan.channel_names == ("speed_rpm", "current_a", "airflow_m3h", "temp_c")
    motor = load_config(CONFIGS / "demo_motor.yaml")
    assert (motor.rig, motor.device.sim.plant, motor.control.law, motor.control.order) == \
        ("bench-motor", "motor", "iPD", 2)
    assert motor.control.output == "position_rad"
    assert (motor.actuator.min, motor.actuator.max) == (-12.0, 12.0)
    assert load_config(CONFIGS / "template_serial.yaml").device.link == "serial"
    assert load_config(CONFIGS / "template_udp.yaml").device.link == "udp"


def test_check_prints_the_derived_quantities(run_cli):
    code, out, _ = run_cli("check", str(CONFIGS / "demo_fan.yaml"))
    assert code == 0
    for label in ("loop period", "estimator window", "closed-loop time constant",
                  "link device->host", "link host->device", "device watchdog"):
        assert label in out
    assert "30 samples" in out and "0.08333 s" in out       # demo: 60 ms at 500 Hz; 1/Kp = 1/12 s


def _check_file(run_cli, write, text: str) -> tuple[int, str]:
    code, out, err = run_cli("check", str(write("rig.yaml", text)))
    assert "Traceback" not in out + err
    return code, err


def _yaml(mapping: dict) -> str:
    return yaml.safe_dump(mapping, sort_keys=False)


@pytest.mark.parametrize("values, key, words", [
    ({"control.kp": "fast"}, "control.kp", "must be a number"),                  # wrong type
    ({"device.rate_hz": True}, "device.rate_hz", "not true/false"),              # bool
    ({"device.rate_hz": 50000}, "device.rate_hz", "<= 20000"),                   # out of range
    ({"recording.flush_ms": 250}, "recording.flush_ms", "<= 100"),               # out of range
    ({"actuator.safe": 120.0}, "actuator.safe", "within actuator.min..max"),     # cross-field
    ({"control.law": "iPD", "control.order": 1}, "control.order", "needs order 2"),
])
def test_bad_values_exit_2_and_name_the_key(run_cli, write, values, key, words):
    code, err = _check_file(run_cli, write, _yaml(with_values(base(), values)))
    assert code == 2
    line = next(l for l in err.splitlines() if l.startswith(f"config error: {key}"))
    assert words in line and "rig.yaml, line" in line


def test_unknown_key_exits_2_with_suggestion(run_cli, write):
    mapping = base()
    mapping["control"]["alfa"] = mapping["control"].pop("alpha")
    code, err = _check_file(run_cli, write, _yaml(mapping))
    assert code == 2
    assert "config error: control.alfa: unknown key - did you mean 'alpha'?" in err
    assert "config error: control.alpha: missing" in err


def test_malformed_yaml_exits_2_with_line_and_column(run_cli, write):
    code, err = _check_file(run_cli, write, "rig: a\nchannels:\n  - {name: x\n")
    assert code == 2
    assert "YAML syntax error" in err and "line" in err and "column" in err


def test_missing_file_exits_2(run_cli, tmp_path):
    code, out, err = run_cli("check", str(tmp_path / "absent.yaml"))
    assert code == 2 and "not found" in err and "Traceback" not in err


def test_every_problem_is_listed_with_a_count(run_cli, write):
    code, err = _check_file(run_cli, write, _yaml(with_values(base(), {
        "control.kp": -1, "rig": "a b", "device.pacing": "timer"})))
    assert code == 2
    assert err.count("config error:") == 3 and "3 problems found in" in err


def test_set_overrides_on_the_command_line(run_cli):
    demo = str(CONFIGS / "demo_fan.yaml")
    code, out, _ = run_cli("check", demo, "--set", "control.kp=2", "--set", "channels.0.unit=rev/min")
    assert code == 0 and "0.5 s" in out                    # 1/kp with the new kp
    code, _, err = run_cli("check", demo, "--set", "channels.9.unit=V")
    assert code == 2 and "channels.9.unit" in err and "--set channels.9.unit=V" in err
    code, _, err = run_cli("check", demo, "--set", "control.kp=-3")
    assert code == 2 and "config error: control.kp = -3: must be a number >= 0 (--set control.kp=-3)" in err
    code, _, err = run_cli("check", demo, "--set", "control.kp")
    assert code == 2 and "missing '='" in err


def test_slow_baud_rate_shows_the_link_budget_warning(run_cli):
    code, out, _ = run_cli("check", str(CONFIGS / "template_serial.yaml"),
                           "--set", "device.serial.baud=57600")
    assert code == 0                                       # warnings do not fail the check
    # 200 Hz: 37 B up = 7400 B/s, 128 % of 5760 B/s; 18 B down = 3600 B/s, 62.5 %
    line = next(l for l in out.splitlines() if "link device->host" in l)
    assert line.startswith("WARNING") and "128 %" in line
    line = next(l for l in out.splitlines() if "link host->device" in l)
    assert not line.startswith("WARNING") and "62.5 %" in line
    assert "1 warning" in out


def test_device_url_on_the_command_line(run_cli):
    code, out, _ = run_cli("check", str(CONFIGS / "template_udp.yaml"),
                           "--set", "device.url=udp://10.0.0.9:5000")
    assert code == 0 and "udp://10.0.0.9:5000" in out
    code, _, err = run_cli("check", str(CONFIGS / "template_udp.yaml"),
                           "--set", "device.url=udp://10.0.0.9")
    assert code == 2 and "config error: device.url" in err


def test_config_argument_is_required(run_cli, capsys):
    with pytest.raises(SystemExit) as caught:
        run_cli("check")
    assert caught.value.code == 2
    assert "CONFIG" in capsys.readouterr().err


def test_load_config_or_report_prints_warnings_for_other_commands(write, capsys):
    from rigloop.commands._common import load_config_or_report

    cfg = load_config_or_report(write("rig.yaml", _yaml(base())), [])
    assert cfg is not None
    assert "config warning: output limits" in capsys.readouterr().err
    assert load_config_or_report(None, []) is None
    assert "no configuration file given" in capsys.readouterr().err
