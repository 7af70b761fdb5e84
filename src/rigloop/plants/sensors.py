"""Sensor imperfections of the simulated rig: multiplicative and additive normal noise, then
quantization.

Why this order: a real converter digitises the noisy analog value, so the reported number is
``quantum * round((true * (1 + rel * n1) + std * n2) / quantum)``. The multiplicative part
models errors that grow with the value (a tach's pulse-timing jitter, a gain that wanders). Noise comes from a seeded generator, so a run is
repeatable sample for sample.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np


def _check_table(name: str, table: Mapping[str, float] | None) -> dict[str, float]:
    if table is None:
        return {}
    if not isinstance(table, Mapping):
        raise ValueError(f"{name} must be a mapping of channel name to number, got {table!r}")
    checked: dict[str, float] = {}
    for key, value in table.items():
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value < 0:
            raise ValueError(
                f"{name}[{key!r}] = {value!r} is not allowed; give a finite number >= 0 "
                "in the channel's unit (0 = none)"
            )
        checked[str(key)] = float(value)
    return checked


class SensorModel:
    """Noise std and quantum per channel name; ``measure`` maps true values to readings.

    ``channels`` gives the order of the values passed to ``measure`` (normally a plant's
    ``channel_names``); it may instead be passed to ``measure`` itself. Channels missing from a
    table have no noise / no quantization.
    """

    def __init__(self, noise_std: Mapping[str, float] | None = None,
                 quantum: Mapping[str, float] | None = None, seed: int | None = 0,
                 channels: Sequence[str] | None = None,
                 relative_std: Mapping[str, float] | None = None) -> None:
        self.noise_std = _check_table("noise_std", noise_std)
        self.quantum = _check_table("quantum", quantum)
        self.relative_std = _check_table("relative_std", relative_std)
        self.seed = seed
        self._rng = np.random.default_rng(seed)
        self._channels: tuple[str, ...] | None = None
        if channels is not None:
            self._bind(channels)

    @classmethod
    def nominal(cls, plant: Any, scale: float = 1.0, seed: int | None = 0) -> SensorModel:
        """The plant's nominal sensors with the noise std multiplied by ``scale`` (0 = none)."""
        if isinstance(scale, bool) or not isinstance(scale, (int, float)) or not math.isfinite(scale) or scale < 0:
            raise ValueError(f"noise scale = {scale!r} is not allowed; give a number >= 0 (1 = nominal)")
        noise = {k: v * float(scale) for k, v in plant.nominal_noise_std.items()}
        return cls(noise, dict(plant.nominal_quantum), seed, channels=plant.channel_names)

    def _bind(self, channels: Sequence[str]) -> None:
        names = tuple(channels)
        self._channels = names
        self._std = np.array([self.noise_std.get(n, 0.0) for n in names])
        self._q = np.array([self.quantum.get(n, 0.0) for n in names])
        self._rel = np.array([self.relative_std.get(n, 0.0) for n in names])
        self._has_noise = bool(np.any(self._std > 0.0))
        self._has_rel = bool(np.any(self._rel > 0.0))
        self._quantized = self._q > 0.0
        self._q_safe = np.where(self._quantized, self._q, 1.0)
        self._noise = np.empty(len(names))

    @property
    def channels(self) -> tuple[str, ...] | None:
        return self._channels

    def reset(self, seed: int | None = None) -> None:
        """Restart the noise sequence (from ``seed``, or the constructor's seed)."""
        self._rng = np.random.default_rng(self.seed if seed is None else seed)

    def measure(self, true_values: np.ndarray, channels: Sequence[str] | None = None) -> np.ndarray:
        """Readings for ``true_values`` (ordered as ``channels``): add noise, then quantize."""
        if channels is not None and (self._channels is None or tuple(channels) != self._channels):
            self._bind(channels)
        if self._channels is None:
            raise ValueError(
                "SensorModel does not know the channel order: pass channels=plant.channel_names "
                "to the constructor or to measure()"
            )
        values = np.array(true_values, dtype=float)
        if values.shape != (len(self._channels),):
            raise ValueError(
                f"measure() got {values.shape[0] if values.ndim == 1 else values.shape} values "
                f"for {len(self._channels)} channels {self._channels}"
            )
        if self._has_rel:
            # Drawn before the additive noise, and only when configured, so that a sensor
            # without it gives the same sequence as before.
            self._rng.standard_normal(out=self._noise)
            values *= 1.0 + self._rel * self._noise
        if self._has_noise:
            self._rng.standard_normal(out=self._noise)
            values += self._std * self._noise
        if self._quantized.any():
            quantized = self._q_safe * np.round(values / self._q_safe)
            values = np.where(self._quantized, quantized, values)
        return values
