"""Check a tuning entry locally, before anything is sent to the engine.

The allowed values come from the one config schema (:mod:`rigloop.config.schema`), so the app
refuses exactly what a config file would refuse and shows the same words for the allowed range.
A few rules that involve the running config (an estimator window of at least two samples, a
setpoint inside the output's limits) are added here. The engine validates again and may still
refuse; its reply is shown beside the field too.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from rigloop.config.schema import KEYS, LAWS, ORDER_OF_LAW, Choice

#: Keys the tuning panel edits (a subset of rigloop.engine.tunables.TUNABLE_KEYS).
TUNING_KEYS = (
    "control.law", "control.alpha", "control.kp", "control.ki", "control.kd",
    "control.estimator.kind", "control.estimator.window_s", "control.derivative_window_s",
)
_WINDOW_KEYS = ("control.estimator.window_s", "control.derivative_window_s")
MIN_WINDOW_SAMPLES = 2


@dataclass(frozen=True)
class Checked:
    """Result of a local check: ``ok`` with the converted ``value``, or a ``message`` to show."""

    ok: bool
    value: object = None
    message: str = ""


def parse_entry(text: str) -> object:
    """Text of an entry as the config would read it: empty -> None, numbers -> float, else text."""
    s = text.strip()
    if not s or s.lower() in ("null", "none", "~"):
        return None
    try:
        return float(s)
    except ValueError:
        return s


def _least_samples(key: str, order: int) -> int:
    """Samples a window must hold (config rule ``windows_hold_enough_samples``)."""
    if key == "control.derivative_window_s":
        return MIN_WINDOW_SAMPLES
    return MIN_WINDOW_SAMPLES + 1 if order == 2 else MIN_WINDOW_SAMPLES


def allowed_text(key: str, rate_hz: float | None = None, order: int = 1) -> str:
    """The allowed values of ``key`` in words (``"a number >= 0"``)."""
    spec = KEYS[key]
    text = spec.type.describe()
    if key in _WINDOW_KEYS and rate_hz:
        least = _least_samples(key, order)
        text += f", at least {least} samples ({least / rate_hz:g} s at {rate_hz:g} Hz)"
    if key == "control.law":
        text += f" (for order {order}: {', '.join(laws_of_order(order))})"
    if spec.nullable:
        text += "; empty = " + ("the estimator window" if key == "control.derivative_window_s" else "none")
    return text


def laws_of_order(order: int) -> list[str]:
    """Laws usable with a model of this order (the PID baseline has no model order)."""
    return [law for law in LAWS if ORDER_OF_LAW.get(law, order) == order]


def check_tunable(key: str, text: str, rate_hz: float | None = None, *, order: int = 1,
                  estimator: str = "algebraic") -> Checked:
    """Check one entry of the tuning panel against the schema and the rules that involve the
    running session (its rate, model order and estimator kind)."""
    if key not in KEYS:
        return Checked(False, message=f"{key} is not a configuration key")
    spec = KEYS[key]
    value = parse_entry(text)
    allowed = allowed_text(key, rate_hz, order)
    shown = text.strip()
    if value is None:
        if spec.nullable:
            return Checked(True, None)
        return Checked(False, message=f"{_label(key)} needs a value: allowed is {allowed}")
    if isinstance(value, float) and isinstance(spec.type, Choice) and value.is_integer():
        value = int(value)
    converted, problem = spec.type.check(value)
    if problem is not None:
        return Checked(False, message=f"{_label(key)} = {shown} refused: allowed is {allowed}")
    if key == "control.law" and converted not in laws_of_order(order):
        return Checked(False, message=(
            f"law = {shown} refused: it needs a model of order {ORDER_OF_LAW[converted]}, this session runs "
            f"order {order}; allowed now: {', '.join(laws_of_order(order))} (change control.order in the "
            "config and reconnect to use it)"))
    if key in _WINDOW_KEYS and rate_hz and converted is not None:
        kind = estimator if key == "control.estimator.window_s" else "derivative"
        if kind != "one-step" and round(float(converted) * rate_hz) < _least_samples(key, order):
            return Checked(False, message=f"{_label(key)} = {shown} s refused: allowed is {allowed}")
    return Checked(True, converted)


def check_setpoint(text: str, lo: float | None, hi: float | None, unit: str = "") -> Checked:
    """A manual setpoint: a finite number inside the output channel's limits (when it has any)."""
    value = parse_entry(text)
    rng = setpoint_range_text(lo, hi, unit)
    if not isinstance(value, float) or not math.isfinite(value):
        return Checked(False, message=f"setpoint = {text.strip() or '(empty)'} refused: allowed is {rng}")
    if (lo is not None and value < lo) or (hi is not None and value > hi):
        return Checked(False, message=f"setpoint = {text.strip()} refused: allowed is {rng}")
    return Checked(True, value)


def check_blend(text: str) -> Checked:
    """Blend time of a manual setpoint change: a finite number of seconds >= 0."""
    value = parse_entry(text)
    if not isinstance(value, float) or not math.isfinite(value) or value < 0:
        return Checked(False, message=f"blend = {text.strip() or '(empty)'} refused: allowed is a number >= 0 (seconds)")
    return Checked(True, value)


def setpoint_range_text(lo: float | None, hi: float | None, unit: str = "") -> str:
    u = f" {unit}" if unit else ""
    if lo is not None and hi is not None:
        return f"a number from {lo:g} to {hi:g}{u} (the output's limits)"
    if lo is not None:
        return f"a number >= {lo:g}{u} (the output's limit)"
    if hi is not None:
        return f"a number <= {hi:g}{u} (the output's limit)"
    return "a finite number"


def _label(key: str) -> str:
    return key.removeprefix("control.")
