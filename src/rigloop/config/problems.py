"""Problems found in a configuration, and the one exception that carries all of them.

A user who fixes one mistake only to meet the next is a user who stops trusting the tool, so the
loader never stops at the first problem: it collects every :class:`Problem` and raises a single
:class:`ConfigError` at the end. Each problem names the key path, the offending value and what is
allowed (or how to fix it).
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from typing import NamedTuple


class _Missing:
    """Marks a problem about a key that has no value (missing, unknown, whole-file problems)."""

    _instance: _Missing | None = None

    def __new__(cls) -> _Missing:
        if cls._instance is None:
            cls._instance = super().__new__(cls)
        return cls._instance

    def __repr__(self) -> str:
        return "MISSING"

    def __bool__(self) -> bool:
        return False


#: Value of a :class:`Problem` that concerns a key without a value worth showing.
MISSING = _Missing()


class Problem(NamedTuple):
    """One thing wrong with a configuration.

    ``key`` is the dotted path (list items by index: ``channels.0.unit``); an empty key means the
    whole file (for example a YAML syntax error). ``message`` says what is allowed or what to do.
    """

    key: str
    value: object
    message: str

    def __str__(self) -> str:
        return format_problem(self)


def render_value(value: object, limit: int = 60) -> str:
    """Show a value the way the user wrote it in YAML (short, one line)."""
    text = _render(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _render(value: object) -> str:
    if value is None:
        return "null"
    if value is True:
        return "true"
    if value is False:
        return "false"
    if isinstance(value, float):
        if math.isnan(value):
            return ".nan"
        if math.isinf(value):
            return ".inf" if value > 0 else "-.inf"
        return repr(value)
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, Mapping):
        return "{" + ", ".join(f"{k}: {_render(v)}" for k, v in value.items()) + "}"
    if isinstance(value, Sequence):
        return "[" + ", ".join(_render(v) for v in value) + "]"
    return repr(value)


def format_problem(problem: Problem, location: str | None = None) -> str:
    """``key = value: message (location)``; the value is left out when there is none."""
    key, value, message = problem
    if key and value is not MISSING:
        text = f"{key} = {render_value(value)}: {message}"
    elif key:
        text = f"{key}: {message}"
    else:
        text = message
    if location:
        text = f"{text} ({location})" if key else f"{location}: {text}"
    return text


class ConfigError(Exception):
    """Every problem of one configuration; ``str()`` lists them one per line.

    ``locations`` maps a key path to where it was written ("demo.yaml, line 12" or "--set"), so the
    message can point at the line to edit. Problems of keys not written anywhere (missing keys)
    take the location of their nearest written parent.
    """

    def __init__(self, problems: Sequence[Problem], *, source: str = "<dict>",
                 locations: Mapping[str, str] | None = None):
        self.source = source
        self.locations: dict[str, str] = dict(locations or {})
        seen: set[tuple[str, str, str]] = set()
        unique: list[Problem] = []
        for problem in (Problem(*p) for p in problems):
            identity = (problem.key, repr(problem.value), problem.message)
            if identity not in seen:
                seen.add(identity)
                unique.append(problem)
        # Top to bottom through the file, then the --set overrides, so fixes go in reading order.
        self.problems: list[Problem] = sorted(unique, key=self._reading_order)
        super().__init__(self._text())

    def _reading_order(self, problem: Problem) -> tuple[int, int]:
        location = self.location_of(problem.key) or ""
        match = re.search(r", line (\d+)", location)
        if match:
            return (0, int(match.group(1)))
        return (1, 0) if location.startswith("--set") else (0, 0)

    def location_of(self, key: str) -> str | None:
        """Where ``key`` (or a key written under it, or its nearest written parent) was written."""
        if key and key not in self.locations:
            inside = [where for k, where in self.locations.items() if k.startswith(key + ".")]
            if inside:  # e.g. a mapping problem caused by --set device.sim.params.gain=3
                return next((w for w in inside if w.startswith("--set")), inside[0])
        probe = key
        while probe:
            if probe in self.locations:
                return self.locations[probe]
            probe = probe.rpartition(".")[0]
        return self.locations.get("")

    def lines(self) -> list[str]:
        """One human-readable line per problem."""
        return [format_problem(p, self.location_of(p.key)) for p in self.problems]

    def _text(self) -> str:
        return "\n".join(self.lines())

    def __str__(self) -> str:
        return self._text()
