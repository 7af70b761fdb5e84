"""Configuration: YAML -> validated, typed :class:`Config`, with every problem reported at once.

The keys, their types, defaults and meanings are one table, :data:`rigloop.config.schema.SCHEMA`;
``docs/config.md`` documents it for users.
"""

from __future__ import annotations

from rigloop.config.derived import Derived, derived_quantities, warnings_of
from rigloop.config.device_url import device_url, parse_device_url
from rigloop.config.loader import load_config, parse_config
from rigloop.config.model import (
    ActuatorConfig,
    ChannelConfig,
    ChannelLimit,
    Config,
    ControlConfig,
    DeviceConfig,
    EstimatorConfig,
    LimitsConfig,
    RecordingConfig,
    SerialConfig,
    SimConfig,
    UdpConfig,
)
from rigloop.config.overrides import apply_overrides
from rigloop.config.problems import MISSING, ConfigError, Problem

__all__ = [
    "ActuatorConfig", "ChannelConfig", "ChannelLimit", "Config", "ConfigError", "ControlConfig",
    "Derived", "DeviceConfig", "EstimatorConfig", "LimitsConfig", "MISSING", "Problem",
    "RecordingConfig", "SerialConfig", "SimConfig", "UdpConfig", "apply_overrides",
    "derived_quantities", "device_url", "load_config", "parse_config", "parse_device_url",
    "warnings_of",
]
