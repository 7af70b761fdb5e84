"""A closed loop without protocol or processes: for fast tests, tuning studies and the demo.

Timing is the device's (docs/architecture.md, docs/protocol.md section 1), so a controller tuned
here behaves the same against the simulated device. Tick k is at t_k = k * ts:

1. The plant has been advanced over [t_{k-1}, t_k) with u_{k-1}.
2. The sensor reads y_k. Sample k carries (y_k, u_k), u_k being the value the device applies
   from tick k on: the command computed from sample k-1, clamped to [u_min, u_max] (a
   non-finite command is rejected and the previous value held, as the device does).
3. The host computes ``u_cmd_k = shaper.shape(controller.step(y_k, u_k, r_k, r'_k, r''_k), ts)``.
4. The plant is advanced over [t_k, t_{k+1}) with u_k.
5. At tick k+1 the device applies u_{k+1} = clamp(u_cmd_k) and reports it in sample k+1.

So a command computed from sample k acts from t_{k+1}: one sample of transport delay, as on the
real rig. At k = 0 the applied value is ``u0`` (or the plant's safe value) and the plant starts at
the steady state for ``u0`` (or at rest).

``OracleController`` is the yardstick for the model-free laws: it feedback-linearises with the
true plant (its quasi-static model and true present state), so with the same sample delay and
the same measurement noise it gives the error dynamics the iP/iPD aim at.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np

from rigloop.plants.sensors import SensorModel


class StepController(Protocol):
    """What ``run_offline`` needs from a controller (``rigloop.control.controller.Controller``)."""

    def step(self, y: float, u_applied: float, r: float, dr: float, ddr: float) -> float: ...


class ReferenceLike(Protocol):
    def at(self, t: float) -> tuple[float, float, float]: ...


class ShaperLike(Protocol):
    def shape(self, u_request: float, dt: float) -> float: ...


@dataclass
class OfflineResult:
    """One entry per sample k (see the module docstring for the timing).

    ``y`` is the measured output (with sensor noise), ``y_true`` the plant's exact output,
    ``u_cmd`` the shaped command computed from sample k, ``u`` the value applied from tick k on,
    ``f_hat`` the controller's estimate after sample k (nan during warm-up), ``channels`` every
    measured channel (columns in ``channel_names`` order).
    """

    t: np.ndarray
    r: np.ndarray
    y: np.ndarray
    u_cmd: np.ndarray
    u: np.ndarray
    f_hat: np.ndarray
    y_true: np.ndarray = field(default_factory=lambda: np.empty(0))
    channels: np.ndarray = field(default_factory=lambda: np.empty((0, 0)))
    channel_names: tuple[str, ...] = ()
    output: str = ""

    def rms_error(self, t_from: float = 0.0, true_output: bool = False) -> float:
        """sqrt(mean((y - r)^2)) over samples with t >= t_from (measured y, or the exact one)."""
        y = self.y_true if true_output else self.y
        mask = self.t >= t_from
        if not mask.any():
            raise ValueError(f"rms_error: no sample at or after t_from = {t_from} s "
                             f"(run ends at {self.t[-1] if self.t.size else 0.0} s)")
        e = y[mask] - self.r[mask]
        return float(np.sqrt(np.mean(e * e)))


def run_offline(plant: Any, controller: StepController, reference: ReferenceLike,
                shaper: ShaperLike | None, *, ts: float, duration_s: float, output: str,
                sensor: SensorModel | None = None, u0: float | None = None,
                progress: Callable[[float], None] | None = None) -> OfflineResult:
    """Run ``controller`` against ``plant`` for ``duration_s`` at period ``ts`` (module docstring).

    The plant, the controller (``reset(u_hold)`` if it has one) and the shaper (``reset(value)``
    if it has one) are reset to the initial applied value first; the sensor is not, so pass a
    fresh one for a repeatable run. ``progress`` gets the finished fraction about 100 times.
    """
    ts = float(ts)
    duration_s = float(duration_s)
    if not (math.isfinite(ts) and ts > 0.0):
        raise ValueError(f"ts = {ts!r} is not allowed; give the sample period in seconds (> 0)")
    if not (math.isfinite(duration_s) and duration_s >= ts):
        raise ValueError(f"duration_s = {duration_s!r} is not allowed; give at least one period ({ts} s)")
    out_index = plant.channel_index(output)
    names = tuple(plant.channel_names)
    u_min, u_max = float(plant.u_min), float(plant.u_max)
    u_applied = float(plant.u_safe if u0 is None else u0)
    if not (math.isfinite(u_applied) and u_min <= u_applied <= u_max):
        raise ValueError(f"u0 = {u0!r} is not allowed; give a value in [{u_min}, {u_max}] "
                         f"{plant.actuator_unit}")

    plant.reset(u0)
    reset = getattr(controller, "reset", None)
    if reset is not None:
        reset(u_applied)
    if shaper is not None and hasattr(shaper, "reset"):
        shaper.reset(u_applied)

    n = int(math.floor(duration_s / ts + 1e-9)) + 1
    t = np.arange(n) * ts
    r = np.empty(n)
    y = np.empty(n)
    y_true = np.empty(n)
    u_cmd = np.empty(n)
    u = np.empty(n)
    f_hat = np.empty(n)
    channels = np.empty((n, len(names)))
    report_every = max(1, n // 100)

    for k in range(n):
        true_values = plant.read()
        measured = sensor.measure(true_values, names) if sensor is not None else true_values
        y_k = float(measured[out_index])
        r_k, dr_k, ddr_k = reference.at(float(t[k]))
        request = controller.step(y_k, u_applied, r_k, dr_k, ddr_k)
        command = shaper.shape(request, ts) if shaper is not None else request

        r[k] = r_k
        y[k] = y_k
        y_true[k] = plant.outputs(plant.state)[out_index]
        channels[k] = measured
        u_cmd[k] = command
        u[k] = u_applied
        f_hat[k] = getattr(controller, "f_hat", math.nan)

        plant.advance(u_applied, ts)
        if math.isfinite(command):
            u_applied = min(max(float(command), u_min), u_max)
        if progress is not None and (k % report_every == 0 or k == n - 1):
            progress((k + 1) / n)

    return OfflineResult(t=t, r=r, y=y, u_cmd=u_cmd, u=u, f_hat=f_hat, y_true=y_true,
                         channels=channels, channel_names=names, output=output)


class OracleController:
    """Feedback linearisation with the true plant: the yardstick for iP (order 1) and iPD (order 2).

    With alpha = ``plant.true_alpha(output, order, u_applied)`` and the true lumped term
    F = ``plant.quasi_static_rate(output, order, u_applied)`` - alpha * u_applied, both at the
    plant's true present state, and e = y - r with the *measured* y::

        order 1:  u = (-F + r'  - kp e) / alpha                 ->  e' = -kp e
        order 2:  u = (-F + r'' - kp e - kd e') / alpha         ->  e'' = -kd e' - kp e

    where e' uses the true output derivative. It has the same one-sample command delay as any
    controller in the loop, so it shows what a perfect F estimate would achieve. Where u does
    not reach the output (alpha = 0: in a gear's play), it uses the alpha with the teeth in
    contact (``engaged_alpha``).
    """

    def __init__(self, plant: Any, output: str, *, kp: float, kd: float = 0.0, order: int = 1) -> None:
        plant.channel_index(output)
        if order not in (1, 2):
            raise ValueError(f"order must be 1 or 2, got {order!r}")
        for name, value in (("kp", kp), ("kd", kd)):
            if not (math.isfinite(value) and value >= 0.0):
                raise ValueError(f"{name} = {value!r} is not allowed; give a number >= 0")
        self.plant = plant
        self.output = output
        self.kp = float(kp)
        self.kd = float(kd)
        self.order = order
        self.ready = True
        self.reset()

    def reset(self, u_hold: float | None = None) -> None:
        self.f_hat = math.nan
        self.alpha = math.nan
        self.e = math.nan
        self.de = math.nan
        self.u = math.nan if u_hold is None else float(u_hold)

    def step(self, y: float, u_applied: float, r: float, dr: float, ddr: float) -> float:
        plant, m = self.plant, self.order
        alpha = plant.true_alpha(self.output, m, u_applied)
        f_true = plant.quasi_static_rate(self.output, m, u_applied) - alpha * u_applied
        if alpha == 0.0 and hasattr(plant, "engaged_alpha"):
            # in a gear's play (or a dead zone) u does not reach the output: drive as if the
            # teeth were in contact, which takes the play up in the direction the law asks
            alpha = plant.engaged_alpha(self.output, m, u_applied)
        if alpha == 0.0:                      # inside a dead zone: u has no effect; hold it
            self.u = u_applied
            return self.u
        self.alpha = alpha
        self.f_hat = f_true
        self.e = y - r
        if m == 1:
            self.de = math.nan
            u = (-f_true + dr - self.kp * self.e) / alpha
        else:
            self.de = plant.quasi_static_rate(self.output, 1, u_applied) - dr
            u = (-f_true + ddr - self.kp * self.e - self.kd * self.de) / alpha
        self.u = u
        return u
