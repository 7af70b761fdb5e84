"""A full headless session through the CLI: lockstep simulated fan, 20 s, over the real protocol."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import yaml

from engine_helpers import DEMO_FAN, fan_config

pytestmark = pytest.mark.slow


def oracle_rms(cfg, t_from: float, t_to: float) -> float:
    """The yardstick: an offline loop (plant + controller, no protocol) with a controller that
    knows the true plant and feedback-linearises it (rigloop.plants.offline.OracleController),
    on the same reference, the same sensor noise level, the same one-sample delay."""
    from rigloop.control.reference import StartFrom, build_reference
    from rigloop.control.shaping import ActuatorShaper
    from rigloop.plants import make_plant
    from rigloop.plants.offline import OracleController, run_offline
    from rigloop.plants.sensors import SensorModel

    plant = make_plant("fan")
    sensor = SensorModel.nominal(plant, scale=cfg.device.sim.noise, seed=7)
    ref = StartFrom(build_reference(cfg.reference), 0.0, cfg.reference["blend_s"])
    a = cfg.actuator
    res = run_offline(plant, OracleController(plant, "speed_rpm", kp=cfg.control.kp), ref,
                      ActuatorShaper(a.min, a.max, a.safe, a.slew_per_s), ts=cfg.device.period_s,
                      duration_s=t_to, output="speed_rpm", sensor=sensor)
    m = (res.t >= t_from) & (res.t < t_to)
    return float(np.sqrt(np.mean((res.y[m] - res.r[m]) ** 2)))


def test_lockstep_fan_run_of_20_s(tmp_path, capsys):
    from rigloop.cli import main

    out = tmp_path / "sessions"
    code = main(["run", str(DEMO_FAN), "--duration", "20", "--record-dir", str(out), "--quiet",
                 "--set", "device.sim.clock=lockstep"])
    printed = capsys.readouterr().out
    assert code == 0, printed
    folder = next(out.iterdir())
    assert f"session: {folder}" in printed and "outcome: completed" in printed
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "completed" and meta["trip"] is None

    # loadable with pandas and with numpy, no custom code
    df = pd.read_csv(folder / "samples.csv")
    arr = np.genfromtxt(folder / "samples.csv", delimiter=",", names=True, dtype=None, encoding="utf-8")
    assert len(arr) == len(df) == meta["summary"]["samples"]          # rows == samples
    for col in ("t", "ref", "y", "e", "u_cmd", "u", "f_hat", "speed_rpm", "current_a", "airflow_m3h", "temp_c"):
        assert col in df.columns
    assert (np.diff(df.seq) == 1).all()                                # no sample lost or skipped
    events = pd.read_csv(folder / "events.csv")
    assert {"connected", "armed", "ended"} <= set(events.kind)

    run = df[df.state == "running"]
    t_rel = run.t - run.t.iloc[0]
    assert t_rel.iloc[-1] == pytest.approx(20.0, abs=2 * 0.002)
    # tracking: within 1.1x of the oracle that knows the true plant (design target, §7)
    cfg = fan_config(tmp_path)
    m = (t_rel >= 1.0).to_numpy()
    rms = float(np.sqrt(np.mean(run.e.to_numpy()[m] ** 2)))
    yardstick = oracle_rms(cfg, 1.0, 20.0)
    print(f"engine iP RMS {rms:.2f} rpm, offline oracle RMS {yardstick:.2f} rpm, ratio {rms / yardstick:.3f}")
    assert rms <= 1.1 * yardstick
    # the recorded u is what the device applied: the command of the previous sample, clamped
    # (where the host fell behind, one COMMAND answered several samples: skip those pairs)
    u_cmd, u, late = run.u_cmd.to_numpy(), run.u.to_numpy(), run.late.to_numpy()
    ok = (late[:-1] == 0) & (late[1:] == 0)
    assert ok.mean() > 0.95
    assert np.allclose(u[1:][ok], np.clip(u_cmd[:-1], 0, 100)[ok], atol=1e-4)


def test_a_device_that_never_answers_is_reported_and_recorded(tmp_path, capsys):
    from rigloop.cli import main

    out = tmp_path / "sessions"
    # UDP port 9 (discard) on loopback: nothing answers there
    code = main(["run", str(DEMO_FAN), "--record-dir", str(out), "--quiet",
                 "--set", "device.link=udp", "--set", "device.udp.port=9"])
    err = capsys.readouterr().err
    assert code == 1
    assert "no HELLO from the device at udp://127.0.0.1:9" in err and "Traceback" not in err
    folder = next(out.iterdir())
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "stopped" and "could not start" in meta["stop_reason"]
    events = pd.read_csv(folder / "events.csv")
    assert list(events.kind) == ["scheduling", "link_fault", "ended"]
