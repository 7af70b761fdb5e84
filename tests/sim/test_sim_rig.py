"""The simulated device with a rig's imperfection layers: from the config, through the
launcher's arguments and `rigloop sim`'s parser, to the device's plant and samples."""

from __future__ import annotations

import argparse

import numpy as np

import pytest

from rigloop.config import parse_config
from rigloop.plants.rig import Rig
from rigloop.protocol import Arm, Command, Configure, Sample
from rigloop.sim.device import build_device
from rigloop.sim.launcher import sim_arguments

RIG = {"dead_zone": 20.0, "input_delay_s": 0.03,
       "load": {"walk_nm": 1.0e-4, "steps": [{"at_s": 1.0, "torque_nm": 1.0e-3}]}}
SENSORS = {"speed_rpm": {"noise_std": 0.0, "relative_noise": 0.01, "quantum": 5.0}}


def _config():
    return parse_config({
        "device": {"link": "sim", "rate_hz": 100,
                   "sim": {"plant": "fan", "clock": "lockstep", "seed": 3,
                           "params": {"viscous_nms": 1e-06}, "rig": RIG, "sensors": SENSORS}},
        "channels": [{"name": "speed_rpm"}, {"name": "current_a"}],
        "actuator": {"name": "duty", "unit": "%", "min": 0.0, "max": 100.0, "safe": 0.0},
        "control": {"output": "speed_rpm", "alpha": 40.0},
    })


def _parse_sim_args(args):
    from rigloop.commands.sim import add_arguments, build_from_args

    parser = argparse.ArgumentParser()
    add_arguments(parser)
    return build_from_args(parser.parse_args(args))


def test_the_config_reaches_the_device_through_the_launcher_arguments():
    cfg = _config()
    assert cfg.device.sim.rig == RIG and cfg.device.sim.sensors == SENSORS
    args = sim_arguments(cfg)
    assert "--rig" in args and "--sensors" in args
    device, transport, _ = _parse_sim_args(args)
    try:
        assert isinstance(device.plant, Rig)
        assert device.plant.spec.dead_zone == 20.0 and device.plant.true_delay() == 0.03
        assert device.plant.spec.load.steps == ((1.0, 1.0e-3),)
        # 1e-06 written by json.dumps is a number, not the text YAML 1.1 would make of it.
        assert device.plant.inner.params.viscous_nms == 1e-06
        assert device.sensor.relative_std == {"speed_rpm": 0.01}
        assert device.sensor.quantum["speed_rpm"] == 5.0
    finally:
        transport.close()


def test_a_config_without_rig_options_passes_none():
    cfg = parse_config({
        "device": {"link": "sim", "sim": {"plant": "fan"}},
        "channels": [{"name": "speed_rpm"}],
        "actuator": {"min": 0.0, "max": 100.0, "safe": 0.0},
        "control": {"output": "speed_rpm", "alpha": 40.0},
    })
    assert cfg.device.sim.rig == {} and cfg.device.sim.sensors == {}
    assert "--rig" not in sim_arguments(cfg) and "--sensors" not in sim_arguments(cfg)


@pytest.mark.parametrize("text, words", [
    ("{gear_ratio: 5}", ["gear_ratio", "motor"]),
    ("{dead_zone: 150}", ["dead_zone", "full scale"]),
    ("{deadzone: 5}", ["unknown device.sim.rig key 'deadzone'"]),
])
def test_bad_rig_options_exit_2_with_one_clear_line(capsys, text, words):
    from rigloop.cli import main

    assert main(["sim", "--udp", "127.0.0.1:0", "--rig", text]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    for word in words:
        assert word in err


def _tick_speeds(device, commands, period_us=10_000):
    device.start(0)
    device.handle(Configure(period_us, 1_000_000, 0.0, 0.0, 100.0), 0)
    device.handle(Arm(), 0)
    speeds = []
    for k, value in enumerate(commands):
        now = k * period_us
        for msg in device.tick(now):
            if isinstance(msg, Sample):
                speeds.append(msg.channels[0])
                device.handle(Command(k + 1, msg.seq, value), now)
    return speeds


def test_the_device_applies_the_dead_zone_and_the_delay():
    # Noise-free device, 10 ms period: 15 % duty is inside the 20 % dead zone (nothing moves);
    # 60 % commanded after sample 20 reaches the plant one period (the device's zero-order
    # hold) plus 30 ms (the rig's delay) later.
    quiet = build_device("fan", rate_hz=100, noise=0.0, rig={"dead_zone": 20.0, "input_delay_s": 0.03})
    speeds = _tick_speeds(quiet, [15.0] * 20 + [60.0] * 20)
    assert max(speeds[:24]) == 0.0
    assert speeds[25] > 0.0
    plain = build_device("fan", rate_hz=100, noise=0.0, rig={"dead_zone": 20.0})
    first = _tick_speeds(plain, [15.0] * 20 + [60.0] * 20)
    assert max(first[:21]) == 0.0 and first[22] > 0.0


def _open_loop_readings(seed, noise, steps=300):
    device = build_device("fan", rate_hz=100, noise=noise, seed=seed,
                          rig={"load": {"walk_nm": 5e-4, "drift_nm": 3e-4, "drift_period_s": 2.0}},
                          sensors={"speed_rpm": {"relative_noise": 0.02}})
    speeds = _tick_speeds(device, [60.0] * steps)
    return speeds, device.plant.outputs(device.plant.state)[0]


def test_rig_runs_repeat_from_the_seed_and_noise_zero_is_the_twin():
    a, a_true = _open_loop_readings(seed=5, noise=1.0)
    b, b_true = _open_loop_readings(seed=5, noise=1.0)
    c, c_true = _open_loop_readings(seed=6, noise=1.0)
    quiet, quiet_true = _open_loop_readings(seed=5, noise=0.0)
    assert a == b and a_true == b_true                  # same seed: sample for sample
    assert a != c and a_true != c_true                  # another seed: another load walk
    assert quiet_true == a_true                         # noise 0: same rig, same load
    assert np.std(np.diff(quiet[-100:])) < np.std(np.diff(a[-100:]))
