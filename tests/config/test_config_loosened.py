"""Loosened protections: ``rigloop check`` prints a WARNING line naming the key; defaults don't."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml
from config_testdata import base, with_values

from rigloop.config import parse_config, warnings_of
from rigloop.config.loosened import LOOSENINGS, Loosening, loosened, switched_off

DEMO_FAN = Path(__file__).parents[2] / "configs" / "demo_fan.yaml"


def test_must_show_watchdog_of_a_minute_warns_by_name(run_cli):
    code, out, _ = run_cli("check", str(DEMO_FAN), "--set", "device.watchdog_ms=60000")
    assert code == 0
    lines = [ln for ln in out.splitlines() if ln.startswith("WARNING")]
    assert any("device.watchdog_ms" in ln and "holds its last command" in ln for ln in lines)


@pytest.mark.parametrize("values, key", [
    ({"device.watchdog_ms": 5000}, "device.watchdog_ms"),
    ({"limits.link_errors.max": 1000}, "limits.link_errors.max"),
    ({"limits.overruns.max": 100}, "limits.overruns.max"),          # 100 Hz x 1 s: every tick
    ({"limits.max_duration_s": 86400}, "limits.max_duration_s"),
    ({"limits.stale_periods": 500}, "limits.stale_periods"),
])
def test_each_loosened_protection_is_named(values, key):
    cfg = parse_config(with_values(base(), values))
    assert [k for _, k, _, _ in loosened(cfg)] == [key]
    assert any(w.label == key and w.warning for w in warnings_of(cfg))


@pytest.mark.parametrize("values", [
    {},                                                  # defaults at 100 Hz
    {"device.rate_hz": 1.0},                             # a slow thermal rig: 3 s watchdog, 5 s stale
    {"device.rate_hz": 20000.0, "device.watchdog_ms": 1.0},
    {"device.watchdog_ms": 1000, "limits.link_errors.max": 100, "limits.overruns.max": 99,
     "limits.max_duration_s": 28800},                    # at the thresholds: still fine
])
def test_defaults_and_values_at_the_thresholds_do_not_warn(values):
    assert loosened(parse_config(with_values(base(), values))) == []


def test_shipped_configs_do_not_loosen_anything(run_cli):
    for path in sorted((Path(__file__).parents[2] / "configs").glob("*.yaml")):
        code, out, _ = run_cli("check", str(path))
        warnings = [line for line in out.splitlines() if "WARNING" in line]
        if path.name == "template_udp.yaml":
            # a network device without a key (protocol 1.1 §14): the one warning a user must see
            # until the copy names its key file; nothing loosened
            warnings = [w for w in warnings if "link authentication" not in w]
        assert code == 0 and warnings == [], path


def test_other_commands_print_the_finding_as_config_warning(tmp_path, capsys):
    from rigloop.commands._common import load_config_or_report

    path = tmp_path / "rig.yaml"
    path.write_text(yaml.safe_dump(with_values(base(), {"limits.link_errors.max": 5000})))
    assert load_config_or_report(path, []) is not None
    assert "config warning: limits.link_errors.max:" in capsys.readouterr().err


def test_a_switched_off_check_is_one_table_entry(monkeypatch):
    """The mechanism other protections use: a key whose false/null/0 value switches a check off."""
    entry = switched_off("limits.link_errors.max", lambda cfg: cfg.limits.link_errors_max,
                         "link error trip off", "{key} = {value}: no trip on rejected frames")
    monkeypatch.setattr("rigloop.config.loosened.LOOSENINGS", [*LOOSENINGS, entry])
    cfg = parse_config(with_values(base(), {"limits.link_errors.max": 0}))
    assert [(k, v) for _, k, v, _ in loosened(cfg)] == [("limits.link_errors.max", 0)]
    assert isinstance(entry, Loosening)


def test_check_prints_the_expected_recording_size(run_cli, monkeypatch, tmp_path):
    """rows = rate x run length (+1); bytes per row from the recorder's own format."""
    from rigloop.engine import disk_budget

    sets = ("--set", f"recording.dir={tmp_path}", "--set", "duration_s=10", "--set", "device.rate_hz=100")
    code, out, _ = run_cli("check", str(DEMO_FAN), *sets)
    line = next(ln for ln in out.splitlines() if "recording size" in ln)
    assert code == 0 and "1001 rows x" in line and "(10 s at 100 Hz)" in line
    assert not line.startswith("WARNING")
    monkeypatch.setattr(disk_budget, "free_bytes", lambda folder: 1000)
    code, out, _ = run_cli("check", str(DEMO_FAN), *sets)
    line = next(ln for ln in out.splitlines() if "recording size" in ln)
    assert code == 0 and line.startswith("WARNING") and "would be refused" in line


def test_row_size_estimate_is_not_below_a_real_row():
    """The estimate errs on the large side: a row of the recorder's format with ordinary values
    is shorter."""
    from rigloop.engine.disk_budget import row_bytes
    from rigloop.engine.recorder import sample_row_format

    real = sample_row_format(4) % (12.345678, 6172, 1200.0, 0.0, 1198.75, -1.25, 41.5, 41.5, -350.2,
                                   "running", 1198.75, 0.62, 101.3, 24.8, 33, 0.0712, 18.4, 0)
    assert row_bytes(4) >= len(real.encode())
