"""The model-free control core: estimators of F, intelligent laws, references, shaping, tuning.

No I/O and no Qt; one ``step()`` per sample without allocation. See docs/architecture.md.
"""

from __future__ import annotations

from rigloop.control.controller import Controller, ControlParams
from rigloop.control.estimators import ESTIMATOR_KINDS, Estimator, make_estimator
from rigloop.control.laws import ANTI_WINDUP_MODES, LAWS
from rigloop.control.reference import Reference, Transition, build_reference, with_setpoint
from rigloop.control.shaping import ActuatorShaper

__all__ = [
    "ANTI_WINDUP_MODES",
    "ESTIMATOR_KINDS",
    "LAWS",
    "ActuatorShaper",
    "ControlParams",
    "Controller",
    "Estimator",
    "Reference",
    "Transition",
    "build_reference",
    "make_estimator",
    "with_setpoint",
]
