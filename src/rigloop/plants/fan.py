"""Our bench fan: a 12 V brushed DC motor driving a 120 mm axial fan, PWM duty as input.

States x = [i, w, T]: armature current [A], rotor speed [rad/s], winding temperature [degC].
Input u: PWM duty [%] of the supply, averaged to V = Vs * u / 100 (the PWM frequency is far
above every time constant here). With the DC-machine equations of ``dc_machine``, the drag
term k_q w|w| being the fan's aerodynamic torque::

    L di/dt = V - R i - K w
    J dw/dt = K i - b w - k_q w|w| - tau_c tanh(w/eps) - tau_load
    C dT/dt = R i^2 - (T - T_amb) / R_th

Fan affinity laws (flow ~ n, pressure ~ n^2, power ~ n^3) fix the aerodynamic side: the
airflow is Q = k_Q w and the aerodynamic torque ~ w^2 (so the aerodynamic power ~ w^3). The
thermal model is one lumped first-order node heated by the copper losses: slow (minutes) and
only there so that a temperature limit can be exercised.

Default parameters (chosen for a plausible 12 V, 120 mm, ~3000 rpm fan; see ``FanParams``)
give at 100 % duty about 3000 rpm, 0.25 A, 100 m^3/h; electrical time constant L/R = 1.7 ms,
mechanical (linearised) time constant 0.65-0.7 s, thermal time constant R_th*C = 60 s;
quasi-static alpha of the speed about 43 rpm/s per % duty.

Caution: on the real rig, fan blades at speed cut fingers and throw loose objects; keep the
guard grilles on, and follow local codes and licensed practice for anything mains-powered.
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

RAD_S_TO_RPM = 60.0 / (2.0 * math.pi)


@dataclass(frozen=True)
class FanParams:
    """Fan parameters (SI units; defaults for our 12 V, 120 mm bench fan)."""

    supply_v: float = param(12.0, "V", "supply voltage switched by the PWM stage")
    resistance_ohm: float = param(6.0, "ohm", "armature resistance R")
    inductance_h: float = param(0.010, "H", "armature inductance L")
    torque_constant: float = param(0.0335, "N m/A", "torque constant K (= back-EMF constant, V s/rad)")
    inertia_kgm2: float = param(1.5e-4, "kg m^2", "rotor + impeller inertia J")
    viscous_nms: float = param(3.0e-6, "N m s/rad", "bearing viscous friction b", "nonnegative")
    aero_nms2: float = param(7.0e-8, "N m s^2/rad^2", "aerodynamic torque coefficient k_q (tau = k_q w|w|)", "nonnegative")
    dry_friction_nm: float = param(4.0e-4, "N m", "dry (sliding) friction torque tau_c", "nonnegative")
    friction_smoothing_rad_s: float = param(1.0, "rad/s", "speed over which the dry friction reverses (tanh width)")
    airflow_m3h_per_rad_s: float = param(0.32, "m^3/h per rad/s", "free-air flow per unit speed k_Q", "nonnegative")
    ambient_c: float = param(25.0, "degC", "ambient temperature", "finite")
    thermal_resistance_k_per_w: float = param(40.0, "K/W", "winding-to-ambient thermal resistance R_th")
    thermal_capacity_j_per_k: float = param(1.5, "J/K", "winding thermal capacity C")
    load_step_time_s: float | None = param(None, "s", "time of an optional load-torque step (null: none)", "optional_nonnegative")
    load_step_torque_nm: float = param(0.0, "N m", "size of that load-torque step (positive brakes)", "finite")
    max_substep_s: float | None = param(None, "s", "largest RK4 sub-step (null: half the fastest of L/R and the mechanical time constant)", "optional_positive")


class FanPlant(PlantBase):
    """The bench fan model of the module docstring."""

    kind = "fan"
    channel_names = ("speed_rpm", "current_a", "airflow_m3h", "temp_c")
    channel_units = ("rpm", "A", "m3/h", "degC")
    actuator_name = "duty"
    actuator_unit = "%"
    # Nominal sensor imperfections for the simulated device (std dev and resolution).
    nominal_noise_std = {"speed_rpm": 8.0, "current_a": 0.004, "airflow_m3h": 0.3, "temp_c": 0.05}
    nominal_quantum = {"speed_rpm": 1.0, "current_a": 0.001, "airflow_m3h": 0.1, "temp_c": 0.01}
    relative_degree_quasi_static = {"speed_rpm": 1, "current_a": 1, "airflow_m3h": 1, "temp_c": 1}
    relative_degree_full = {"speed_rpm": 2, "current_a": 1, "airflow_m3h": 2, "temp_c": 2}

    def __init__(self, params: FanParams | None = None) -> None:
        p = params if params is not None else FanParams()
        self.params = p
        machine = MachineConstants(
            resistance=p.resistance_ohm, inductance=p.inductance_h, k=p.torque_constant,
            inertia=p.inertia_kgm2, viscous=p.viscous_nms, quadratic=p.aero_nms2,
            dry_friction=p.dry_friction_nm, smoothing=p.friction_smoothing_rad_s,
        )
        super().__init__(machine, 3, 0.0, 100.0, 0.0, p.max_substep_s,
                         p.load_step_time_s, p.load_step_torque_nm)
        self._volts_per_percent = p.supply_v / 100.0
        # Plain floats for the hot right-hand side (attribute lookups cost more than the math).
        self._rhs_constants = (
            machine.resistance, machine.inductance, machine.k, machine.inertia,
            self._volts_per_percent, p.ambient_c, p.thermal_resistance_k_per_w,
            p.thermal_capacity_j_per_k,
        )
        self.reset()

    @classmethod
    def from_params(cls, overrides: dict[str, Any] | None = None) -> FanPlant:
        """Defaults with ``overrides`` applied by key (ValueError names bad keys/values)."""
        return cls(build_params(FanParams, "fan", overrides))

    # --- model ------------------------------------------------------------------------------
    def _rhs_into(self, t: float, x: np.ndarray, u: float, out: np.ndarray) -> None:
        r, ind, k, j, g, ambient, r_th, cap = self._rhs_constants
        i, w, temp = x.tolist()
        held = self._held_load
        load = held if held is not None else self.load_torque(t)
        out[0] = (g * u - r * i - k * w) / ind
        out[1] = (k * i - friction_torque(w, self.machine) - load) / j
        out[2] = (r * i * i - (temp - ambient) / r_th) / cap

    def _rest_state(self) -> np.ndarray:
        return np.array([0.0, 0.0, self.params.ambient_c])

    def outputs(self, x: np.ndarray) -> np.ndarray:
        """[speed_rpm, current_a, airflow_m3h, temp_c] of state x."""
        i, w, temp = np.asarray(x, dtype=float).tolist()
        return np.array([w * RAD_S_TO_RPM, i, self.params.airflow_m3h_per_rad_s * w, temp])

    def aero_torque(self, w: float) -> float:
        """Aerodynamic torque k_q w|w| [N m] at speed w [rad/s]."""
        return self.params.aero_nms2 * w * abs(w)

    def steady_state(self, u: float) -> np.ndarray:
        """[i, w, T] in equilibrium at constant duty u with the present load torque."""
        u = self._check_u(u, "u")
        c = self.machine
        volts = self._volts_per_percent * u
        w = steady_speed(volts, self.load_torque(self.t), c)
        i = (volts - c.k * w) / c.resistance
        temp = self.params.ambient_c + self.params.thermal_resistance_k_per_w * c.resistance * i * i
        return np.array([i, w, temp])

    # --- ultra-local model quantities ---------------------------------------------------------
    def _quasi_current(self, u: float) -> float:
        c = self.machine
        return (self._volts_per_percent * u - c.k * self.state[1]) / c.resistance

    def quasi_static_rate(self, channel: str, order: int, u: float) -> float:
        """y^(order) at the present state with input u, current at its quasi-steady value.

        The current channel itself always uses the full model (it is the fast state).
        """
        self._check_order(channel, order, self.relative_degree_quasi_static, "quasi-static")
        c, p = self.machine, self.params
        i, w, temp = self.state.tolist()
        if channel == "current_a":
            return (self._volts_per_percent * u - c.resistance * i - c.k * w) / c.inductance
        i_qs = self._quasi_current(u)
        if channel == "temp_c":
            return (c.resistance * i_qs * i_qs - (temp - p.ambient_c) / p.thermal_resistance_k_per_w) / (
                p.thermal_capacity_j_per_k
            )
        dw = (c.k * i_qs - friction_torque(w, c) - self.load_torque(self.t)) / c.inertia
        return dw * (RAD_S_TO_RPM if channel == "speed_rpm" else p.airflow_m3h_per_rad_s)

    def true_alpha(self, channel: str, order: int, u: float) -> float:
        """Quasi-static d(y^(m))/du at the present state (see ``rigloop.plants.base``).

        speed: (K g/(R J)) * 60/(2 pi); airflow: k_Q K g/(R J); temperature: 2 i_qs g / C with
        i_qs = (g u - K w)/R; current: g/L. Here g = Vs/100 [V per %].
        """
        degree = self._check_order(channel, order, self.relative_degree_quasi_static, "quasi-static")
        if order < degree:
            return 0.0
        c, p, g = self.machine, self.params, self._volts_per_percent
        if channel == "current_a":
            return g / c.inductance
        if channel == "temp_c":
            return 2.0 * self._quasi_current(u) * g / p.thermal_capacity_j_per_k
        dw_du = c.k * g / (c.resistance * c.inertia)
        return dw_du * (RAD_S_TO_RPM if channel == "speed_rpm" else p.airflow_m3h_per_rad_s)

    def true_alpha_instantaneous(self, channel: str, order: int, u: float) -> float:
        """Full-model d(y^(m))/du at the present state (current as a state).

        speed (order 2): (K g/(L J)) * 60/(2 pi); airflow (order 2): k_Q K g/(L J);
        temperature (order 2): 2 R i g/(L C); current (order 1): g/L; lower orders: 0.
        """
        degree = self._check_order(channel, order, self.relative_degree_full, "full")
        if order < degree:
            return 0.0
        c, p, g = self.machine, self.params, self._volts_per_percent
        if channel == "current_a":
            return g / c.inductance
        if channel == "temp_c":
            i = float(self.state[0])
            return 2.0 * c.resistance * i * g / (c.inductance * p.thermal_capacity_j_per_k)
        d2w_du = c.k * g / (c.inductance * c.inertia)
        return d2w_du * (RAD_S_TO_RPM if channel == "speed_rpm" else p.airflow_m3h_per_rad_s)

    def static_gain(self, channel: str, u: float) -> float:
        """dy_ss/du around the equilibrium at duty u (implicit differentiation of equilibrium).

        dw/du = g * (K/R) / (K^2/R + d tau_f/dw); di/du = (g - K dw/du)/R;
        dT/du = 2 R_th R i di/du.
        """
        self.channel_index(channel)
        c, p, g = self.machine, self.params, self._volts_per_percent
        i, w, _ = self.steady_state(u).tolist()
        dw_du = g * steady_speed_gain(w, c)
        if channel == "speed_rpm":
            return dw_du * RAD_S_TO_RPM
        if channel == "airflow_m3h":
            return dw_du * p.airflow_m3h_per_rad_s
        di_du = (g - c.k * dw_du) / c.resistance
        if channel == "current_a":
            return di_du
        return 2.0 * p.thermal_resistance_k_per_w * c.resistance * i * di_du
