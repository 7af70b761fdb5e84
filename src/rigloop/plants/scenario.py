"""The scenario suite: rigloop configs of simulated rigs with imperfections, and their truth.

Why: a controller, a bump test or a step metric that only met the built-in fan has not been
tested. Each file of ``configs/scenarios/`` is an ordinary rigloop config (``rigloop check``
passes, ``rigloop run`` runs it) whose ``device.sim`` describes a rig with its imperfections
(:mod:`rigloop.plants.rig`). :class:`Scenario` builds that rig offline, exactly as the simulated
device does, and computes what a test needs to judge an estimate against: the true alpha and
static gain at the operating point, the transport delay, the dead zone, the sensor resolution.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from rigloop.plants.rig import Rig
from rigloop.plants.rig_config import build_sim_rig
from rigloop.plants.sensors import SensorModel

#: The suite's folder in a source checkout (configs/scenarios next to src/).
SCENARIO_DIR = Path(__file__).resolve().parents[3] / "configs" / "scenarios"


def scenario_paths(folder: Path | None = None) -> list[Path]:
    """The scenario configs of ``folder`` (default: the suite), sorted by name."""
    return sorted(Path(folder or SCENARIO_DIR).glob("*.yaml"))


@dataclass(frozen=True)
class ScenarioTruth:
    """What the rig really is at the operating point (``u``, ``y``) of the controlled output."""

    channel: str
    order: int             # relative degree used by the ultra-local model (control.order)
    u: float               # actuator command at the operating point
    y: float               # exact output there
    alpha: float           # quasi-static d(y^(order))/du [output unit/s^order per actuator unit]
    static_gain: float     # dy_ss/du (nan for an angle: it integrates the speed)
    delay_s: float         # transport delay between the applied command and the plant
    dead_zone: float       # actuator dead zone half-width [actuator unit]
    resolution: float      # smallest step of the reading (quantum or encoder count; 0: none)
    tach_min_reading: float  # lowest non-zero tach reading (0: no tach)
    noise_std: float = 0.0   # std of the reading's noise at y: sqrt(std^2 + (relative*y)^2)
    quantization_std: float = 0.0  # std of the uniform quantizer's error, resolution/sqrt(12)

    @property
    def time_constant_s(self) -> float:
        """static_gain / alpha: the first-order time constant the initial slope implies [s]."""
        return self.static_gain / self.alpha if self.order == 1 else math.nan


class Scenario:
    """One scenario config: its rig, its sensors and its truth."""

    def __init__(self, path: str | Path, overrides: Sequence[str] = ()) -> None:
        from rigloop.config import load_config

        self.path = Path(path)
        self.name = self.path.stem
        self.config = load_config(self.path, list(overrides))
        if self.config.device.link != "sim":
            raise ValueError(f"{self.path}: a scenario needs device.link: sim")

    @property
    def output(self) -> str:
        return self.config.control.output

    @property
    def order(self) -> int:
        return int(self.config.control.order)

    @property
    def period_s(self) -> float:
        return 1.0 / float(self.config.device.rate_hz)

    def build(self) -> tuple[Rig, SensorModel]:
        """A fresh (rig, sensors) pair, as the simulated device builds it (same seeds)."""
        return build_sim_rig(self.config.device.sim)

    def operating_command(self, rig: Rig | None = None) -> float:
        """The command at the operating point: the steady input holding the reference's initial
        level for a speed-like output; the middle of the dead zone's edge for an angle."""
        rig = rig or self.build()[0]
        if self.order == 2:
            return rig.command_for_drive(0.0)
        level = float(self.config.reference["initial"])
        return rig.steady_input(self.output, level)

    def truth(self, u: float | None = None) -> ScenarioTruth:
        """The truth at command ``u`` (default: :meth:`operating_command`), rig at rest there."""
        rig, sensor = self.build()
        u = self.operating_command(rig) if u is None else float(u)
        rig.reset(u if self.order == 1 else None)
        out, m = self.output, self.order
        if m == 2:
            # Outside the dead zone, teeth in contact: the alpha a moving output shows.
            alpha = rig.engaged_alpha(out, 2, rig.command_for_drive(1e-6 * rig.u_max))
            gain = math.nan
        else:
            alpha = rig.true_alpha(out, 1, u)
            gain = rig.static_gain(out, u)
        y = float(rig.outputs(rig.state)[rig.channel_index(out)])
        resolution = self.resolution(rig, sensor)
        std = float(sensor.noise_std.get(out, 0.0))
        rel = float(sensor.relative_std.get(out, 0.0))
        return ScenarioTruth(
            channel=out, order=m, u=u, y=y, alpha=float(alpha), static_gain=float(gain),
            delay_s=rig.true_delay(), dead_zone=rig.dead_zone(),
            resolution=resolution, tach_min_reading=rig.tach_min_reading(),
            noise_std=math.hypot(std, rel * y), quantization_std=resolution / math.sqrt(12.0),
        )

    def resolution(self, rig: Any = None, sensor: SensorModel | None = None) -> float:
        """Smallest step of the controlled output's reading: the larger of the sensor's quantum
        and the encoder count (an angle), 0 when the reading is continuous."""
        if rig is None or sensor is None:
            rig, sensor = self.build()
        q = float(sensor.quantum.get(self.output, 0.0))
        if self.output == "position_rad":
            q = max(q, float(getattr(rig, "encoder_quantum", 0.0)))
        return q


def load_suite(folder: Path | None = None, overrides: Sequence[str] = ()) -> list[Scenario]:
    """Every scenario of the suite (or ``folder``)."""
    return [Scenario(p, overrides) for p in scenario_paths(folder)]


def run_scenario_offline(scenario: Scenario, *, controller: Any = None,
                         duration_s: float | None = None, noise: float | None = None):
    """The scenario's closed loop without protocol (:func:`rigloop.plants.offline.run_offline`):
    its controller (or ``controller``), reference, actuator shaping and rig, from the steady
    state at the reference's initial level (an angle: from rest). ``noise`` overrides
    ``device.sim.noise`` (0: the noise-free twin, same load and seeds)."""
    import dataclasses

    from rigloop.control.controller import Controller
    from rigloop.control.reference import build_reference
    from rigloop.control.shaping import ActuatorShaper
    from rigloop.engine.tunables import control_params_from_config
    from rigloop.plants.offline import run_offline
    from rigloop.plants.rig_config import build_rig, sensor_model

    cfg = scenario.config
    sim = cfg.device.sim
    if noise is not None:
        sim = dataclasses.replace(sim, noise=float(noise))
    rig = build_rig(sim.plant, sim.plant_params(), sim.rig, sim.seed)
    sensor = sensor_model(rig, sim.noise, sim.sensors, sim.seed)
    a = cfg.actuator
    if controller is None:
        controller = Controller(control_params_from_config(cfg), ts=scenario.period_s,
                                u_min=a.min, u_max=a.max, u_hold=a.safe)
    u0 = None if scenario.order == 2 else scenario.operating_command(rig)
    u0 = None if u0 is None else min(max(u0, a.min), a.max)
    reference = build_reference(cfg.reference, base_dir=cfg.base_dir)
    duration = float(duration_s if duration_s is not None else cfg.duration_s or 10.0)
    return run_offline(rig, controller, reference, ActuatorShaper(a.min, a.max, a.safe, a.slew_per_s),
                       ts=scenario.period_s, duration_s=duration, output=scenario.output,
                       sensor=sensor, u0=u0)
