"""The scenario suite (configs/scenarios): valid configs, documented, with a truth that matches
the model they simulate, and loops that run through them.

References for the truth: central finite differences of simulated steady states (static gain)
and of a simulated step's initial slope (alpha), computed here independently of the truth
functions; for a uniform quantizer, the reading moves in whole quanta (definition).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from rigloop.plants.scenario import SCENARIO_DIR, Scenario, load_suite, run_scenario_offline, scenario_paths

PATHS = scenario_paths()
IDS = [p.stem for p in PATHS]


def test_the_suite_is_broad():
    suite = load_suite()
    assert len(suite) >= 6
    kinds = {s.config.device.sim.plant for s in suite}
    assert kinds == {"fan", "motor"}
    rigs = [s.config.device.sim.rig for s in suite]
    assert any(r.get("dead_zone") for r in rigs)
    assert sum(1 for r in rigs if r.get("input_delay_s")) >= 3
    assert any(r.get("tach_pulses_per_rev") for r in rigs)
    assert any(r.get("backlash_rad") for r in rigs)
    assert any(r.get("load", {}).get("walk_nm") for r in rigs)
    assert any(r.get("load", {}).get("steps") for r in rigs)
    assert any(s.order == 2 for s in suite)
    constants = [s.truth().time_constant_s for s in suite if s.order == 1]
    assert max(constants) / min(constants) > 20          # fast and slow rigs


def test_readme_documents_every_scenario():
    text = (SCENARIO_DIR / "README.md").read_text(encoding="utf-8")
    for path in PATHS:
        assert f"`{path.name}`" in text, f"{path.name} is not described in README.md"


@pytest.mark.parametrize("path", PATHS, ids=IDS)
def test_every_scenario_passes_rigloop_check(path, capsys):
    from rigloop.cli import main

    assert main(["check", str(path)]) == 0
    printed = capsys.readouterr().out
    assert "simulated imperfections: " in printed, printed


def test_check_names_the_imperfections_and_the_known_delay(capsys):
    from rigloop.cli import main

    path = SCENARIO_DIR / "blower_dead_zone_delay.yaml"
    assert main(["check", str(path), "--set", "control.input_delay_s=0.03"]) == 0
    printed = capsys.readouterr().out
    assert "simulated imperfections: dead_zone 12.0, input_delay_s 0.03" in printed
    assert "known input delay 0.03 s" in printed


@pytest.mark.parametrize("path", PATHS, ids=IDS)
def test_truth_gain_is_the_finite_difference_of_steady_states(path):
    s = Scenario(path)
    truth = s.truth()
    if s.order == 2:
        assert math.isnan(truth.static_gain)
        return
    rig, _ = s.build()
    i = rig.channel_index(s.output)
    h = 1e-3 * (rig.u_max - rig.u_min)
    up = rig.outputs(rig.steady_state(truth.u + h))[i]
    down = rig.outputs(rig.steady_state(truth.u - h))[i]
    assert truth.static_gain == pytest.approx((up - down) / (2 * h), rel=1e-4)
    assert truth.y == pytest.approx(float(s.config.reference["initial"]), rel=1e-6)


@pytest.mark.parametrize("path", PATHS, ids=IDS)
def test_truth_alpha_is_the_initial_slope_of_a_simulated_step(path):
    # The quasi-static alpha is the initial slope when the current settles at once, so the
    # check simulates the rig with a 1000x smaller armature inductance (L -> 0 makes the
    # quasi-static model exact) and measures, from the operating point, the slope of the exact
    # output right after the step reaches the plant (after the delay, over 0.1 % of the
    # back-EMF time constant J R/K^2), minus the slope without the step.
    s = Scenario(path)
    truth = s.truth()
    rig0, _ = s.build()
    inductance = rig0.inner.params.inductance_h / 1000.0
    fast = Scenario(path, [f"device.sim.params.inductance_h={inductance!r}"])
    du = 0.02 * (s.config.actuator.max - s.config.actuator.min)

    def slope(step: float) -> float:
        rig, _ = fast.build()
        if s.order == 2:
            rig.reset(None)
            base = truth.u + 2 * du        # moving, teeth in contact, outside any dead zone
            rig.advance(base, 0.05)
            i = rig.channel_index("speed_rad_s")    # y' of the angle, output shaft
        else:
            rig.reset(truth.u)
            base = truth.u
            i = rig.channel_index(s.output)
        c = rig.inner.machine
        rig.advance(base + step, truth.delay_s + 20 * c.electrical_time_constant)
        span = 1e-3 * c.inertia * c.resistance / c.k ** 2
        y0 = rig.outputs(rig.state)[i]
        rig.advance(base + step, span)
        return (rig.outputs(rig.state)[i] - y0) / span

    measured = (slope(du) - slope(0.0)) / du
    assert measured == pytest.approx(truth.alpha, rel=0.01)


@pytest.mark.parametrize("path", PATHS, ids=IDS)
def test_truth_resolution_is_the_step_of_the_noise_free_reading(path):
    s = Scenario(path, ["device.sim.noise=0"])
    truth = s.truth()
    res = run_scenario_offline(s, duration_s=2.0, noise=0.0)
    if truth.resolution > 0:
        steps = np.abs(np.diff(res.y))
        moved = steps[steps > 0]
        assert moved.size > 0
        np.testing.assert_allclose(moved / truth.resolution, np.round(moved / truth.resolution),
                                   atol=1e-6)
    # Same seeds, same rig: the offline loop is repeatable sample for sample.
    again = run_scenario_offline(s, duration_s=2.0, noise=0.0)
    np.testing.assert_array_equal(res.y, again.y)


@pytest.mark.parametrize("path", PATHS, ids=IDS)
def test_the_offline_loop_tracks_every_scenario(path):
    # A sanity bound, not a quality claim: the configured starting values keep the RMS error
    # below 10 % of the reference's span of levels (the benchmark measures quality).
    s = Scenario(path)
    res = run_scenario_offline(s)
    levels = [float(s.config.reference["initial"])] + [st["to"] for st in s.config.reference["steps"]]
    span = max(levels) - min(levels)
    assert np.all(np.isfinite(res.u))
    assert res.rms_error(true_output=True) < 0.1 * span


@pytest.mark.slow
@pytest.mark.parametrize("path", PATHS, ids=IDS)
def test_every_scenario_runs_through_the_engine_in_lockstep(path, tmp_path, capsys):
    # The real engine, the real protocol over UDP, the simulated device as a child process
    # built from the same config: a few seconds complete without a trip.
    import yaml

    from rigloop.cli import main

    out = tmp_path / "sessions"
    code = main(["run", str(path), "--duration", "3", "--out", str(out), "--quiet",
                 "--set", "device.sim.clock=lockstep"])
    printed = capsys.readouterr().out
    assert code == 0, printed
    folder = next(Path(out).iterdir())
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "completed" and meta["trip"] is None, printed
    assert meta["summary"]["samples"] >= 3 * Scenario(path).config.device.rate_hz * 0.95


@pytest.mark.parametrize("path", PATHS, ids=IDS)
def test_truth_noise_matches_the_readings_at_rest(path):
    # At the operating point (held by a constant command) the readings' spread is the sensor's
    # noise and quantization: sqrt(noise_std^2 + q^2/12) (a uniform quantizer's error variance
    # is q^2/12; it holds when the noise spans several counts, else the spread is bounded by q).
    s = Scenario(path)
    truth = s.truth()
    rig, sensor = s.build()
    if s.order == 2 or rig.tach_min_reading() > 0 or s.config.device.sim.rig.get("load"):
        pytest.skip("no still operating point to read (angle, tach timing, moving load)")
    rig.reset(truth.u)
    i = rig.channel_index(s.output)
    readings = []
    for _ in range(3000):
        rig.advance(truth.u, s.period_s)
        readings.append(sensor.measure(rig.read())[i])
    expected = math.hypot(truth.noise_std, truth.quantization_std)
    if truth.noise_std >= truth.resolution:
        assert np.std(readings) == pytest.approx(expected, rel=0.1)
    else:
        assert np.std(readings) <= truth.resolution + 1e-12
