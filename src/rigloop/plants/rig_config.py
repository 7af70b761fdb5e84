"""Build a simulated rig (plant + imperfection layers + sensors) from ``device.sim`` settings.

One function for the simulated device, the offline loop and the tests, so that a scenario file
describes the same rig wherever it runs. ``rig`` is the ``device.sim.rig`` mapping and
``sensors`` the ``device.sim.sensors`` mapping (channel -> noise_std, relative_noise, quantum),
both as in ``docs/config.md``; a channel's sensor settings replace the plant's nominal ones, and
``noise`` scales both noise parts (0 gives the noise-free twin, quantization kept).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from rigloop.plants.base import make_plant
from rigloop.plants.load import LoadSpec, parse_steps
from rigloop.plants.rig import Rig, RigSpec
from rigloop.plants.sensors import SensorModel

RIG_KEYS = ("dead_zone", "input_delay_s", "drive_sign", "gear_ratio", "backlash_rad", "tach_pulses_per_rev",
            "tach_timeout_s", "load")
LOAD_KEYS = ("drift_nm", "drift_period_s", "walk_nm", "steps", "ripple_nm", "ripple_per_rev")
SENSOR_KEYS = ("noise_std", "relative_noise", "quantum")


def _unknown(what: str, mapping: Mapping, allowed: tuple[str, ...]) -> None:
    extra = [k for k in mapping if k not in allowed]
    if extra:
        raise ValueError(f"unknown {what} key {extra[0]!r}; allowed: {', '.join(allowed)}")


def rig_spec(rig: Mapping[str, Any] | None, seed: int = 0) -> RigSpec:
    """A :class:`RigSpec` from the ``device.sim.rig`` mapping (ValueError names a bad key)."""
    rig = dict(rig or {})
    _unknown("device.sim.rig", rig, RIG_KEYS)
    load = dict(rig.pop("load", None) or {})
    _unknown("device.sim.rig.load", load, LOAD_KEYS)
    steps = parse_steps(load.pop("steps", None))
    load_spec = LoadSpec(**{k: float(v) for k, v in load.items()}, steps=steps, seed=int(seed))
    values: dict[str, Any] = {k: float(v) for k, v in rig.items()}
    for key in ("tach_pulses_per_rev", "drive_sign"):
        if key in values:
            values[key] = int(values[key])
    return RigSpec(**values, load=load_spec)


def sensor_model(plant: Any, noise: float = 1.0, sensors: Mapping[str, Any] | None = None,
                 seed: int = 0) -> SensorModel:
    """The plant's nominal sensors, channel entries of ``sensors`` replacing them, noise x ``noise``."""
    if not (math.isfinite(noise) and noise >= 0.0):
        raise ValueError(f"noise = {noise!r}: give a number >= 0 (1 = nominal)")
    std = dict(plant.nominal_noise_std)
    quantum = dict(plant.nominal_quantum)
    relative: dict[str, float] = {}
    for channel, entry in (sensors or {}).items():
        plant.channel_index(channel)
        entry = dict(entry or {})
        _unknown(f"device.sim.sensors.{channel}", entry, SENSOR_KEYS)
        if "noise_std" in entry:
            std[channel] = float(entry["noise_std"])
        if "relative_noise" in entry:
            relative[channel] = float(entry["relative_noise"])
        if "quantum" in entry:
            quantum[channel] = float(entry["quantum"])
    std = {k: v * noise for k, v in std.items()}
    relative = {k: v * noise for k, v in relative.items()}
    return SensorModel(std, quantum, seed, channels=plant.channel_names, relative_std=relative)


def build_rig(kind: str, params: Mapping[str, Any] | None = None,
              rig: Mapping[str, Any] | None = None, seed: int = 0) -> Rig:
    """The plant of ``kind`` with ``params``, wrapped in the layers of ``rig``."""
    return Rig(make_plant(kind, dict(params or {})), rig_spec(rig, seed))


def build_sim_rig(sim: Any) -> tuple[Rig, SensorModel]:
    """(rig, sensors) for a :class:`rigloop.config.SimConfig` (the offline twin of the device)."""
    plant = build_rig(sim.plant, sim.plant_params(), getattr(sim, "rig", None), sim.seed)
    return plant, sensor_model(plant, sim.noise, getattr(sim, "sensors", None), sim.seed)
