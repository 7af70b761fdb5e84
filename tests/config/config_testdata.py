"""Data and functions shared by the configuration tests (imported by name from the test files)."""

from __future__ import annotations

import copy
import json

from rigloop.config import apply_overrides

#: Smallest valid configuration: the simulated fan with two channels.
BASE = {
    "rig": "bench-fan",
    "channels": [{"name": "speed_rpm", "unit": "rpm"}, {"name": "current_a", "unit": "A"}],
    "actuator": {"name": "duty", "unit": "%", "min": 0.0, "max": 100.0, "safe": 0.0},
    "control": {"output": "speed_rpm", "alpha": 30.0, "kp": 4.0},
}


def base() -> dict:
    return copy.deepcopy(BASE)


def with_values(mapping: dict, values: dict) -> dict:
    """``mapping`` with ``{"a.b.0.c": value}`` applied (through the --set machinery, as JSON)."""
    return apply_overrides(mapping, [f"{path}={json.dumps(value)}" for path, value in values.items()])
