"""Gain suggestions, checked against closed forms, python-control and the SIMC paper."""

from __future__ import annotations

import math

import control as ct
import numpy as np
import pytest
from scipy.optimize import brentq

from rigloop.control.tuning import (
    effective_delay,
    ip_gains,
    ip_kp_limits,
    ipd_gains,
    ipi_gains,
    simc_pid,
    suggest_alpha_fopdt,
    suggest_alpha_from_slope,
)


def test_ip_gain_is_the_inverse_time_constant():
    assert ip_gains(0.25) == 4.0
    with pytest.raises(ValueError, match="tau_cl = 0"):
        ip_gains(0)


@pytest.mark.parametrize("omega,zeta", [(5.0, 0.7), (15.0, 1.0), (2.0, 0.3)])
def test_second_order_gains_place_the_poles(omega, zeta):
    # Reference library: python-control's damp() of the closed-loop error dynamics.
    kp, kd = ipd_gains(omega, zeta)
    wn, z, _ = ct.damp(ct.tf([1], [1, kd, kp]), doprint=False)
    # (a double root, ζ = 1, is only found to about √eps)
    assert wn == pytest.approx([omega, omega], rel=1e-6)
    assert z == pytest.approx([zeta, zeta], rel=1e-6)
    kp_i, ki_i = ipi_gains(omega, zeta)
    assert (kp_i, ki_i) == pytest.approx((kd, kp))


def test_sampled_ip_limits_from_the_characteristic_roots():
    # Roots of z² − z + Kp·Ts (numpy.roots): real up to Kp·Ts = 1/4, on the unit circle at 1.
    ts = 0.01
    kp_real, kp_stable = ip_kp_limits(ts)
    assert np.all(np.isreal(np.roots([1, -1, kp_real * ts * (1 - 1e-9)])))
    assert not np.all(np.isreal(np.roots([1, -1, kp_real * ts * 1.01])))
    assert np.max(np.abs(np.roots([1, -1, kp_stable * ts]))) == pytest.approx(1.0)
    assert np.max(np.abs(np.roots([1, -1, 0.99 * kp_stable * ts]))) < 1.0


def test_simc_worked_values():
    # SIMC rules ('Simple analytic rules for model reduction and PID controller tuning', Journal
    # of Process Control, 2003): Kc = τ/(k(τc+θ)), τI = min(τ, 4(τc+θ)), τD = τ2; computed by hand.
    kp, ki, kd = simc_pid(k=2.0, tau=10.0, theta=1.0)  # τc = θ = 1: Kc = 2.5, τI = min(10, 8) = 8
    assert (kp, ki, kd) == pytest.approx((2.5, 2.5 / 8, 0.0))
    kp, ki, kd = simc_pid(k=2.0, tau=4.0, theta=1.0)  # τI = τ = 4, Kc = 1
    assert (kp, ki, kd) == pytest.approx((1.0, 0.25, 0.0))
    kp, ki, kd = simc_pid(k=1.0, tau=10.0, theta=1.0, tau_c=2.0, tau2=3.0)
    kc, ti, td = 10.0 / 3.0, 10.0, 3.0  # series form, then parallel
    assert (kp, ki, kd) == pytest.approx((kc * (1 + td / ti), kc / ti, kc * td))
    assert simc_pid(k=-2.0, tau=10.0, theta=1.0)[0] == pytest.approx(-2.5)


def test_simc_without_dead_time_uses_a_tenth_of_tau():
    kp, ki, _ = simc_pid(k=1.0, tau=2.0, theta=0.0)
    assert kp == pytest.approx(2.0 / 0.2) and ki == pytest.approx(kp / min(2.0, 0.8))


def _margins(kc: float, ti: float, k: float, tau: float, theta: float):
    """Gain and phase margins of Kc(1 + 1/(Ti s))·k e^(−θs)/(τs + 1), delay kept exact."""
    def gain(w):
        return abs(kc * (1 + 1 / (1j * w * ti)) * k / (1j * w * tau + 1))

    def phase(w):  # unwrapped, radians
        return -math.atan(1 / (w * ti)) - w * theta - math.atan(w * tau)

    wc = brentq(lambda w: gain(w) - 1.0, 1e-4, 1e2)
    w180 = brentq(lambda w: phase(w) + math.pi, 1e-4, 1e2)
    return 1.0 / gain(w180), 180.0 + math.degrees(phase(wc))


def test_simc_robustness_for_a_near_integrating_process():
    # The SIMC paper reports, for an integrating process with τc = θ, a gain margin of 2.96 and a
    # phase margin of 46.9° (from memory). A lag with τ ≫ θ behaves like that integrator.
    k, tau, theta = 1000.0, 1000.0, 1.0
    kp, ki, _ = simc_pid(k, tau, theta)
    gm, pm = _margins(kp, kp / ki, k, tau, theta)
    assert gm == pytest.approx(2.96, rel=0.01)
    assert pm == pytest.approx(46.9, abs=0.5)


def test_alpha_suggestions():
    assert suggest_alpha_from_slope(300.0, 10.0) == 30.0
    assert suggest_alpha_fopdt(k=20.0, tau=0.5) == 40.0
    with pytest.raises(ValueError, match="delta_u = 0"):
        suggest_alpha_from_slope(1.0, 0.0)
    with pytest.raises(ValueError, match="slope = 0"):
        suggest_alpha_from_slope(0.0, 1.0)


def test_effective_delay_and_validation():
    assert effective_delay(0.05, 0.01) == pytest.approx(0.065)
    assert effective_delay(0.0, 0.01, transport_samples=0) == pytest.approx(0.005)
    for call, needle in (
        (lambda: simc_pid(0.0, 1.0, 0.1), "k = 0"),
        (lambda: simc_pid(1.0, -1.0, 0.1), "tau = -1.0"),
        (lambda: simc_pid(1.0, 1.0, -0.1), "theta = -0.1"),
        (lambda: simc_pid(1.0, 1.0, 0.1, tau_c=0.0), "tau_c = 0.0"),
        (lambda: effective_delay(0.1, 0.01, transport_samples=-1), "transport_samples"),
    ):
        with pytest.raises(ValueError, match=needle):
            call()
