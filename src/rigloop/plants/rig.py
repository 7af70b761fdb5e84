"""A realistic rig around a plant: actuator imperfections -> plant -> load -> sensors.

Why a layer and not new plant models: the imperfections that break controllers on a real bench
are the same for a fan and a motor, so they are written once and wrapped around any plant:

1. **Actuator**: a dead zone of half-width ``dead_zone`` around zero drive (a PWM stage or
   driver that does not move the motor for small commands). Outside it the drive is rescaled so
   that full scale stays full scale: ``v = sign(u) (|u| - d) U / (U - d)`` with ``U`` the larger
   of |u_min|, |u_max|; inside it ``v = 0``; ``drive_sign`` -1 swaps the motor leads (a positive
   command turns it backwards: alpha and the gain change sign). Then a transport delay: the plant receives
   ``v(t - input_delay_s)`` (a drive's filtering and dead time, a duct's air travel).
2. **Plant**: the wrapped model, unchanged (friction: its ``viscous_*`` and ``dry_friction_nm``).
3. **Load**: :mod:`rigloop.plants.load` (drift, random walk, steps, angle ripple) on top of
   ``set_load`` and the plant's own load step.
4. **Output and sensors**: for the motor, a gearbox of ratio ``gear_ratio`` with ``backlash_rad``
   of play at the output shaft (a play operator; the encoder sits on the output shaft and the
   angle ripple acts only while the teeth are in contact); a pulse tach on the speed channel
   (:mod:`rigloop.plants.tach`). Noise and quantization are the
   :class:`rigloop.plants.sensors.SensorModel` applied after ``read()``.

The wrapper follows the :class:`rigloop.plants.base.Plant` protocol, so the simulated device
and the offline loop take it unchanged. Its truth functions (``true_alpha``, ``static_gain``,
``true_delay``) include the layers: alpha and gain through the dead zone's slope and the gear.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from rigloop.plants.load import LoadProfile, LoadSpec
from rigloop.plants.tach import PulseTach

#: Speed channel of each plant kind and its value per rad/s of the motor shaft (before gearing).
SPEED_CHANNEL = {"fan": ("speed_rpm", 60.0 / (2.0 * math.pi)), "motor": ("speed_rad_s", 1.0)}
#: Channels divided by the gear ratio (output-shaft quantities).
GEARED_CHANNELS = ("position_rad", "speed_rad_s")


@dataclass(frozen=True)
class RigSpec:
    """Imperfections around a plant (defaults: none, the plant as it is)."""

    dead_zone: float = 0.0
    input_delay_s: float = 0.0
    drive_sign: int = 1
    gear_ratio: float = 1.0
    backlash_rad: float = 0.0
    tach_pulses_per_rev: int = 0
    tach_timeout_s: float = 0.2
    load: LoadSpec = field(default_factory=LoadSpec)

    def check(self, plant: Any) -> None:
        """RigOptionError naming the option when it does not suit ``plant``."""
        u_span = max(abs(plant.u_min), abs(plant.u_max))
        if not (0.0 <= self.dead_zone < u_span):
            raise RigOptionError("dead_zone", self.dead_zone,
                                 f"give a number >= 0 and below the actuator's full scale "
                                 f"{u_span:g} {plant.actuator_unit}")
        if not (0.0 <= self.input_delay_s <= 1.0):
            raise RigOptionError("input_delay_s", self.input_delay_s, "give 0..1 s")
        if self.drive_sign not in (1, -1):
            raise RigOptionError("drive_sign", self.drive_sign, "give 1, or -1 for swapped leads")
        if not self.gear_ratio > 0.0:
            raise RigOptionError("gear_ratio", self.gear_ratio, "give a number > 0")
        if not self.backlash_rad >= 0.0:
            raise RigOptionError("backlash_rad", self.backlash_rad, "give a number >= 0")
        if "position_rad" not in plant.channel_names:
            for key, value in (("gear_ratio", self.gear_ratio - 1.0),
                               ("backlash_rad", self.backlash_rad),
                               ("load.ripple_nm", self.load.ripple_nm)):
                if value:
                    raise RigOptionError(key, getattr(self, key, self.load.ripple_nm),
                                         f"needs a plant with an angle; the {plant.kind} has "
                                         f"none: use the motor plant or remove it")
        if self.tach_pulses_per_rev and plant.kind not in SPEED_CHANNEL:
            raise RigOptionError("tach_pulses_per_rev", self.tach_pulses_per_rev,
                                 f"needs a speed channel; the {plant.kind} has none")


class RigOptionError(ValueError):
    """A ``device.sim.rig`` option that does not suit the plant (``key`` below device.sim.rig)."""

    def __init__(self, key: str, value: object, why: str) -> None:
        super().__init__(f"{key} = {value!r}: {why}")
        self.key = key
        self.value = value
        self.why = why


class Rig:
    """A plant with the layers of the module docstring (``Plant`` protocol)."""

    def __init__(self, plant: Any, spec: RigSpec | None = None) -> None:
        self.inner = plant
        self.spec = spec if spec is not None else RigSpec()
        self.spec.check(plant)
        for name in ("kind", "channel_names", "channel_units", "actuator_name", "actuator_unit",
                     "u_min", "u_max", "u_safe", "nominal_noise_std", "nominal_quantum"):
            setattr(self, name, getattr(plant, name))
        s = self.spec
        self._u_span = max(abs(plant.u_min), abs(plant.u_max))
        self._dz_scale = self._u_span / (self._u_span - s.dead_zone)
        self._load = LoadProfile(s.load)
        self._base_load = 0.0
        self._tach = (PulseTach(s.tach_pulses_per_rev, s.tach_timeout_s)
                      if s.tach_pulses_per_rev else None)
        self._speed_index, self._speed_factor = (
            (plant.channel_index(SPEED_CHANNEL[plant.kind][0]), SPEED_CHANNEL[plant.kind][1])
            if plant.kind in SPEED_CHANNEL else (None, 1.0))
        self._pos_index = (plant.channel_names.index("position_rad")
                           if "position_rad" in plant.channel_names else None)
        self._geared = np.array([1.0 / s.gear_ratio if n in GEARED_CHANNELS else 1.0
                                 for n in plant.channel_names])
        self.encoder_quantum = float(getattr(plant, "encoder_quantum", 0.0))
        self.reset()

    # --- protocol: state and time are the plant's ---------------------------------------------
    @property
    def state(self) -> np.ndarray:
        return self.inner.state

    @property
    def t(self) -> float:
        return self.inner.t

    @property
    def max_substep_s(self) -> float:
        return self.inner.max_substep_s

    def rhs(self, t: float, x: np.ndarray, u: float) -> np.ndarray:
        """The plant's dx/dt with the drive ``u`` after the dead zone (no delay: u is the
        plant's input at t)."""
        return self.inner.rhs(t, x, self.drive(u))

    # --- actuator -----------------------------------------------------------------------------
    def drive(self, u: float) -> float:
        """The drive the plant gets for command ``u`` (dead zone, rescaled, sign; no delay)."""
        d, sign = self.spec.dead_zone, self.spec.drive_sign
        if d == 0.0:
            return float(u) * sign
        excess = abs(u) - d
        return math.copysign(excess * self._dz_scale, u) * sign if excess > 0.0 else 0.0

    def drive_slope(self, u: float) -> float:
        """d drive / du at ``u``: 0 inside the dead zone, its rescaling (and sign) outside."""
        d, sign = self.spec.dead_zone, self.spec.drive_sign
        if d == 0.0:
            return float(sign)
        return self._dz_scale * sign if abs(u) > d else 0.0

    def command_for_drive(self, v: float) -> float:
        """The command giving drive ``v`` (the edge of the dead zone for v = 0)."""
        d = self.spec.dead_zone
        v = float(v) * self.spec.drive_sign
        if d == 0.0 or v == 0.0:
            return v
        return math.copysign(abs(v) / self._dz_scale + d, v)

    def reset(self, u0: float | None = None) -> None:
        """Time 0 at rest or in the steady state for command u0 (delay line full of u0)."""
        self._base_load = 0.0
        self._load.reset()
        drive0 = self.drive(self.u_safe if u0 is None else u0)
        self._play = 0.0
        self.inner.reset(None)
        self._apply_load()
        if u0 is not None:
            self.inner.reset(drive0)
            self._apply_load()
            self.inner.state[:] = self.inner.steady_state(drive0)
        # (time from which the plant gets the drive, drive), oldest first.
        self._pending: deque[tuple[float, float]] = deque()
        self._drive_now = drive0
        self._play = self._motor_angle() / self.spec.gear_ratio
        if self._tach is not None:
            self._tach.reset(0.0, float(self.inner.state[1]))

    # --- load ---------------------------------------------------------------------------------
    def set_load(self, torque: float) -> None:
        torque = float(torque)
        if not math.isfinite(torque):
            raise ValueError(f"set_load: torque must be a finite number of N m, got {torque!r}")
        self._base_load = torque
        self._apply_load()

    def _motor_angle(self, x: np.ndarray | None = None) -> float:
        """Motor shaft angle [rad] of state x (the present state by default); 0 without one."""
        pos = self._pos_index
        if pos is None:
            return 0.0
        return float(self.inner.outputs(self.inner.state if x is None else x)[pos])

    def _in_contact(self) -> bool:
        if self._pos_index is None or self.spec.backlash_rad == 0.0:
            return True
        gap = self._motor_angle() / self.spec.gear_ratio - self._play
        return abs(gap) >= 0.5 * self.spec.backlash_rad * (1.0 - 1e-9)

    def _apply_load(self) -> None:
        """Set the plant's load for the interval starting now (held over it, as the plant does)."""
        torque = self._base_load + self._load.time_part(self.inner.t)
        if self.spec.load.ripple_nm and self._in_contact():
            torque += self._load.ripple(self._play if self._pos_index is not None else 0.0)
        self.inner.set_load(torque)

    def load_torque(self, t: float) -> float:
        return float(self.inner.load_torque(t))

    # --- time ---------------------------------------------------------------------------------
    def advance(self, u: float, dt: float) -> None:
        """Advance by dt with command u held; the plant gets the delayed, dead-zoned drive."""
        u = float(u)
        dt = float(dt)
        if not (math.isfinite(u) and math.isfinite(dt) and dt > 0.0):
            raise ValueError(f"advance: u must be finite and dt > 0, got u={u!r}, dt={dt!r}")
        t0 = self.inner.t
        t_end = t0 + dt
        drive = self.drive(u)
        tau = self.spec.input_delay_s
        if tau == 0.0:
            self._drive_now = drive
        else:
            last = self._pending[-1][1] if self._pending else self._drive_now
            if drive != last:
                self._pending.append((t0 + tau, drive))
        t = t0
        while t < t_end - 1e-12:
            while self._pending and self._pending[0][0] <= t + 1e-12:
                self._drive_now = self._pending.popleft()[1]
            t_next = t_end
            if self._pending and self._pending[0][0] < t_end - 1e-12:
                t_next = self._pending[0][0]
            # An unsplit call advances by dt itself (t_end - t0 may differ from dt by rounding).
            self._segment(self._drive_now, dt if (t == t0 and t_next == t_end) else t_next - t)
            t = t_next
        while self._pending and self._pending[0][0] <= t_end + 1e-12:
            self._drive_now = self._pending.popleft()[1]

    def _segment(self, drive: float, dt: float) -> None:
        self._apply_load()
        self.inner.advance(drive, dt)
        self._update_play()
        if self._tach is not None:
            self._tach.advance(self.inner.t, float(self.inner.state[1]))

    def _update_play(self) -> None:
        if self._pos_index is not None:
            self._play = self._play_of(self._motor_angle())

    def _play_of(self, motor_angle: float) -> float:
        """Output angle after the play for this motor angle, from the present output angle."""
        target = motor_angle / self.spec.gear_ratio
        half = 0.5 * self.spec.backlash_rad
        return min(max(self._play, target - half), target + half)

    # --- outputs ------------------------------------------------------------------------------
    def outputs(self, x: np.ndarray) -> np.ndarray:
        """Exact channel values of state x: geared, the angle through the play (no tach)."""
        exact = np.asarray(self.inner.outputs(x), dtype=float)
        values = exact * self._geared
        pos = self._pos_index
        if pos is not None and self.spec.backlash_rad:
            values[pos] = self._play_of(float(exact[pos]))
        return values

    def read(self) -> np.ndarray:
        """Channels as the rig's sensors deliver them before noise: encoder counts on the
        output angle, the tach's pulse-timed speed."""
        values = self.outputs(self.inner.state)
        q, pos = self.encoder_quantum, self._pos_index
        if pos is not None and q > 0.0:
            values[pos] = q * round(values[pos] / q)
        if self._tach is not None and self._speed_index is not None:
            shaft = self._tach.reading(self.inner.t)
            values[self._speed_index] = shaft * self._speed_factor * self._geared[self._speed_index]
        return values

    def channel_index(self, channel: str) -> int:
        return self.inner.channel_index(channel)

    # --- truth (for tests and benchmarks) -----------------------------------------------------
    def _channel_gain(self, channel: str) -> float:
        return float(self._geared[self.channel_index(channel)])

    def true_alpha(self, channel: str, order: int, u: float) -> float:
        """Quasi-static d(y^(order))/du at the present state: the plant's alpha at the drive for
        u, times the dead zone's slope and the gear (0 inside the dead zone or the play)."""
        if channel == "position_rad" and not self._in_contact():
            return 0.0
        return self.engaged_alpha(channel, order, u)

    def engaged_alpha(self, channel: str, order: int, u: float) -> float:
        """``true_alpha`` with the gear teeth in contact (what a step that moves the output sees)."""
        return (self.inner.true_alpha(channel, order, self.drive(u)) * self.drive_slope(u)
                * self._channel_gain(channel))

    def true_alpha_instantaneous(self, channel: str, order: int, u: float) -> float:
        return (self.inner.true_alpha_instantaneous(channel, order, self.drive(u))
                * self.drive_slope(u) * self._channel_gain(channel))

    def quasi_static_rate(self, channel: str, order: int, u: float) -> float:
        """y^(order) now with the plant's drive at ``drive(u)`` (the delayed drive is ignored)."""
        return (self.inner.quasi_static_rate(channel, order, self.drive(u))
                * self._channel_gain(channel))

    def static_gain(self, channel: str, u: float) -> float:
        """dy_ss/du around the equilibrium for command u with the present load."""
        return (self.inner.static_gain(channel, self.drive(u)) * self.drive_slope(u)
                * self._channel_gain(channel))

    def steady_state(self, u: float) -> np.ndarray:
        return self.inner.steady_state(self.drive(u))

    def steady_input(self, channel: str, value: float) -> float:
        """The command whose steady state gives ``channel`` = ``value``."""
        drive = self.inner.steady_input(channel, value / self._channel_gain(channel))
        return self.command_for_drive(drive)

    def acting_drive(self) -> float:
        """The drive acting on the plant now (the command of ``input_delay_s`` ago, dead-zoned)."""
        return float(self._drive_now)

    def true_delay(self) -> float:
        """Transport delay between a command applied by the device and the plant [s]."""
        return float(self.spec.input_delay_s)

    def dead_zone(self) -> float:
        """Half-width of the actuator dead zone [actuator unit]."""
        return float(self.spec.dead_zone)

    def tach_min_reading(self) -> float:
        """Lowest non-zero reading of the tach, in the speed channel's unit (0: no tach)."""
        if self._tach is None or self._speed_index is None:
            return 0.0
        return (self._tach.min_speed_rad_s * self._speed_factor
                * self._geared[self._speed_index])
