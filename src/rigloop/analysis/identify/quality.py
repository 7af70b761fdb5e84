"""How well the suggestions control a simulated rig: the model-free law with the bump test's
settings, the PID baseline by the SIMC rules from the same bump test, and the oracle.

Each runs the scenario's own reference, actuator shaping, rig and sensors
(:mod:`rigloop.plants.scenario`) through the offline closed loop, from the steady state at the
reference's initial level, with the same noise sequence. Scores, all on the **noise-free** plant
output the offline loop records beside the measured one:

* ``rms`` — root mean square of (true output − reference) over the run;
* ``overshoot_pct`` — the worst over the reference's level changes of how far the true output
  went past the new level, in per cent of the change (0 when it did not);
* ``tv`` — the actuator's total variation ``Σ|u_k − u_{k−1}|``: how much the actuator is worked;
* ``outside_limits`` — whether the true output left its channel limits (the engine would trip).

The oracle (:class:`rigloop.plants.offline.OracleController`) feedback-linearises with the true
rig and the same gains: what a perfect F estimate would give.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from rigloop.analysis.identify.suggest import Suggestions


@dataclass
class LoopScore:
    """Scores of one controller on one scenario (module docstring)."""

    name: str
    rms: float
    rms_measured: float
    overshoot_pct: float
    tv: float
    outside_limits: bool

    def as_dict(self) -> dict:
        return asdict(self)


def level_changes(reference: dict) -> list[tuple[float, float, float]]:
    """(time, from, to) of each level change of a ``levels`` reference (empty for other kinds)."""
    if reference.get("kind") != "levels":
        return []
    level = float(reference["initial"])
    out = []
    for step in reference.get("steps") or []:
        to = float(step["to"])
        out.append((float(step["at"]), level, to))
        level = to
    return out


def worst_overshoot(t: np.ndarray, y: np.ndarray, changes: list[tuple[float, float, float]]) -> float:
    """Largest overshoot (per cent of the change) of ``y`` over the level changes."""
    worst = 0.0
    ends = [c[0] for c in changes[1:]] + [math.inf]
    for (t0, a, b), t1 in zip(changes, ends):
        if b == a:
            continue
        seg = (t >= t0) & (t < t1)
        if not seg.any():
            continue
        past = (y[seg] - b) * math.copysign(1.0, b - a)
        worst = max(worst, 100.0 * float(np.max(past)) / abs(b - a))
    return worst


def _run(scenario: Any, make_controller, duration_s: float):
    """One closed loop on a fresh rig of the scenario; ``make_controller(rig, u0)``."""
    from rigloop.control.reference import build_reference
    from rigloop.control.shaping import ActuatorShaper
    from rigloop.plants.offline import run_offline
    from rigloop.plants.rig_config import build_rig, sensor_model

    cfg = scenario.config
    sim = cfg.device.sim
    rig = build_rig(sim.plant, sim.plant_params(), sim.rig, sim.seed)
    sensor = sensor_model(rig, sim.noise, sim.sensors, sim.seed)
    a = cfg.actuator
    u0 = None if scenario.order == 2 else min(max(scenario.operating_command(rig), a.min), a.max)
    controller = make_controller(rig, a.safe if u0 is None else u0)
    reference = build_reference(cfg.reference, base_dir=cfg.base_dir)
    return run_offline(rig, controller, reference, ActuatorShaper(a.min, a.max, a.safe, a.slew_per_s),
                       ts=scenario.period_s, duration_s=duration_s, output=scenario.output,
                       sensor=sensor, u0=u0)


def compare(scenario: Any, sugg: Suggestions, *, duration_s: float | None = None) -> dict[str, LoopScore]:
    """Scores of the model-free law (``sugg.law``), ``SIMC`` and ``oracle`` on ``scenario``."""
    from rigloop.control.controller import ControlParams, Controller
    from rigloop.plants.offline import OracleController

    cfg = scenario.config
    a = cfg.actuator
    ts = scenario.period_s
    duration = float(duration_s if duration_s is not None else cfg.duration_s or 10.0)
    order = scenario.order

    def model_free(rig, u0):
        params = ControlParams(law=sugg.law, order=order, alpha=sugg.alpha, kp=sugg.kp, kd=sugg.kd,
                               estimator=sugg.estimator_kind, window_s=sugg.window_s,
                               input_delay_s=sugg.input_delay_s)
        return Controller(params, ts=ts, u_min=a.min, u_max=a.max, u_hold=u0)

    def simc(rig, u0):
        params = ControlParams(law="PID", order=order, kp=sugg.pid_kp, ki=sugg.pid_ki, kd=sugg.pid_kd,
                               pid_u0=sugg.pid_u0, window_s=sugg.window_s)
        return Controller(params, ts=ts, u_min=a.min, u_max=a.max, u_hold=u0)

    def oracle(rig, u0):
        return OracleController(rig, scenario.output, kp=sugg.kp, kd=sugg.kd, order=order)

    changes = level_changes(cfg.reference)
    limit = cfg.limits.channels.get(scenario.output)
    scores = {}
    for name, make in ((sugg.law, model_free), ("SIMC", simc), ("oracle", oracle)):
        res = _run(scenario, make, duration)
        e_true = res.y_true - res.r
        e_meas = res.y - res.r
        outside = limit is not None and bool(
            (limit.max is not None and np.any(res.y_true > limit.max))
            or (limit.min is not None and np.any(res.y_true < limit.min)))
        scores[name] = LoopScore(name, float(np.sqrt(np.mean(e_true ** 2))),
                                 float(np.sqrt(np.mean(e_meas ** 2))),
                                 worst_overshoot(res.t, res.y_true, changes),
                                 float(np.sum(np.abs(np.diff(res.u)))), outside)
    return scores
