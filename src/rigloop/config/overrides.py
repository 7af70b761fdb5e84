"""``--set KEY=VALUE`` overrides: change one key of a configuration from the command line.

``KEY`` is a dotted path; list items go by index (``channels.0.unit=V``). ``VALUE`` is read as
YAML, so ``3``, ``2.5e3``, ``true``, ``null``, ``[a, b]`` and ``{min: 0, max: 10}`` all work;
quote text that YAML would read otherwise (``rig="on"``). Missing sections are created, so any key
the schema knows can be set even when the file leaves it at its default; a misspelt key is then
reported by validation with a suggestion, like a misspelt key in the file.
"""

from __future__ import annotations

import copy
from collections.abc import Sequence

from rigloop.config.problems import MISSING, ConfigError, Problem
from rigloop.config.yaml_source import parse_yaml_value

_SYNTAX = "write KEY=VALUE, for example control.kp=4.5 or channels.0.unit=rpm"


def _kind(value: object) -> str:
    if isinstance(value, dict):
        return "a section"
    if isinstance(value, list):
        return f"a list of {len(value)} item(s)"
    return f"the value {value!r}"


def _apply_one(root: dict, text: str) -> tuple[str, str | None]:
    """Apply one override in place; return (key path, problem message or None)."""
    if "=" not in text:
        return text, f"missing '='; {_SYNTAX}"
    path, _, value_text = text.partition("=")
    path = path.strip()
    parts = path.split(".")
    if not path or any(not p.strip() for p in parts):
        return path, f"{path!r} is not a key path; {_SYNTAX}"
    try:
        value = parse_yaml_value(value_text)
    except ValueError as error:
        return path, str(error)
    node: object = root
    for depth, part in enumerate(parts):
        last = depth == len(parts) - 1
        here = ".".join(parts[:depth]) or "the configuration"
        if isinstance(node, dict):
            if last:
                node[part] = value
                return path, None
            child = node.get(part)
            if child is None:
                if parts[depth + 1].isdigit():
                    return path, (f"{'.'.join(parts[:depth + 1])} is not set, so it has no item "
                                  f"{parts[depth + 1]}; set the whole list instead, e.g. "
                                  f"{'.'.join(parts[:depth + 1])}=[...]")
                child = node[part] = {}
            node = child
        elif isinstance(node, list):
            if not part.isdigit():
                return path, f"{here} is a list; the next part must be an item number, not {part!r}"
            index = int(part)
            if index >= len(node):
                return path, (f"{here} has {len(node)} item(s); use an index from 0 to "
                              f"{len(node) - 1}" if node else f"{here} is an empty list")
            if last:
                node[index] = value
                return path, None
            node = node[index]
        else:
            return path, f"{here} holds {_kind(node)}, which has no key {part!r}"
    return path, None  # pragma: no cover - the loop always returns


def apply_overrides(mapping: dict, overrides: Sequence[str]) -> dict:
    """A deep copy of ``mapping`` with every ``KEY=VALUE`` override applied.

    Raises :class:`ConfigError` listing every override that cannot be applied.
    """
    root = copy.deepcopy(dict(mapping))
    problems: list[Problem] = []
    locations: dict[str, str] = {}
    for text in overrides:
        path, message = _apply_one(root, str(text))
        if message is not None:
            value = str(text).partition("=")[2] if "=" in str(text) else MISSING
            problems.append(Problem(path, value, message))
            locations[path] = f"--set {text}"
    if problems:
        raise ConfigError(problems, source="--set", locations=locations)
    return root


def override_locations(overrides: Sequence[str]) -> dict[str, str]:
    """``key path -> "--set KEY=VALUE"`` so that problems point at the override that set them."""
    out: dict[str, str] = {}
    for text in overrides:
        path = str(text).partition("=")[0].strip()
        if path:
            out[path] = f"--set {text}"
    return out
