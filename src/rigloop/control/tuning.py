"""Gain suggestions: from a wanted closed-loop behaviour, and SIMC rules for the PID baseline.

Intelligent laws: with F̂ = F the error obeys a linear ODE whose coefficients are the gains, so
gains follow from the wanted dynamics directly —

* iP: ``e' + Kp·e = 0``, time constant ``tau_cl = 1/Kp``;
* iPI: ``e'' + Kp·e' + Ki·e = 0``, so ``(Kp, Ki) = (2ζω, ω²)``;
* iPD: ``e'' + Kd·e' + Kp·e = 0``, so ``(Kp, Kd) = (ω², 2ζω)``.

alpha is a scale, not a model: pick it so that ``alpha·u`` and ``y^(m)`` have the same size, e.g.
from the initial slope of a bump test (:func:`suggest_alpha_from_slope`) or from a
first-order-plus-dead-time fit (:func:`suggest_alpha_fopdt`).

Sampling limits the iP: with the device's one-sample transport delay and F̂ = F the sampled error
obeys ``e_k+2 = e_k+1 − Kp·Ts·e_k``, stable for ``Kp·Ts < 1`` and free of oscillation for
``Kp·Ts <= 1/4`` (:func:`ip_kp_limits`).
"""

from __future__ import annotations

import math


def _num(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ValueError(f"{name} = {value!r} is not a finite number")
    return float(value)


def _pos(name: str, value: object) -> float:
    v = _num(name, value)
    if v <= 0:
        raise ValueError(f"{name} = {v} must be > 0")
    return v


def ip_gains(tau_cl: float) -> float:
    """Kp of an iP for a closed-loop time constant ``tau_cl`` (s): ``Kp = 1/tau_cl``."""
    return 1.0 / _pos("tau_cl", tau_cl)


def ipi_gains(omega: float, zeta: float) -> tuple[float, float]:
    """(Kp, Ki) of an iPI for natural frequency ``omega`` (rad/s) and damping ``zeta``."""
    omega, zeta = _pos("omega", omega), _pos("zeta", zeta)
    return 2.0 * zeta * omega, omega * omega


def ipd_gains(omega: float, zeta: float) -> tuple[float, float]:
    """(Kp, Kd) = (ω², 2ζω) of an iPD for natural frequency ``omega`` and damping ``zeta``."""
    omega, zeta = _pos("omega", omega), _pos("zeta", zeta)
    return omega * omega, 2.0 * zeta * omega


def ip_kp_limits(ts: float) -> tuple[float, float]:
    """(largest Kp without oscillation, stability bound on Kp) of a sampled iP with F̂ = F.

    From ``z² − z + Kp·Ts = 0`` (one-sample transport delay): real roots for ``Kp·Ts <= 1/4``,
    roots inside the unit circle for ``Kp·Ts < 1``.
    """
    ts = _pos("ts", ts)
    return 0.25 / ts, 1.0 / ts


def suggest_alpha_from_slope(slope: float, delta_u: float) -> float:
    """alpha = initial slope of ``y^(m)`` after a step ``delta_u`` of the input, per unit of u.

    For order 1 pass the initial rate of change of y (units/s); for order 2 its initial
    acceleration. The sign carries the direction of action.
    """
    slope, delta_u = _num("slope", slope), _num("delta_u", delta_u)
    if delta_u == 0:
        raise ValueError("delta_u = 0: the input step must be non-zero")
    if slope == 0:
        raise ValueError("slope = 0: the output did not move; use a larger input step")
    return slope / delta_u


def suggest_alpha_fopdt(k: float, tau: float) -> float:
    """alpha of a first-order model ``tau·y' = −y + k·u``: the initial slope per unit u, ``k/tau``."""
    k, tau = _num("k", k), _pos("tau", tau)
    if k == 0:
        raise ValueError("k = 0: a process without gain cannot be controlled")
    return k / tau


def effective_delay(theta: float, ts: float, transport_samples: int = 1) -> float:
    """Dead time a sampled loop adds to a continuous model's ``theta``.

    A zero-order hold acts like half a sample of delay, and the rig answers each sample one
    period later (common practice: ``theta + Ts/2 + transport_samples·Ts``).
    """
    theta, ts = _num("theta", theta), _pos("ts", ts)
    if theta < 0:
        raise ValueError(f"theta = {theta} must be >= 0")
    if isinstance(transport_samples, bool) or not isinstance(transport_samples, int) or transport_samples < 0:
        raise ValueError(f"transport_samples = {transport_samples!r} must be a whole number >= 0")
    return theta + 0.5 * ts + transport_samples * ts


def simc_pid(k: float, tau: float, theta: float, tau_c: float | None = None, tau2: float = 0.0) -> tuple[float, float, float]:
    """PID gains (Kp, Ki, Kd) for ``k·e^(−θs)/((τs + 1)(τ2·s + 1))`` by the SIMC rules.

    SIMC rules ('Simple analytic rules for model reduction and PID controller tuning', Journal
    of Process Control, 2003): ``Kc = τ/(k·(τc + θ))``, ``τI = min(τ, 4(τc + θ))``, ``τD = τ2``
    (a PI controller for a first-order model, τ2 = 0). The rules give the series form
    ``Kc(1 + 1/(τI·s))(1 + τD·s)``; this returns the parallel gains of the baseline PID
    (:mod:`rigloop.control.laws`): ``Kp = Kc(1 + τD/τI)``, ``Ki = Kc/τI``, ``Kd = Kc·τD``.

    ``tau_c`` is the wanted closed-loop time constant; by default ``τc = θ`` (the rules'
    recommendation for tight, robust control). With ``θ = 0`` that would ask for infinite gain,
    so the default then becomes ``τc = τ/10`` (our choice; pass ``tau_c`` to set it). For a
    sampled loop, include the sampling delay in θ (:func:`effective_delay`). A negative ``k``
    (reverse-acting process) gives negative gains.
    """
    k = _num("k", k)
    if k == 0:
        raise ValueError("k = 0: a process without gain cannot be controlled")
    tau = _pos("tau", tau)
    theta = _num("theta", theta)
    if theta < 0:
        raise ValueError(f"theta = {theta} must be >= 0 (a dead time)")
    tau2 = _num("tau2", tau2)
    if tau2 < 0:
        raise ValueError(f"tau2 = {tau2} must be >= 0")
    if tau_c is None:
        tau_c = theta if theta > 0 else tau / 10.0
    else:
        tau_c = _pos("tau_c", tau_c)
    kc = tau / (k * (tau_c + theta))
    ti = min(tau, 4.0 * (tau_c + theta))
    td = tau2
    return kc * (1.0 + td / ti), kc / ti, kc * td
