"""Noise-robust step metrics: equal to step_info without noise, close to the noise-free twin with it."""

from __future__ import annotations

import math
from pathlib import Path

import control
import numpy as np
import pytest

from rigloop.analysis.noise import centre_gain, noise_floor
from rigloop.analysis.report import analyse
from rigloop.analysis.report_text import render_text
from rigloop.analysis.session import load_session
from rigloop.analysis.transition import NOT_SETTLED, transition_metrics
from rigloop.cli import main

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
DT = 0.002
#: a busy test machine may deschedule the simulated device for a moment: not a dead link here
LOADED_MACHINE = "limits.stale_periods=10000"


def _second_order(zeta: float, omega: float, t_end: float):
    t = np.arange(0.0, t_end + DT / 2, DT)
    resp = control.step_response(control.tf([omega**2], [1.0, 2 * zeta * omega, omega**2]), t)
    return resp.time, np.squeeze(resp.outputs)


@pytest.mark.parametrize("zeta, omega", [(0.3, 4.0), (0.6, 8.0), (1.0, 3.0), (1.6, 5.0)])
def test_without_noise_the_numbers_are_those_of_python_control_step_info(zeta, omega):
    # Reference library: python-control's step_info on the same noise-free samples; tolerance
    # one sample period for times, 0.5 % of the value for the overshoot.
    slowest = omega * (zeta - math.sqrt(zeta**2 - 1.0)) if zeta > 1.0 else zeta * omega
    t, y = _second_order(zeta, omega, 12.0 / slowest)
    ref = control.step_info(y, t, yfinal=1.0)
    m = transition_metrics(t, y, t_step=0.0, y_initial=0.0, y_final=1.0)
    assert m.smoothing_samples == 1 and not m.band_widened and m.settled == "settled"
    assert abs(m.step.rise_time_s - ref["RiseTime"]) <= DT
    assert abs(m.step.settling_time_s - ref["SettlingTime"]) <= DT
    assert abs(m.step.overshoot_pct - ref["Overshoot"]) <= max(0.005 * ref["Overshoot"], 1e-9)
    assert abs(m.step.peak_time_s - ref["PeakTime"]) <= DT


@pytest.mark.parametrize("sigma", [0.5, 3.0, 12.0])
def test_noise_floor_finds_the_standard_deviation_of_white_noise(sigma):
    # numpy's normal generator is the reference: the estimate lies within 10 % of its sigma
    # on a response that also moves (a step of 1000 units).
    t, z = _second_order(0.5, 6.0, 6.0)
    rng = np.random.default_rng(7)
    y = 1000.0 * z + sigma * rng.standard_normal(t.size)
    assert noise_floor(y) == pytest.approx(sigma, rel=0.10)


def test_smoothing_gain_is_the_norm_of_the_savitzky_golay_coefficients():
    # Reference library: scipy.signal.savgol_coeffs; white noise through an FIR filter keeps
    # sqrt(sum h^2) of its standard deviation.
    from scipy.signal import savgol_coeffs

    for w in (5, 21, 91):
        assert centre_gain(w) == pytest.approx(np.linalg.norm(savgol_coeffs(w, 3)), rel=1e-9)


@pytest.mark.parametrize("zeta, omega, sigma", [(0.5, 6.0, 8.0), (0.8, 4.0, 8.0), (1.0, 5.0, 15.0)])
def test_noisy_response_agrees_with_its_noise_free_twin(zeta, omega, sigma):
    # The twin is the same response without noise; settling within max(0.25 s, 25 %) and
    # overshoot within 1 percentage point (the tolerances asked of the real-engine check below).
    t, z = _second_order(zeta, omega, 5.0)
    clean = 1200.0 + 1000.0 * z
    noisy = clean + sigma * np.random.default_rng(3).standard_normal(t.size)
    a = transition_metrics(t, clean, t_step=0.0, y_initial=1200.0, y_final=2200.0)
    b = transition_metrics(t, noisy, t_step=0.0, y_initial=1200.0, y_final=2200.0)
    assert b.smoothing_samples > 1 and b.noise_std == pytest.approx(sigma, rel=0.15)
    ta, tb = a.step.settling_time_s, b.step.settling_time_s
    assert abs(ta - tb) <= max(0.25, 0.25 * ta)
    assert abs(a.step.overshoot_pct - b.step.overshoot_pct) <= 1.0
    raw_overshoot = 100.0 * (noisy.max() - 2200.0) / 1000.0
    assert raw_overshoot - a.step.overshoot_pct > 1.5       # the raw maximum would have lied


def test_a_band_below_the_noise_is_widened_and_said():
    t, z = _second_order(0.7, 6.0, 3.0)
    y = 10.0 * z + 1.0 * np.random.default_rng(1).standard_normal(t.size)   # noise 10 % of change
    m = transition_metrics(t, y, t_step=0.0, y_initial=0.0, y_final=10.0, settle_band=0.02)
    assert m.band_widened and m.band_pct > 2.0
    assert "below the noise" in m.band_note and "2 %" in m.band_note
    # how far the noise left can move the overshoot, said beside it: 4σ_s in percent of the change
    assert m.overshoot_noise_pct == pytest.approx(100.0 * 4.0 * m.noise_left / 10.0)
    assert m.overshoot_noise_pct > 1.0


def test_entering_the_band_at_the_very_end_is_not_settled():
    # a first-order response that reaches the 2 % band only in the last 2 % of the segment:
    # a settling time there would be the segment's length, so it is "not settled" in words
    tau = 1.0
    t = np.arange(0.0, tau * math.log(50.0) * 1.02, DT)
    y = 1.0 - np.exp(-t / tau)
    m = transition_metrics(t, y, t_step=0.0, y_initial=0.0, y_final=1.0)
    assert m.settled == NOT_SETTLED and math.isnan(m.step.settling_time_s)


@pytest.mark.slow
def test_demo_fan_with_noise_reports_what_its_noise_free_twin_reports(tmp_path, capsys):
    # The same lockstep run of configs/demo_fan.yaml with the simulated speed sensor's noise on
    # (device.sim.noise=1) and off (=0): settling times within max(0.25 s, 25 %) of each other
    # (or both not settled) and overshoots within 1 percentage point.
    reports = {}
    for noise in (1, 0):
        out = tmp_path / f"noise{noise}"
        code = main(["run", str(CONFIGS / "demo_fan.yaml"), "--set", "device.sim.clock=lockstep",
                     "--set", f"device.sim.noise={noise}", "--set", LOADED_MACHINE,
                     "--out", str(out), "--quiet"])
        assert code == 0
        [folder] = list(out.iterdir())
        reports[noise] = analyse(load_session(folder))
    capsys.readouterr()
    noisy, clean = reports[1].segments, reports[0].segments
    assert len(noisy) == len(clean) == 4
    for a, b in zip(clean, noisy):
        assert b.transition.noise_std > 5.0 > a.transition.noise_std   # the noise is really there
        ta, tb = a.step.settling_time_s, b.step.settling_time_s
        if math.isnan(ta) or math.isnan(tb):
            assert a.transition.settled == b.transition.settled == NOT_SETTLED
        else:
            assert abs(ta - tb) <= max(0.25, 0.25 * ta), (a.index, ta, tb)
        assert abs(a.step.overshoot_pct - b.step.overshoot_pct) <= 1.0, (a.index,)
    text = render_text(reports[1])
    assert "Savitzky–Golay" in text and "noise σ" in text


def test_smoothing_does_not_amplify_the_noise_at_the_segment_ends():
    # Over 400 realisations of white noise (numpy's generator), the smoothed end sample keeps its
    # noise within twice the interior's sqrt(h0) (a cubic fitted to the last window would pass
    # several times that and make a "peak" of the noise alone at the segment's end).
    from rigloop.analysis.noise import smooth

    rng = np.random.default_rng(11)
    ends = np.array([smooth(rng.standard_normal(600), 51, 1.0).y[[0, -1]] for _ in range(400)])
    assert ends.std(axis=0).max() < 2.0 * centre_gain(51)
