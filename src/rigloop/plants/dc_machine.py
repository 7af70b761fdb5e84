"""Shared electro-mechanics of a brushed DC machine (used by the fan and the motor plants).

Armature and rotor, with the torque constant equal to the back-EMF constant (SI units)::

    L di/dt = V - R i - K w
    J dw/dt = K i - tau_f(w) - tau_load
    tau_f(w) = b w + k_q w |w| + tau_c tanh(w / eps)

``tau_f`` lumps viscous friction (b), a quadratic drag (k_q, the fan's aerodynamic load; zero
for the motor) and dry (sliding) friction made smooth by ``tanh`` so that a fixed-step integrator
does not chatter at w = 0 (``eps`` is the speed over which the friction torque reverses).

In steady state (di/dt = dw/dt = 0) the speed solves ``g(w) = 0`` with
``g(w) = K (V - K w) / R - tau_f(w) - tau_load``; ``g`` is strictly decreasing, so the root is
unique and bisection finds it without a starting guess.
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class MachineConstants:
    """Constants of the DC machine in SI units (see the module docstring for the symbols)."""

    resistance: float   # R [ohm]
    inductance: float   # L [H]
    k: float            # K [N m/A] = [V s/rad]
    inertia: float      # J [kg m^2]
    viscous: float      # b [N m s/rad]
    quadratic: float    # k_q [N m s^2/rad^2]
    dry_friction: float  # tau_c [N m]
    smoothing: float    # eps [rad/s]

    @property
    def electrical_time_constant(self) -> float:
        """L/R [s]."""
        return self.inductance / self.resistance

    @property
    def mechanical_time_constant(self) -> float:
        """J / (b + K^2/R + tau_c/eps) [s]: the fastest the rotor alone can relax (low speed)."""
        damping = self.viscous + self.k * self.k / self.resistance + self.dry_friction / self.smoothing
        return self.inertia / damping

    @property
    def fastest_time_constant(self) -> float:
        """The smaller of the electrical and mechanical time constants: sets the RK4 sub-step."""
        return min(self.electrical_time_constant, self.mechanical_time_constant)


def friction_torque(w: float, c: MachineConstants) -> float:
    """tau_f(w) of the module docstring [N m]."""
    return c.viscous * w + c.quadratic * w * abs(w) + c.dry_friction * math.tanh(w / c.smoothing)


def friction_slope(w: float, c: MachineConstants) -> float:
    """d tau_f / dw [N m s/rad] (always > 0 when any friction is present)."""
    th = math.tanh(w / c.smoothing)
    return c.viscous + 2.0 * c.quadratic * abs(w) + c.dry_friction / c.smoothing * (1.0 - th * th)


def steady_speed(volts: float, load: float, c: MachineConstants) -> float:
    """Speed w [rad/s] at which the rotor is in equilibrium for armature voltage ``volts``."""
    back_emf_damping = c.k * c.k / c.resistance

    def g(w: float) -> float:
        return c.k * (volts - c.k * w) / c.resistance - friction_torque(w, c) - load

    # |w| beyond this bound makes g's sign that of -w, since the linear damping alone exceeds
    # every driving term.
    bound = (c.k * abs(volts) / c.resistance + abs(load) + c.dry_friction) / (
        back_emf_damping + c.viscous
    ) + 1.0
    lo, hi = -bound, bound
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if g(mid) > 0.0:
            lo = mid
        else:
            hi = mid
        if hi - lo <= 1e-13 * max(1.0, abs(mid)):
            break
    w = 0.5 * (lo + hi)
    # Two tangent (derivative) steps polish the bisection result to machine precision.
    for _ in range(2):
        slope = -back_emf_damping - friction_slope(w, c)
        w -= g(w) / slope
    return w


def steady_speed_gain(w: float, c: MachineConstants) -> float:
    """dw_ss/dV [rad/(s V)] at the equilibrium speed ``w`` (implicit differentiation of g = 0)."""
    return (c.k / c.resistance) / (c.k * c.k / c.resistance + friction_slope(w, c))
