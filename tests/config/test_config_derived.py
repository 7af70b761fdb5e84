"""Derived quantities, checked against sources outside this module.

- Closed-loop figures against python-control (reference library) and closed forms: the poles
  of the error dynamics the laws impose (iP: e' + Kp e = 0; iPI: e'' + Kp e' + Ki e = 0; iPD:
  e'' + Kd e' + Kp e = 0; iPID: the cubic s^3 + Kd s^2 + Kp s + Ki), via
  ``control.damp``/``control.poles``, numpy.roots and the quadratic formula.
- Frame sizes against the project's wire encoder (the sizes are those of docs/protocol.md), and
  the UART capacity baud/10 bytes per second for 8N1 framing (1 start + 8 data + 1 stop bit,
  from the common asynchronous serial format; from memory).
"""

from __future__ import annotations

import control
import numpy as np
import pytest
from config_testdata import base, with_values

from rigloop.config import derived_quantities, parse_config
from rigloop.config.derived import command_frame_bytes, sample_frame_bytes


def figures(mapping: dict) -> dict[str, object]:
    return {d.label: d for d in derived_quantities(parse_config(mapping))}


def warned(mapping: dict) -> set[str]:
    return {d.label for d in derived_quantities(parse_config(mapping)) if d.warning}


@pytest.mark.parametrize("kp", [0.5, 4.0, 40.0])
def test_ip_time_constant_matches_the_pole_of_the_error_dynamics(kp):
    (pole,) = control.poles(control.tf([1.0], [1.0, kp]))
    got = figures(with_values(base(), {"control.kp": kp}))["closed-loop time constant"].value
    assert got == pytest.approx(-1.0 / pole.real, rel=1e-12)


@pytest.mark.parametrize("kp, kd", [(225.0, 30.0), (100.0, 5.0), (16.0, 12.0), (400.0, 28.0)])
def test_ipd_frequency_and_damping_match_python_control(kp, kd):
    mapping = with_values(base(), {"control.law": "iPD", "control.kp": kp, "control.kd": kd,
                                   "device.rate_hz": 1000, "control.estimator.window_s": 0.01})
    # For a pole pair p1, p2: wn^2 = p1*p2 and 2*zeta*wn = -(p1 + p2), also when overdamped
    # (control.damp reports per-pole figures there, so the pair is combined here).
    p1, p2 = control.poles(control.tf([1.0], [1.0, kd, kp]))
    wn = np.sqrt((p1 * p2).real)
    zeta = -(p1 + p2).real / (2.0 * wn)
    got = figures(mapping)
    assert got["closed-loop natural frequency"].value == pytest.approx(wn, rel=1e-6)
    assert got["closed-loop damping"].value == pytest.approx(zeta, rel=1e-6)
    if zeta < 1.0:  # underdamped: python-control's own damping figures agree too
        wn_c, zeta_c, _ = control.damp(control.tf([1.0], [1.0, kd, kp]), doprint=False)
        assert got["closed-loop damping"].value == pytest.approx(zeta_c[0], rel=1e-6)
        assert got["closed-loop natural frequency"].value == pytest.approx(wn_c[0], rel=1e-6)


@pytest.mark.parametrize("kp, kd, ki", [(100.0, 20.0, 500.0), (100.0, 20.0, 2500.0),
                                        (100.0, 4.0, 300.0)])
def test_ipid_stability_warning_agrees_with_the_poles(kp, kd, ki):
    mapping = with_values(base(), {"control.law": "iPID", "control.kp": kp, "control.kd": kd,
                                   "control.ki": ki, "device.rate_hz": 1000,
                                   "control.estimator.window_s": 0.01})
    poles = control.poles(control.tf([1.0], [1.0, kd, kp, ki]))
    unstable = bool(np.any(poles.real >= 0))
    assert ("closed-loop stability" in warned(mapping)) == unstable


@pytest.mark.parametrize("kp, ki", [(20.0, 1.0), (4.0, 3.0), (2.0, 100.0)])
def test_ipi_time_scales_come_from_the_roots_of_its_error_polynomial(kp, ki):
    # Closed form: e'' + Kp e' + Ki e = 0 has the roots (-Kp ± sqrt(Kp² - 4 Ki))/2; the slowest
    # mode's time constant is 1/min|Re p| and the fastest pole's time scale 1/max|p|. With
    # Kp = 20, Ki = 1 the slow pole is at -0.0501/s: 19.95 s, not 1/Kp = 0.05 s.
    mapping = with_values(base(), {"control.law": "iPI", "control.kp": kp, "control.ki": ki,
                                   "device.rate_hz": 1000, "control.estimator.window_s": 0.01})
    disc = complex(kp * kp - 4.0 * ki) ** 0.5
    roots = np.array([(-kp + disc) / 2.0, (-kp - disc) / 2.0])
    np.testing.assert_allclose(np.sort_complex(np.roots([1.0, kp, ki])), np.sort_complex(roots))
    got = figures(mapping)
    assert got["closed-loop time constant"].value == pytest.approx(1.0 / min(-roots.real), rel=1e-9)
    assert got["closed-loop fastest time scale"].value == pytest.approx(1.0 / max(abs(roots)), rel=1e-9)
    if (kp, ki) == (20.0, 1.0):
        assert got["closed-loop time constant"].value == pytest.approx(19.95, abs=0.01)


@pytest.mark.parametrize("law, kp, kd, ki", [("iPD", 100.0, 30.0, 0.0), ("iPD", 400.0, 10.0, 0.0),
                                             ("iPID", 100.0, 20.0, 500.0), ("iPID", 900.0, 80.0, 100.0)])
def test_ipd_and_ipid_time_scales_match_python_control_poles(law, kp, kd, ki):
    # Reference library: python-control's poles of 1/(s² + Kd s + Kp) and 1/(s³ + Kd s² + Kp s + Ki).
    den = [1.0, kd, kp] if law == "iPD" else [1.0, kd, kp, ki]
    poles = control.poles(control.tf([1.0], den))
    mapping = with_values(base(), {"control.law": law, "control.kp": kp, "control.kd": kd,
                                   "control.ki": ki, "device.rate_hz": 5000,
                                   "control.estimator.window_s": 0.002})
    got = figures(mapping)
    assert got["closed-loop time constant"].value == pytest.approx(1.0 / min(-poles.real), rel=1e-6)
    assert got["closed-loop fastest time scale"].value == pytest.approx(1.0 / max(abs(poles)), rel=1e-6)


def test_estimator_warning_follows_the_fastest_pole_not_1_over_kp():
    # iPI with Kp = 2, Ki = 100: poles -1 ± 9.95j, |p| = 10/s, so the loop moves on a 0.1 s
    # scale; a 0.15 s window lags it although it is shorter than 1/Kp = 0.5 s.
    mapping = with_values(base(), {"control.law": "iPI", "control.kp": 2.0, "control.ki": 100.0,
                                   "control.estimator.window_s": 0.15})
    assert figures(mapping)["estimator vs loop"].value == pytest.approx(1.5, rel=1e-9)
    slow = with_values(mapping, {"control.ki": 0.5})          # poles -0.29, -1.71: 0.58 s
    assert "estimator vs loop" not in warned(slow)


@pytest.mark.parametrize("n", [1, 4, 8, 32])
def test_frame_sizes_match_the_wire_encoder(n):
    from rigloop.protocol.framing import encode_frame, encode_serial
    from rigloop.protocol.messages import Command, Sample

    sample = Sample(seq=7, t_us=123, status=0, applied=1.5, last_cmd_seq=6,
                    channels=tuple(float(i) for i in range(n)))
    command = Command(seq=7, answers=7, value=1.5)
    assert sample_frame_bytes(n, serial=False) == len(encode_frame(sample)) == 27 + 4 * n
    assert sample_frame_bytes(n, serial=True) == len(encode_serial(sample))
    assert command_frame_bytes(serial=False) == len(encode_frame(command)) == 16
    assert command_frame_bytes(serial=True) == len(encode_serial(command))


def test_serial_link_budget_and_warning_above_70_percent():
    serial = with_values(base(), {"device.link": "serial", "device.serial.baud": 115200,
                                  "device.rate_hz": 250, "device.watchdog_ms": 100})
    up = figures(serial)["link device->host"]
    assert up.value == (27 + 4 * 2 + 2) * 250                 # 9250 B/s of 11520 B/s
    assert up.warning is True and "80.3 %" in up.note
    down = figures(serial)["link host->device"]
    assert down.value == 18 * 250 and down.warning is False
    fast = with_values(serial, {"device.serial.baud": 921600})
    assert "link device->host" not in warned(fast)


def test_window_warnings_at_the_edges():
    # the shortest window is the one `rigloop identify` never goes below (5 samples at order 1)
    from rigloop.control.window_choice import shortest_window
    assert shortest_window("algebraic", 1) == 5
    assert "estimator window" in warned(with_values(base(), {"control.estimator.window_s": 0.04}))
    assert "estimator window" not in warned(with_values(base(), {"control.estimator.window_s": 0.05}))
    long = with_values(base(), {"device.rate_hz": 20000, "control.estimator.window_s": 0.2,
                                "control.kp": 1.0})
    assert figures(long)["estimator window"].value == 4000
    assert "estimator window" in warned(long)


@pytest.mark.parametrize("values, label", [
    ({"control.law": "iPI"}, "integral gain"),
    ({"control.ki": 2.0}, "unused gains"),
    ({"control.kp": 0.0}, "closed-loop time constant"),
    ({"control.kp": 40.0}, "closed-loop speed"),                 # 1/40 s = 2.5 periods at 100 Hz
    ({"control.estimator.window_s": 0.5, "control.kp": 4.0}, "estimator vs loop"),
    ({"device.watchdog_ms": 15}, "device watchdog"),
    ({"reference.steps": [{"at": 30.0, "to": 1000.0}], "duration_s": 20}, "reference steps"),
    ({"limits.current_a": {"max": 2.0, "stop": "ramped"}}, "ramped stops"),
    ({"device.link": "udp", "device.sim.faults": ["silent:at=1"]}, "fault injection"),
])
def test_doubtful_settings_warn(values, label):
    assert label in warned(with_values(base(), values))


def test_reference_reaching_a_limit_warns_and_a_missing_output_limit_too():
    assert "output limits" in warned(base())
    limited = with_values(base(), {"limits.speed_rpm": {"max": 3000.0}})
    assert warned(limited) == set()
    beyond = with_values(limited, {"reference": {"kind": "levels", "initial": 1000.0,
                                                 "steps": [{"at": 1.0, "to": 3100.0}]}})
    assert "reference vs limit" in warned(beyond)
