"""Plant parameter sets: defaults, units, one-line docs and validation of user overrides.

Why a declared table: the same parameter names reach the plants from YAML files, the command
line and tests. Declaring each parameter once (default, unit, rule, doc) lets every bad value be
reported with its key, the value given, what is allowed and the default, instead of failing deep
inside the integrator.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import numbers
from collections.abc import Mapping
from typing import Any, TypeVar

RULES = {
    "positive": "a number > 0",
    "nonnegative": "a number >= 0",
    "finite": "a finite number",
    "optional_positive": "null (automatic) or a number > 0",
    "optional_nonnegative": "null (none) or a number >= 0",
    "count": "a whole number >= 0",
}


def param(default: Any, unit: str, doc: str, rule: str = "positive") -> Any:
    """Declare one plant parameter as a dataclass field with its unit, rule and doc."""
    if rule not in RULES:
        raise ValueError(f"unknown parameter rule {rule!r}; allowed: {', '.join(RULES)}")
    return dataclasses.field(default=default, metadata={"unit": unit, "doc": doc, "rule": rule})


P = TypeVar("P")


def describe(params_cls: type) -> list[tuple[str, Any, str, str]]:
    """(key, default, unit, doc) of every parameter of a parameter dataclass, in declared order."""
    return [
        (f.name, f.default, f.metadata["unit"], f.metadata["doc"])
        for f in dataclasses.fields(params_cls)
    ]


def _is_number(value: Any) -> bool:
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def _check_value(kind: str, f: dataclasses.Field, value: Any) -> Any:
    """Return ``value`` converted to the parameter's type, or raise ValueError naming the key."""
    rule = f.metadata["rule"]
    unit = f.metadata["unit"]
    allowed = RULES[rule]
    default_text = f"default {f.default!r}" + (f" {unit}" if unit and f.default is not None else "")

    def fail(why: str) -> ValueError:
        return ValueError(
            f"{kind} parameter {f.name!r} = {value!r} {why}; give {allowed}"
            + (f" in {unit}" if unit else "") + f" ({default_text})"
        )

    if value is None:
        if rule.startswith("optional_"):
            return None
        raise fail("is missing a value")
    if not _is_number(value):
        raise fail("is not a number")
    number = float(value)
    if not math.isfinite(number):
        raise fail("is not finite")
    if rule == "count":
        if number != int(number) or number < 0:
            raise fail("is not allowed")
        return int(number)
    if rule in ("positive", "optional_positive") and not number > 0.0:
        raise fail("is not allowed")
    if rule in ("nonnegative", "optional_nonnegative") and not number >= 0.0:
        raise fail("is not allowed")
    return number


def build_params(params_cls: type[P], kind: str, overrides: Mapping[str, Any] | None) -> P:
    """Defaults of ``params_cls`` with ``overrides`` applied by key, every value checked.

    Unknown keys raise ValueError naming the key, a close match if any, and all allowed keys.
    After the per-key checks, the class's own ``check()`` (cross-parameter rules) runs if defined.
    """
    if overrides is None:
        overrides = {}
    if not isinstance(overrides, Mapping):
        raise ValueError(
            f"{kind} parameters must be a mapping of parameter name to value, "
            f"got {type(overrides).__name__} {overrides!r}"
        )
    fields = {f.name: f for f in dataclasses.fields(params_cls)}
    values: dict[str, Any] = {}
    for key, value in overrides.items():
        if key not in fields:
            close = difflib.get_close_matches(str(key), list(fields), n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            raise ValueError(
                f"unknown {kind} parameter {key!r}{hint}; allowed keys: {', '.join(fields)}"
            )
        values[key] = _check_value(kind, fields[key], value)
    result = params_cls(**values)
    check = getattr(result, "check", None)
    if check is not None:
        check()
    return result
