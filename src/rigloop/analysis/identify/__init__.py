"""The automatic bump test: excite the rig open loop, estimate the ultra-local model's alpha and a
first-order-plus-dead-time model from the recording, judge whether the estimates hold together,
and suggest settings.

The data passes through one module per stage:

* :mod:`.plan` — the excitation: a slow ramp to the operating level, then steps both ways;
* :mod:`.driver` — plays the plan, holding each level until the output has settled;
* :mod:`.fitting` — one step's FOPDT fit and initial-slope alpha;
* :mod:`.noise`, :mod:`.deadzone` — the noise floor and where the output starts to move;
* :mod:`.steps` — the recording to per-step estimates, their mean and spread;
* :mod:`.verdict` — refuse rather than guess;
* :mod:`.suggest` — the suggestion rules and the config snippet;
* :mod:`.offline` — the same test against a plant model, without the engine (tests, benchmarks).

docs/identify.md describes the test, its refusals and the rules with their sources.
"""

from rigloop.analysis.identify.deadzone import DeadZone, find_dead_zone
from rigloop.analysis.identify.driver import BumpDriver, Schedule
from rigloop.analysis.identify.fitting import (
    EstimationError,
    FopdtFit,
    derivative_weights,
    estimator_noise_gain,
    fit_fopdt,
    fopdt_response,
    initial_slope_alpha,
    poly_fit,
)
from rigloop.analysis.identify.noise import NoiseFloor, noise_floor, reading_quantum
from rigloop.analysis.identify.plan import BumpPlan, PlanError, default_operating_point, plan_bump
from rigloop.analysis.identify.steps import BumpEstimates, Spread, StepEstimate, analyse_bump
from rigloop.analysis.identify.suggest import (
    NOISE_FRACTION,
    Suggestions,
    config_snippet,
    round_sig,
    snippet_overrides,
    suggest_settings,
)
from rigloop.analysis.identify.verdict import Refusal, judge

__all__ = [
    "BumpDriver", "BumpEstimates", "BumpPlan", "Schedule", "DeadZone", "EstimationError", "FopdtFit", "NOISE_FRACTION",
    "NoiseFloor", "PlanError", "Refusal", "Spread", "StepEstimate", "Suggestions", "analyse_bump",
    "config_snippet", "default_operating_point", "derivative_weights", "estimator_noise_gain",
    "find_dead_zone", "fit_fopdt", "fopdt_response", "initial_slope_alpha", "judge", "noise_floor",
    "plan_bump", "poly_fit", "reading_quantum", "round_sig", "snippet_overrides", "suggest_settings",
]
