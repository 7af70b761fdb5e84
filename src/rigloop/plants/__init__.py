"""Plant models of our bench rigs (fan, motor), their sensors, and an offline closed loop."""

from __future__ import annotations

from rigloop.plants.base import PLANT_KINDS, Plant, PlantBase, make_plant, plant_parameters
from rigloop.plants.offline import OfflineResult, OracleController, run_offline
from rigloop.plants.sensors import SensorModel

__all__ = [
    "PLANT_KINDS",
    "OfflineResult",
    "OracleController",
    "Plant",
    "PlantBase",
    "SensorModel",
    "make_plant",
    "plant_parameters",
    "run_offline",
]
