"""The plant interface shared by the simulated device, the offline loop and the tests.

A plant is a continuous-time model ``dx/dt = f(t, x, u)`` advanced by fixed-step RK4 with the
actuator value ``u`` held over each call (zero-order hold, as on the device). Channels are the
measured quantities in a fixed order; ``read()`` gives them noise-free (sensor noise is added by
``rigloop.plants.sensors.SensorModel``).

Two notions of the ultra-local model's alpha = d(y^(m))/du are offered, because the armature
inductance gives the speed relative degree 2 with respect to the voltage:

- ``true_alpha`` (quasi-static): the current is taken at its quasi-steady value
  ``i = (V - K w)/R``. This is what a bump test's initial slope measures over a window longer
  than L/R, and what an iP controller sampling much slower than L/R sees.
- ``true_alpha_instantaneous``: the full model, current as a state.

For both, ``order`` below the channel's relative degree gives 0.0 (y^(m) does not depend on u);
``order`` above it raises ValueError (y^(m) would depend on the derivatives of u).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, Protocol, runtime_checkable

import numpy as np

from rigloop.plants.dc_machine import MachineConstants
from rigloop.plants.rk4 import RK4, substeps_for

PLANT_KINDS = ("fan", "motor")


@runtime_checkable
class Plant(Protocol):
    """What every plant offers (see the module docstring)."""

    kind: str
    channel_names: tuple[str, ...]
    channel_units: tuple[str, ...]
    actuator_name: str
    actuator_unit: str
    u_min: float
    u_max: float
    u_safe: float
    state: np.ndarray
    t: float
    nominal_noise_std: Mapping[str, float]
    nominal_quantum: Mapping[str, float]

    def rhs(self, t: float, x: np.ndarray, u: float) -> np.ndarray: ...      # dx/dt (for scipy)
    def reset(self, u0: float | None = None) -> None: ...    # None: rest; else steady state at u0
    def advance(self, u: float, dt: float) -> None: ...      # RK4 with internal sub-steps
    def read(self) -> np.ndarray: ...                        # channels, noise-free
    def outputs(self, x: np.ndarray) -> np.ndarray: ...      # exact channels of a state
    def channel_index(self, channel: str) -> int: ...
    def set_load(self, torque: float) -> None: ...           # load torque [N m] from now on
    def load_torque(self, t: float) -> float: ...
    def true_alpha(self, channel: str, order: int, u: float) -> float: ...   # quasi-static
    def true_alpha_instantaneous(self, channel: str, order: int, u: float) -> float: ...
    def quasi_static_rate(self, channel: str, order: int, u: float) -> float: ...  # y^(m) now
    def static_gain(self, channel: str, u: float) -> float: ...   # dy_ss/du around u
    def steady_state(self, u: float) -> np.ndarray: ...           # state at constant u
    def steady_input(self, channel: str, value: float) -> float: ...  # u holding y = value


class PlantBase:
    """Shared machinery: time, load torque, RK4 advance, channel lookup, argument checks.

    Subclasses set the class attributes, build ``self.machine`` (MachineConstants) and
    implement ``_rhs_into``, ``outputs``, ``steady_state`` and the alpha/gain methods.
    """

    kind: str = ""
    channel_names: tuple[str, ...] = ()
    channel_units: tuple[str, ...] = ()
    actuator_name: str = ""
    actuator_unit: str = ""
    nominal_noise_std: Mapping[str, float] = {}
    nominal_quantum: Mapping[str, float] = {}
    # Relative degree of each channel w.r.t. u: quasi-static model and full model.
    relative_degree_quasi_static: Mapping[str, int] = {}
    relative_degree_full: Mapping[str, int] = {}

    def __init__(self, machine: MachineConstants, state_size: int, u_min: float, u_max: float,
                 u_safe: float, max_substep_s: float | None,
                 load_step_time_s: float | None, load_step_torque_nm: float) -> None:
        self.machine = machine
        self.u_min = float(u_min)
        self.u_max = float(u_max)
        self.u_safe = float(u_safe)
        # Half the fastest time constant keeps h*lambda >= -0.5 for the fastest mode: well
        # inside RK4's stability region (about -2.8) and accurate.
        self.max_substep_s = (
            float(max_substep_s) if max_substep_s is not None
            else 0.5 * machine.fastest_time_constant
        )
        self._load_step_time = load_step_time_s
        self._load_step_torque = float(load_step_torque_nm)
        self.state = np.zeros(state_size)
        self.t = 0.0
        self._base_load = 0.0
        # Load torque held during ``advance`` (the RHS uses it instead of load_torque(t)).
        self._held_load: float | None = None
        self._rk4 = RK4(self._rhs_into, state_size)
        self._substeps_cache: tuple[float, int] = (-1.0, 1)

    # --- to implement -----------------------------------------------------------------------
    def _rhs_into(self, t: float, x: np.ndarray, u: float, out: np.ndarray) -> None:
        raise NotImplementedError

    def outputs(self, x: np.ndarray) -> np.ndarray:
        """Exact channel values of state ``x`` (no sensor effects)."""
        raise NotImplementedError

    def steady_state(self, u: float) -> np.ndarray:
        raise NotImplementedError

    # --- shared -----------------------------------------------------------------------------
    def rhs(self, t: float, x: np.ndarray, u: float) -> np.ndarray:
        """dx/dt at (t, x, u); allocates its result (for scipy's integrators and tests)."""
        out = np.empty(self.state.size)
        self._rhs_into(float(t), np.asarray(x, dtype=float), float(u), out)
        return out

    def reset(self, u0: float | None = None) -> None:
        """Time 0, no load set by ``set_load``; at rest (u0 None) or at the steady state for u0."""
        self.t = 0.0
        self._base_load = 0.0
        if u0 is None:
            self.state[:] = self._rest_state()
        else:
            self.state[:] = self.steady_state(self._check_u(u0, "u0"))

    def _rest_state(self) -> np.ndarray:
        return np.zeros(self.state.size)

    def advance(self, u: float, dt: float) -> None:
        """Advance by ``dt`` seconds with ``u`` held (RK4, sub-steps of at most max_substep_s).

        The load torque is held over the call too, at its value at the call's start time: a
        load step acts from the first tick at or after its time, never inside a sub-step (an
        RK4 stage straddling the jump would cost first-order accuracy). The model does not
        saturate ``u``: the device and the offline loop clamp it first.
        """
        u = self._check_u(u, "u")
        dt = float(dt)
        if not (math.isfinite(dt) and dt > 0.0):
            raise ValueError(f"advance: dt must be a positive finite number of seconds, got {dt!r}")
        last_dt, n = self._substeps_cache
        if dt != last_dt:
            n = substeps_for(dt, self.max_substep_s)
            self._substeps_cache = (dt, n)
        self._held_load = self.load_torque(self.t)
        try:
            self.t = self._rk4.advance(self.t, self.state, u, dt, n)
        finally:
            self._held_load = None

    #: Index of the rotor speed in the state (both plants are DC machines: ``[i, w, ...]``).
    speed_state_index = 1
    #: Index of the shaft angle in the state, if the plant has one.
    angle_state_index: int | None = None

    def stop_rotor(self, before: np.ndarray | None = None) -> None:
        """Hold the rotor: speed zero and the angle back to ``before`` (the state before the last
        advance). A locked rotor (sim fault) is held so after every advance: the current rises
        to its stall value and the shaft does not creep."""
        self.state[self.speed_state_index] = 0.0
        if before is not None and self.angle_state_index is not None:
            self.state[self.angle_state_index] = before[self.angle_state_index]

    def read(self) -> np.ndarray:
        """Noise-free channel values as the rig's sensors deliver them (see ``outputs``)."""
        return self.outputs(self.state)

    def set_load(self, torque: float) -> None:
        """Set the load torque [N m] acting from now on (positive opposes positive speed)."""
        torque = float(torque)
        if not math.isfinite(torque):
            raise ValueError(f"set_load: torque must be a finite number of N m, got {torque!r}")
        self._base_load = torque

    def load_torque(self, t: float) -> float:
        """Load torque at time t: the value of ``set_load`` plus the configured load step.

        Times within 1 ns of the step count as reached, so that a step placed on a sample
        boundary is not shifted by one sub-step through rounding of the accumulated time.
        """
        step_time = self._load_step_time
        if step_time is not None and t >= step_time - 1e-9:
            return self._base_load + self._load_step_torque
        return self._base_load

    def steady_input(self, channel: str, value: float) -> float:
        """The constant u whose steady state gives ``channel`` = ``value`` (bisection on u).

        Used to start a run in equilibrium at a reference's initial level. Assumes the steady
        output is monotonic in u over [u_min, u_max] (true for the channels of our plants);
        ValueError when ``value`` lies outside the reachable range.
        """
        index = self.channel_index(channel)
        self.static_gain(channel, self.u_safe)  # raises for channels without a steady state
        lo, hi = self.u_min, self.u_max
        y_lo = float(self.outputs(self.steady_state(lo))[index])
        y_hi = float(self.outputs(self.steady_state(hi))[index])
        if not min(y_lo, y_hi) <= value <= max(y_lo, y_hi):
            raise ValueError(
                f"{channel} = {value!r} cannot be held in steady state; reachable range with "
                f"{self.actuator_name} in [{lo}, {hi}] {self.actuator_unit}: "
                f"[{min(y_lo, y_hi):.6g}, {max(y_lo, y_hi):.6g}]"
            )
        rising = y_hi >= y_lo
        for _ in range(100):
            mid = 0.5 * (lo + hi)
            y_mid = float(self.outputs(self.steady_state(mid))[index])
            if (y_mid < value) == rising:
                lo = mid
            else:
                hi = mid
            if hi - lo <= 1e-12 * max(1.0, abs(mid)):
                break
        return 0.5 * (lo + hi)

    def channel_index(self, channel: str) -> int:
        """Index of ``channel`` in ``channel_names``; ValueError naming the allowed names."""
        try:
            return self.channel_names.index(channel)
        except ValueError:
            raise ValueError(
                f"unknown {self.kind} channel {channel!r}; allowed: {', '.join(self.channel_names)}"
            ) from None

    def _check_u(self, u: float, name: str) -> float:
        try:
            value = float(u)
        except (TypeError, ValueError):
            raise ValueError(f"{name} must be a number of {self.actuator_unit}, got {u!r}") from None
        if not math.isfinite(value):
            raise ValueError(f"{name} must be finite, got {u!r}")
        return value

    def _check_order(self, channel: str, order: int, degrees: Mapping[str, int],
                     model: str) -> int:
        """Relative degree of ``channel``; raise if ``order`` is not 1 or 2 or exceeds it."""
        self.channel_index(channel)
        if order not in (1, 2):
            raise ValueError(f"order must be 1 or 2, got {order!r}")
        degree = degrees[channel]
        if order > degree:
            raise ValueError(
                f"{channel} has relative degree {degree} with respect to {self.actuator_name} in "
                f"the {model} model, so its derivative of order {order} depends on derivatives "
                f"of {self.actuator_name}; use order {degree}"
            )
        return degree


def make_plant(kind: str, params: dict[str, Any] | None = None) -> PlantBase:
    """Build a plant of ``kind`` ("fan" | "motor") with ``params`` overriding its defaults.

    Unknown parameter keys or bad values raise ValueError naming the key and what is allowed.
    """
    if kind == "fan":
        from rigloop.plants.fan import FanPlant

        return FanPlant.from_params(params)
    if kind == "motor":
        from rigloop.plants.motor import MotorPlant

        return MotorPlant.from_params(params)
    raise ValueError(f"unknown plant kind {kind!r}; allowed: {', '.join(PLANT_KINDS)}")


def plant_parameters(kind: str) -> list[tuple[str, Any, str, str]]:
    """(key, default, unit, doc) of every parameter of a plant kind (for docs and `--help`)."""
    from rigloop.plants.params import describe

    if kind == "fan":
        from rigloop.plants.fan import FanParams

        return describe(FanParams)
    if kind == "motor":
        from rigloop.plants.motor import MotorParams

        return describe(MotorParams)
    raise ValueError(f"unknown plant kind {kind!r}; allowed: {', '.join(PLANT_KINDS)}")
