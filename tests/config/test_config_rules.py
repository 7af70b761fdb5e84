"""Rules that tie keys together, defaults that depend on other keys, and the Config object."""

from __future__ import annotations

from pathlib import Path

import pytest
from config_testdata import base, with_values

from rigloop.config import ConfigError, load_config, parse_config


def problems(mapping: dict, base_dir: Path | None = None) -> dict[str, str]:
    """key -> messages of every problem, joined by " | " (fails the test if the mapping is valid)."""
    with pytest.raises(ConfigError) as caught:
        parse_config(mapping, base_dir=base_dir)
    found: dict[str, str] = {}
    for problem in caught.value.problems:
        found[problem.key] = " | ".join(filter(None, (found.get(problem.key), problem.message)))
    return found


def valid(mapping: dict, base_dir: Path | None = None):
    return parse_config(mapping, base_dir=base_dir)


# --- all at once ---------------------------------------------------------------------------

def test_every_problem_is_reported_at_once():
    found = problems(with_values(base(), {
        "rig": "two words", "device.rate_hz": -1, "control.kp": -2, "actuator.safe": 500.0,
        "limits.stale_periods": 0, "recording.flush_ms": 1000,
    }))
    assert set(found) == {"rig", "device.rate_hz", "control.kp", "actuator.safe",
                          "limits.stale_periods", "recording.flush_ms"}


def test_missing_required_keys_are_named():
    found = problems({"rig": "x"})
    assert {"channels", "actuator", "control.output", "control.alpha"} <= set(found)
    assert "missing" in found["control.alpha"]


def test_unknown_key_suggests_the_close_one_at_any_depth():
    mapping = base()
    mapping["contrl"] = {}
    mapping["control"]["estimator"] = {"knd": "algebraic"}
    found = problems(mapping)
    assert "did you mean 'control'" in found["contrl"]
    assert "did you mean 'kind'" in found["control.estimator.knd"]


def test_a_key_of_another_reference_kind_names_the_kind():
    found = problems(with_values(base(), {"reference": {"kind": "levels", "rate_per_s": 5.0}}))
    assert "kind is levels" in found["reference.rate_per_s"]


def test_bool_is_not_a_number_and_quoted_numbers_get_a_hint():
    found = problems(with_values(base(), {"control.kp": True, "control.alpha": "30"}))
    assert "not true/false" in found["control.kp"]
    assert "remove the quotes" in found["control.alpha"]


def test_letter_case_of_a_choice_is_explained():
    found = problems(with_values(base(), {"control.law": "ipd"}))
    assert "write iPD" in found["control.law"]


# --- cross-field rules ---------------------------------------------------------------------

def test_actuator_min_below_max_and_safe_inside():
    assert "actuator.max" in problems(with_values(base(), {"actuator.min": 50.0, "actuator.max": 50.0}))
    found = problems(with_values(base(), {"actuator.safe": -1.0}))
    assert "0..100" in found["actuator.safe"]


def test_channel_names_unique_and_not_taken():
    found = problems(with_values(base(), {"channels.1.name": "speed_rpm"}))
    assert "same name" in found["channels.1.name"]
    found = problems(with_values(base(), {"channels.1.name": "f_hat"}))
    assert "samples.csv" in found["channels.1.name"]
    found = problems(with_values(base(), {"channels.1.name": "overruns"}))
    assert "limits setting" in found["channels.1.name"]


def test_output_must_name_a_channel_with_suggestion():
    found = problems(with_values(base(), {"control.output": "speed_rp"}))
    assert "did you mean 'speed_rpm'" in found["control.output"]


@pytest.mark.parametrize("law, order", [("iP", 2), ("iPI", 2), ("iPD", 1), ("iPID", 1)])
def test_law_and_order_must_agree(law, order):
    found = problems(with_values(base(), {"control.law": law, "control.order": order}))
    assert f"law {law} needs order" in found["control.order"]


@pytest.mark.parametrize("law, order", [("iP", 1), ("iPI", 1), ("iPD", 2), ("iPID", 2)])
def test_order_defaults_to_the_law(law, order):
    cfg = valid(with_values(base(), {"control.law": law, "control.ki": 1.0, "control.kd": 4.0}))
    assert cfg.control.order == order


def test_pid_baseline_takes_either_order():
    for order in (1, 2):
        assert valid(with_values(base(), {"control.law": "PID", "control.order": order}))


def test_estimator_window_needs_two_samples_or_three_for_order_two():
    # 0.02 s at 100 Hz = 2 samples: enough for order 1, too few for order 2
    assert valid(with_values(base(), {"control.estimator.window_s": 0.02}))
    found = problems(with_values(base(), {"control.law": "iPD", "control.estimator.window_s": 0.02}))
    assert "at least 3" in found["control.estimator.window_s"]
    found = problems(with_values(base(), {"control.estimator.window_s": 0.01}))
    assert "at least 2" in found["control.estimator.window_s"]


def test_one_step_estimator_ignores_the_window():
    assert valid(with_values(base(), {"control.estimator": {"kind": "one-step", "window_s": 0.001}}))


def test_watchdog_at_least_one_period():
    assert valid(with_values(base(), {"device.watchdog_ms": 10}))          # exactly 1 period
    found = problems(with_values(base(), {"device.watchdog_ms": 9.9}))
    assert "one sample period" in found["device.watchdog_ms"]


def test_computed_defaults_follow_the_rate():
    slow = valid(with_values(base(), {"device.rate_hz": 10}))
    assert slow.device.watchdog_ms == 300.0                         # 3 periods > 100 ms
    assert slow.control.estimator.window_s == pytest.approx(1.0)    # 10 periods
    fast = valid(with_values(base(), {"device.rate_hz": 1000}))
    assert fast.device.watchdog_ms == 100.0


def test_channel_limits():
    found = problems(with_values(base(), {"limits.speed_rpm": {"min": 10.0, "max": 10.0}}))
    assert "greater than limits.speed_rpm.min" in found["limits.speed_rpm.max"]
    found = problems(with_values(base(), {"limits.speed_rmp": {"max": 10.0}}))
    assert "did you mean 'speed_rpm'" in found["limits.speed_rmp"]
    cfg = valid(with_values(base(), {"limits.current_a": {"max": 1.5, "stop": "ramped"}}))
    assert cfg.limits.channels["current_a"].max == 1.5
    assert cfg.limits.channels["current_a"].stop == "ramped"
    assert cfg.limits.channels["current_a"].min is None


def test_run_length_within_the_duration_limit():
    found = problems(with_values(base(), {"duration_s": 700}))
    assert "max_duration_s" in found["duration_s"]
    assert valid(with_values(base(), {"duration_s": 700, "limits.max_duration_s": 700}))


def test_levels_steps_in_order_and_not_overlapping():
    steps = [{"at": 2.0, "to": 1.0}, {"at": 1.0, "to": 2.0}]
    found = problems(with_values(base(), {"reference.steps": steps}))
    assert "later than step 0" in found["reference.steps.1.at"]
    steps = [{"at": 2.0, "to": 1.0, "blend_s": 2.0}, {"at": 3.0, "to": 2.0}]
    found = problems(with_values(base(), {"reference.steps": steps}))
    assert "finished blending" in found["reference.steps.1.at"]
    steps = [{"at": 2.0, "to": 1.0, "blend_s": 1.0}, {"at": 3.0, "to": 2.0}]
    assert valid(with_values(base(), {"reference.steps": steps}))


def test_ramp_speed_is_positive_and_the_ramp_goes_somewhere():
    ramp = {"kind": "ramp", "initial": 2000.0, "to": 1000.0, "rate_per_s": 100.0}
    assert valid(with_values(base(), {"reference": ramp}))          # downwards, positive speed
    ramp.update(rate_per_s=-100.0)
    assert "must be a number > 0" in problems(with_values(base(), {"reference": ramp}))[
        "reference.rate_per_s"]
    ramp.update(rate_per_s=100.0, to=2000.0)
    assert "reference.to" in problems(with_values(base(), {"reference": ramp}))


def test_chirp_fades_fit_in_the_sweep():
    chirp = {"kind": "chirp", "initial": 1.0, "amplitude": 1.0, "f0_hz": 0.1, "f1_hz": 2.0,
             "duration_s": 4.0, "blend_s": 2.5}
    found = problems(with_values(base(), {"reference": chirp}))
    assert "at most 2" in found["reference.blend_s"]
    chirp.update(blend_s=2.0)
    assert valid(with_values(base(), {"reference": chirp}))


def test_frequencies_below_half_the_sample_rate():
    sine = {"kind": "sine", "initial": 1.0, "amplitude": 1.0, "freq_hz": 50.0}
    found = problems(with_values(base(), {"reference": sine}))
    assert "half the sample rate" in found["reference.freq_hz"]
    chirp = {"kind": "chirp", "initial": 1.0, "amplitude": 1.0, "f0_hz": 1.0, "f1_hz": 1.0,
             "duration_s": 5.0}
    assert "reference.f1_hz" in problems(with_values(base(), {"reference": chirp}))


@pytest.mark.parametrize("text, expected", [
    ("time,value\n0,1\n1,2\n", "header must be 't,r'"),
    ("t,r\n0,1\n", "at least 2 data rows"),
    ("t,r\n0,1\n0,2\n", "t = 0.0 does not increase"),
    ("t,r\n0,1\n1,fast\n", "r = 'fast' is not a number"),
    ("\ufefft,r\n0,1\n1,2\n", None),                 # a spreadsheet's byte-order mark is fine
])
def test_reference_table_must_parse(tmp_path, text, expected):
    (tmp_path / "profile.csv").write_text(text, encoding="utf-8")
    mapping = with_values(base(), {"reference": {"kind": "table", "file": "profile.csv"}})
    if expected is None:
        assert parse_config(mapping, base_dir=tmp_path).reference["file"]
    else:
        assert expected in problems(mapping, base_dir=tmp_path)["reference.file"]


def test_reference_table_is_found_next_to_the_config_file(tmp_path, monkeypatch, write):
    write("rig/profile.csv", "t,r\n0,1000\n10,1500\n")
    config = with_values(base(), {"reference": {"kind": "table", "file": "profile.csv"}})
    import yaml

    path = write("rig/rig.yaml", yaml.safe_dump(config))
    monkeypatch.chdir(tmp_path)            # not the config's folder
    cfg = load_config(path)
    assert Path(cfg.reference["file"]) == (tmp_path / "rig" / "profile.csv").resolve()
    assert cfg.base_dir == (tmp_path / "rig")


def test_recording_dir_is_taken_from_the_current_folder(tmp_path, monkeypatch, write):
    import yaml

    path = write("rig/rig.yaml", yaml.safe_dump(base()))
    monkeypatch.chdir(tmp_path)
    assert load_config(path).recording.dir == tmp_path / "sessions"


def test_simulated_plant_offers_the_channels_and_the_input_range():
    found = problems(with_values(base(), {"channels.1.name": "voltage_v"}))
    assert "speed_rpm, current_a, airflow_m3h, temp_c" in found["channels.1.name"]
    found = problems(with_values(base(), {"actuator.max": 150.0}))
    assert "simulated fan" in found["actuator.max"]
    # A real device has no such restriction.
    assert valid(with_values(base(), {"device.link": "udp", "actuator.max": 150.0,
                                      "channels.1.name": "voltage_v"}))


def test_plant_parameters_are_checked_by_the_plant(tmp_path):
    found = problems(with_values(base(), {"device.sim.params": {"suply_v": 12.0}}))
    assert "supply_v" in found["device.sim.params"]          # the plant lists what it has
    (tmp_path / "p.yaml").write_text("- 1\n- 2\n", encoding="utf-8")
    found = problems(with_values(base(), {"device.sim.params_file": "p.yaml"}), base_dir=tmp_path)
    assert "mapping" in found["device.sim.params_file"]


def test_plant_params_merge_file_then_mapping(tmp_path):
    (tmp_path / "p.yaml").write_text("supply_v: 10.0\nambient_c: 30.0\n", encoding="utf-8")
    cfg = valid(with_values(base(), {"device.sim.params_file": "p.yaml",
                                     "device.sim.params": {"supply_v": 11.0}}), base_dir=tmp_path)
    assert cfg.device.sim.params_file == (tmp_path / "p.yaml").resolve()
    assert cfg.device.sim.plant_params() == {"supply_v": 11.0, "ambient_c": 30.0}


def test_fault_specs_parse_and_name_configured_channels():
    found = problems(with_values(base(), {"device.sim.faults": ["drop:p=2"]}))
    assert "device.sim.faults.0" in found
    found = problems(with_values(base(), {"device.sim.faults": ["freeze:channel=temp_c,at=1"]}))
    assert "not a configured channel" in found["device.sim.faults.0"]
    cfg = valid(with_values(base(), {"device.sim.faults": ["freeze:channel=current_a,at=1"]}))
    assert cfg.device.sim.faults == ("freeze:channel=current_a,at=1",)


def test_udp_addresses():
    found = problems(with_values(base(), {"device.udp.host": "10.0.0.5:47800"}))
    assert "device.udp.port" in found["device.udp.host"]
    remote = with_values(base(), {"device.link": "udp", "device.udp.host": "10.0.0.5"})
    # protocol 1.1: listen only on the interface that routes to the device; every interface only
    # where this computer has no route to it
    from rigloop.config.schema import interface_towards

    assert valid(remote).device.udp.local_host == (interface_towards("10.0.0.5") or "0.0.0.0")
    assert valid(remote).device.udp.local_host != "127.0.0.1"
    named = with_values(base(), {"device.link": "udp", "device.udp.host": "rig.example"})
    assert valid(named).device.udp.local_host == "0.0.0.0"        # no DNS while reading a config
    found = problems(with_values(remote, {"device.udp.local_host": "127.0.0.1"}))
    assert "cannot reach" in found["device.udp.local_host"]
    local = valid(with_values(base(), {"device.link": "udp"}))
    assert local.device.udp.local_host == "127.0.0.1"
    assert local.device.url == "udp://127.0.0.1:47800"


def test_device_url_wins_over_link_and_sub_keys():
    cfg = valid(with_values(base(), {"device.link": "serial",
                                     "device.url": "udp://10.1.2.3:5000?",
                                     "device.udp.port": 9}))
    assert (cfg.device.link, cfg.device.udp.host, cfg.device.udp.port) == ("udp", "10.1.2.3", 5000)
    found = problems(with_values(base(), {"device.url": "tcp://x:1"}))
    assert "unknown kind 'tcp'" in found["device.url"]


def test_plan_inline_from_file_and_checked(tmp_path):
    plan = {"name": "p", "initial": 1000.0, "segments": [{"to": 1500.0, "hold_s": 2.0}]}
    assert valid(with_values(base(), {"plan": plan})).plan["name"] == "p"
    import yaml

    (tmp_path / "plan.yaml").write_text(yaml.safe_dump({"plan": plan}), encoding="utf-8")
    cfg = valid(with_values(base(), {"plan": "plan.yaml"}), base_dir=tmp_path)
    assert cfg.plan["segments"][0]["to"] == 1500.0
    assert cfg.raw["plan"] == cfg.plan              # the snapshot carries the plan itself
    found = problems(with_values(base(), {"plan": "nowhere.yaml"}), base_dir=tmp_path)
    assert "not found" in found["plan"]
    found = problems(with_values(base(), {"plan": {"initial": 1.0}}))
    assert "plan.segments" in found


# --- the Config object ---------------------------------------------------------------------

def test_config_object_and_raw_snapshot_round_trip(tmp_path):
    cfg = valid(with_values(base(), {"limits.speed_rpm.max": 3000.0}), base_dir=tmp_path)
    assert cfg.channel_index("current_a") == 1
    with pytest.raises(KeyError, match="speed_rpm, current_a"):
        cfg.channel_index("temp_c")
    assert cfg.period_s == pytest.approx(0.01)
    assert cfg.device.period_us == 10000 and cfg.device.watchdog_us == 100000
    # raw is complete (every default filled in) and gives the same Config when parsed again
    assert cfg.raw["device"]["sim"]["clock"] == "realtime"
    assert cfg.raw["control"]["estimator"]["window_s"] == pytest.approx(0.1)
    again = parse_config(cfg.snapshot(), base_dir=tmp_path)
    assert again == cfg
    # plain YAML types only, so session.yaml can hold it
    import yaml

    assert yaml.safe_load(yaml.safe_dump(cfg.raw)) == cfg.raw


# --- whatever passes the check also builds ---------------------------------------------------

def test_controller_limits_are_enforced_at_check_time():
    found = problems(with_values(base(), {"device.rate_hz": 20000, "control.estimator.window_s": 6.0}))
    assert "samples" in found["control.estimator.window_s"]


def test_reference_builder_objection_becomes_a_problem_with_its_key(monkeypatch):
    import rigloop.control.reference as reference

    def refuse(spec, base_dir=None):
        raise ValueError("reference.steps[1].to = 5 is refused by the profile builder")

    monkeypatch.setattr(reference, "build_reference", refuse)
    steps = [{"at": 1.0, "to": 2.0}, {"at": 3.0, "to": 5.0}]
    found = problems(with_values(base(), {"reference.steps": steps}))
    assert "refused by the profile builder" in found["reference.steps.1.to"]
