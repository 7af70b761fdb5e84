"""Our bench DC motor with an inertia disc and an incremental encoder, armature voltage as input.

States x = [i, w, theta]: armature current [A], speed [rad/s], shaft angle [rad]. Input u:
armature voltage [V] from a bipolar driver, -Vs..Vs. With the DC-machine equations of
``dc_machine`` (no quadratic drag here)::

    L di/dt = V - R i - K w
    J dw/dt = K i - b w - tau_c tanh(w/eps) - tau_load(t)
    dtheta/dt = w

``tau_load(t)`` is the value set by ``set_load`` plus an optional load step (time, torque).
The encoder reports theta rounded to whole counts (``encoder_counts_per_rev``; 0 = ideal),
which ``read()`` applies; ``outputs()`` gives the exact angle.

Default parameters (``MotorParams``) are our own plausible small 12 V motor with a flywheel:
no-load speed about 230 rad/s at 12 V, L/R = 1.5 ms, mechanical time constant J R/K^2 = 0.4 s,
quasi-static alpha of the angle K/(R J) = 50 rad/s^2 per volt.

Caution: a motor with a flywheel stores energy. On the real rig guard rotating parts, keep a
hardwired emergency stop within reach, and follow local codes and licensed practice for the
supply.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from rigloop.plants.base import PlantBase
from rigloop.plants.dc_machine import (
    MachineConstants,
    friction_torque,
    steady_speed,
    steady_speed_gain,
)
from rigloop.plants.params import build_params, param


@dataclass(frozen=True)
class MotorParams:
    """Motor parameters (SI units; defaults for our 12 V bench motor with flywheel)."""

    supply_v: float = param(12.0, "V", "driver supply: the voltage range is -supply_v..supply_v")
    resistance_ohm: float = param(2.0, "ohm", "armature resistance R")
    inductance_h: float = param(0.003, "H", "armature inductance L")
    torque_constant: float = param(0.05, "N m/A", "torque constant K (= back-EMF constant, V s/rad)")
    inertia_kgm2: float = param(5.0e-4, "kg m^2", "rotor + flywheel inertia J")
    viscous_nms: float = param(2.0e-5, "N m s/rad", "viscous friction b", "nonnegative")
    dry_friction_nm: float = param(5.0e-3, "N m", "dry (sliding) friction torque tau_c", "nonnegative")
    friction_smoothing_rad_s: float = param(0.5, "rad/s", "speed over which the dry friction reverses (tanh width)")
    encoder_counts_per_rev: int = param(2048, "counts/rev", "encoder resolution (0: ideal angle)", "count")
    load_step_time_s: float | None = param(None, "s", "time of an optional load-torque step (null: none)", "optional_nonnegative")
    load_step_torque_nm: float = param(0.0, "N m", "size of that load-torque step (positive brakes)", "finite")
    max_substep_s: float | None = param(None, "s", "largest RK4 sub-step (null: half the fastest of L/R and the mechanical time constant)", "optional_positive")


class MotorPlant(PlantBase):
    """The bench motor model of the module docstring."""

    kind = "motor"
    channel_names = ("position_rad", "speed_rad_s", "current_a")
    channel_units = ("rad", "rad/s", "A")
    actuator_name = "voltage"
    actuator_unit = "V"
    # Nominal sensor imperfections for the simulated device (the encoder's counts are in read()).
    nominal_noise_std = {"position_rad": 0.0, "speed_rad_s": 0.2, "current_a": 0.01}
    nominal_quantum = {"position_rad": 0.0, "speed_rad_s": 0.01, "current_a": 0.001}
    relative_degree_quasi_static = {"position_rad": 2, "speed_rad_s": 1, "current_a": 1}
    relative_degree_full = {"position_rad": 3, "speed_rad_s": 2, "current_a": 1}
    angle_state_index = 2

    def __init__(self, params: MotorParams | None = None) -> None:
        p = params if params is not None else MotorParams()
        self.params = p
        machine = MachineConstants(
            resistance=p.resistance_ohm, inductance=p.inductance_h, k=p.torque_constant,
            inertia=p.inertia_kgm2, viscous=p.viscous_nms, quadratic=0.0,
            dry_friction=p.dry_friction_nm, smoothing=p.friction_smoothing_rad_s,
        )
        super().__init__(machine, 3, -p.supply_v, p.supply_v, 0.0, p.max_substep_s,
                         p.load_step_time_s, p.load_step_torque_nm)
        # Plain floats for the hot right-hand side (attribute lookups cost more than the math).
        self._rhs_constants = (machine.resistance, machine.inductance, machine.k, machine.inertia)
        counts = p.encoder_counts_per_rev
        self.encoder_quantum = 2.0 * math.pi / counts if counts > 0 else 0.0
        self.reset()

    @classmethod
    def from_params(cls, overrides: dict[str, Any] | None = None) -> MotorPlant:
        """Defaults with ``overrides`` applied by key (ValueError names bad keys/values)."""
        return cls(build_params(MotorParams, "motor", overrides))

    # --- model ------------------------------------------------------------------------------
    def _rhs_into(self, t: float, x: np.ndarray, u: float, out: np.ndarray) -> None:
        r, ind, k, j = self._rhs_constants
        i, w, _ = x.tolist()
        held = self._held_load
        load = held if held is not None else self.load_torque(t)
        out[0] = (u - r * i - k * w) / ind
        out[1] = (k * i - friction_torque(w, self.machine) - load) / j
        out[2] = w

    def outputs(self, x: np.ndarray) -> np.ndarray:
        """[position_rad, speed_rad_s, current_a] of state x (exact angle)."""
        i, w, theta = np.asarray(x, dtype=float).tolist()
        return np.array([theta, w, i])

    def read(self) -> np.ndarray:
        """Channel values with the angle rounded to whole encoder counts."""
        values = self.outputs(self.state)
        q = self.encoder_quantum
        if q > 0.0:
            values[0] = q * round(values[0] / q)
        return values

    def steady_state(self, u: float) -> np.ndarray:
        """[i, w, 0] in equilibrium at constant voltage u with the present load (angle set to 0)."""
        u = self._check_u(u, "u")
        c = self.machine
        w = steady_speed(u, self.load_torque(self.t), c)
        return np.array([(u - c.k * w) / c.resistance, w, 0.0])

    # --- ultra-local model quantities ---------------------------------------------------------
    def _quasi_acceleration(self, u: float) -> float:
        c = self.machine
        w = float(self.state[1])
        i_qs = (u - c.k * w) / c.resistance
        return (c.k * i_qs - friction_torque(w, c) - self.load_torque(self.t)) / c.inertia

    def quasi_static_rate(self, channel: str, order: int, u: float) -> float:
        """y^(order) at the present state with input u, current at its quasi-steady value.

        The current channel itself always uses the full model (it is the fast state).
        """
        self._check_order(channel, order, self.relative_degree_quasi_static, "quasi-static")
        c = self.machine
        i, w, _ = self.state.tolist()
        if channel == "current_a":
            return (u - c.resistance * i - c.k * w) / c.inductance
        if channel == "position_rad" and order == 1:
            return w
        return self._quasi_acceleration(u)

    def true_alpha(self, channel: str, order: int, u: float) -> float:
        """Quasi-static d(y^(m))/du (see ``rigloop.plants.base``).

        angle (order 2) and speed (order 1): K/(R J); current (order 1): 1/L; lower orders: 0.
        """
        degree = self._check_order(channel, order, self.relative_degree_quasi_static, "quasi-static")
        if order < degree:
            return 0.0
        c = self.machine
        if channel == "current_a":
            return 1.0 / c.inductance
        return c.k / (c.resistance * c.inertia)

    def true_alpha_instantaneous(self, channel: str, order: int, u: float) -> float:
        """Full-model d(y^(m))/du: speed (order 2) K/(L J); current (order 1) 1/L; else 0."""
        degree = self._check_order(channel, order, self.relative_degree_full, "full")
        if order < degree:
            return 0.0
        c = self.machine
        if channel == "current_a":
            return 1.0 / c.inductance
        return c.k / (c.inductance * c.inertia)

    def static_gain(self, channel: str, u: float) -> float:
        """dy_ss/du around the equilibrium at voltage u.

        speed: (K/R) / (K^2/R + d tau_f/dw); current: (1 - K dw/du)/R. The angle integrates the
        speed and has no static gain (ValueError).
        """
        self.channel_index(channel)
        if channel == "position_rad":
            raise ValueError(
                "position_rad integrates the speed, so it has no steady state for constant "
                "voltage and no static gain; ask for speed_rad_s instead"
            )
        c = self.machine
        _, w, _ = self.steady_state(u).tolist()
        dw_du = steady_speed_gain(w, c)
        if channel == "speed_rad_s":
            return dw_du
        return (1.0 - c.k * dw_du) / c.resistance
