"""The validated configuration as typed, immutable objects (what the rest of rigloop reads)."""

from __future__ import annotations

import copy
from dataclasses import dataclass, field
from pathlib import Path

from rigloop.config.schema import fixed_limit_settings


@dataclass(frozen=True)
class SimConfig:
    plant: str
    clock: str
    noise: float
    seed: int
    params: dict
    params_file: Path | None      # absolute (resolved against the config file's folder)
    faults: tuple[str, ...]
    rig: dict = field(default_factory=dict)        # device.sim.rig (rigloop.plants.rig_config)
    sensors: dict = field(default_factory=dict)    # device.sim.sensors

    def plant_params(self) -> dict:
        """Parameters for the plant: the file's values, overridden by ``params`` key by key."""
        merged: dict = {}
        if self.params_file is not None:
            from rigloop.config.yaml_source import read_yaml_file

            data, _ = read_yaml_file(self.params_file, what="plant parameter")
            merged.update(data or {})
        merged.update(self.params)
        return merged


@dataclass(frozen=True)
class UdpConfig:
    host: str
    port: int
    local_host: str
    local_port: int


@dataclass(frozen=True)
class SerialConfig:
    port: str
    baud: int


@dataclass(frozen=True)
class DeviceConfig:
    link: str
    url: str            # canonical URL of the device (given by device.url or built from the keys)
    rate_hz: float
    watchdog_ms: float
    pacing: str
    sim: SimConfig
    udp: UdpConfig
    serial: SerialConfig
    #: the rig's key file (docs/protocol.md §14), resolved against the config's folder; None = no key
    key_file: Path | None = None

    @property
    def period_s(self) -> float:
        return 1.0 / self.rate_hz

    @property
    def period_us(self) -> int:
        """The period as the wire carries it (whole microseconds, rounded)."""
        return max(1, round(1e6 / self.rate_hz))

    @property
    def watchdog_us(self) -> int:
        return round(self.watchdog_ms * 1000.0)


@dataclass(frozen=True)
class ChannelConfig:
    name: str
    unit: str
    scale: float
    offset: float
    resolution: float | None = None   # None: measured by the controller from the readings


@dataclass(frozen=True)
class ActuatorConfig:
    name: str
    unit: str
    min: float
    max: float
    safe: float
    slew_per_s: float | None


@dataclass(frozen=True)
class EstimatorConfig:
    kind: str
    window_s: float


@dataclass(frozen=True)
class ControlConfig:
    output: str
    law: str
    order: int
    alpha: float
    kp: float
    ki: float
    kd: float
    anti_windup: str
    pid_u0: float
    estimator: EstimatorConfig
    derivative_window_s: float | None
    input_delay_s: float = 0.0
    quantization_band: float = 1.0


@dataclass(frozen=True)
class ChannelLimit:
    min: float | None
    max: float | None
    rate_max: float | None
    stop: str
    frozen_s: float | None = None


@dataclass(frozen=True)
class LimitsConfig:
    channels: dict[str, ChannelLimit]
    stale_periods: int
    max_duration_s: float
    link_errors_max: int
    link_errors_window_s: float
    overruns_max: int
    overruns_window_s: float


@dataclass(frozen=True)
class RecordingConfig:
    dir: Path           # absolute; a relative recording.dir is taken from the current folder
    flush_ms: float


@dataclass(frozen=True)
class EngineConfig:
    realtime: bool = True


@dataclass(frozen=True)
class Config:
    rig: str
    device: DeviceConfig
    channels: tuple[ChannelConfig, ...]
    actuator: ActuatorConfig
    control: ControlConfig
    reference: dict
    limits: LimitsConfig
    recording: RecordingConfig
    duration_s: float | None
    plan: dict | None
    source_path: Path | None
    base_dir: Path
    raw: dict = field(repr=False)   # the complete, defaulted mapping (session.yaml snapshot)
    engine: EngineConfig = EngineConfig()

    def channel_index(self, name: str) -> int:
        for index, channel in enumerate(self.channels):
            if channel.name == name:
                return index
        raise KeyError(f"no channel named {name!r}; channels: "
                       f"{', '.join(c.name for c in self.channels)}")

    @property
    def channel_names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.channels)

    @property
    def period_s(self) -> float:
        return self.device.period_s

    def snapshot(self) -> dict:
        """A deep copy of :attr:`raw`, safe to modify and to dump as YAML."""
        return copy.deepcopy(self.raw)


def _rig_options(rig: dict) -> dict:
    """``device.sim.rig`` with default-valued entries left out (an unchanged plant: {})."""
    from rigloop.config.schema import KEYS

    out: dict = {}
    for key, value in rig.items():
        if key == "load":
            load = {k: v for k, v in value.items()
                    if v != KEYS[f"device.sim.rig.load.{k}"].default}
            if load:
                out["load"] = load
        elif value != KEYS[f"device.sim.rig.{key}"].default:
            out[key] = value
    return out


def build_config(root: dict, *, source_path: Path | None, base_dir: Path, url: str) -> Config:
    """Typed objects from a mapping that passed validation (no INVALID left in it)."""
    dev = root["device"]
    sim = dev["sim"]
    params_file = sim["params_file"]
    device = DeviceConfig(
        link=dev["link"], url=url, rate_hz=dev["rate_hz"], watchdog_ms=dev["watchdog_ms"],
        pacing=dev["pacing"],
        sim=SimConfig(plant=sim["plant"], clock=sim["clock"], noise=sim["noise"], seed=sim["seed"],
                      params=dict(sim["params"]),
                      params_file=Path(params_file) if params_file else None,
                      faults=tuple(sim["faults"]), rig=_rig_options(sim.get("rig") or {}),
                      sensors={k: dict(v) for k, v in (sim.get("sensors") or {}).items()}),
        udp=UdpConfig(**dev["udp"]),
        serial=SerialConfig(**dev["serial"]),
        key_file=Path(dev["auth"]["key_file"]) if dev["auth"]["key_file"] else None,
    )
    ctl = root["control"]
    control = ControlConfig(
        output=ctl["output"], law=ctl["law"], order=ctl["order"], alpha=ctl["alpha"],
        kp=ctl["kp"], ki=ctl["ki"], kd=ctl["kd"], anti_windup=ctl["anti_windup"],
        pid_u0=ctl["pid_u0"], estimator=EstimatorConfig(**ctl["estimator"]),
        derivative_window_s=ctl["derivative_window_s"], input_delay_s=ctl["input_delay_s"],
        quantization_band=ctl["quantization_band"],
    )
    lim = root["limits"]
    fixed = set(fixed_limit_settings())
    limits = LimitsConfig(
        channels={name: ChannelLimit(**spec) for name, spec in lim.items() if name not in fixed},
        stale_periods=lim["stale_periods"], max_duration_s=lim["max_duration_s"],
        link_errors_max=lim["link_errors"]["max"],
        link_errors_window_s=lim["link_errors"]["window_s"],
        overruns_max=lim["overruns"]["max"], overruns_window_s=lim["overruns"]["window_s"],
    )
    return Config(
        rig=root["rig"],
        device=device,
        channels=tuple(ChannelConfig(**c) for c in root["channels"]),
        actuator=ActuatorConfig(**root["actuator"]),
        control=control,
        reference=root["reference"],
        limits=limits,
        recording=RecordingConfig(dir=Path(root["recording"]["dir"]).expanduser().absolute(),
                                  flush_ms=root["recording"]["flush_ms"]),
        duration_s=root["duration_s"],
        plan=root["plan"],
        source_path=source_path,
        base_dir=base_dir,
        raw=root,
        engine=EngineConfig(**root["engine"]),
    )
