"""``--set KEY=VALUE``: scalars, nested keys, list items, YAML values, and bad paths."""

from __future__ import annotations

import pytest
import yaml
from config_testdata import base

from rigloop.config import ConfigError, apply_overrides, load_config


def test_scalar_nested_and_list_index():
    out = apply_overrides(base(), ["control.kp=6", "rig=other", "channels.1.unit=mA",
                                   "device.sim.clock=lockstep"])
    assert out["control"]["kp"] == 6
    assert out["rig"] == "other"
    assert out["channels"][1]["unit"] == "mA"
    assert out["device"] == {"sim": {"clock": "lockstep"}}     # created on the way


def test_values_are_read_as_yaml():
    out = apply_overrides(base(), ["duration_s=null", "device.sim.faults=[drop:p=0.1]",
                                   "limits.speed_rpm={max: 3000}", "control.alpha=2.5e1",
                                   "rig='on'", "device.url=udp://10.0.0.7:47800"])
    assert out["duration_s"] is None
    assert out["device"]["sim"]["faults"] == ["drop:p=0.1"]
    assert out["limits"]["speed_rpm"] == {"max": 3000}
    assert out["control"]["alpha"] == 25.0
    assert out["rig"] == "on"
    assert out["device"]["url"] == "udp://10.0.0.7:47800"


def test_the_input_is_not_changed():
    original = base()
    apply_overrides(original, ["control.kp=9", "channels.0.unit=x"])
    assert original == base()


@pytest.mark.parametrize("override, key, words", [
    ("channels.5.unit=V", "channels.5.unit", "has 2 item(s)"),
    ("channels.first.unit=V", "channels.first.unit", "item number"),
    ("rig.name=x", "rig.name", "has no key 'name'"),
    ("control.kp", "control.kp", "missing '='"),
    ("=3", "", "not a key path"),
    ("control..kp=3", "control..kp", "not a key path"),
    ("control.kp=[1, 2", "control.kp", "not a valid YAML value"),
    ("reference.steps.0.at=1", "reference.steps.0.at", "is not set"),
])
def test_bad_override_is_reported(override, key, words):
    with pytest.raises(ConfigError) as caught:
        apply_overrides(base(), [override])
    (problem,) = caught.value.problems
    assert problem.key == key and words in problem.message
    assert f"--set {override}" in str(caught.value)


def test_all_bad_overrides_at_once():
    with pytest.raises(ConfigError) as caught:
        apply_overrides(base(), ["a", "channels.9.name=x", "control.kp=2"])
    assert len(caught.value.problems) == 2


def test_misspelt_override_key_is_found_by_validation(write):
    path = write("rig.yaml", yaml.safe_dump(base()))
    with pytest.raises(ConfigError) as caught:
        load_config(path, ["control.kpp=3"])
    (line,) = caught.value.lines()
    assert "control.kpp: unknown key - did you mean 'kp'?" in line
    assert "(--set control.kpp=3)" in line


def test_overrides_apply_before_validation(write):
    path = write("rig.yaml", yaml.safe_dump(base()))
    cfg = load_config(path, ["control.law=iPD", "control.kd=4", "device.rate_hz=200"])
    assert (cfg.control.law, cfg.control.order, cfg.device.rate_hz) == ("iPD", 2, 200.0)
