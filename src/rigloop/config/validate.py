"""Walk a user's mapping along the schema table: types, ranges, unknown keys, defaults.

The result is a complete mapping (every default filled in, numbers converted) in which each value
that failed its check is replaced by :data:`INVALID`, so that the cross-field rules can skip what
is already reported instead of reporting it twice.
"""

from __future__ import annotations

import copy
from collections.abc import Mapping

from rigloop.config.problems import MISSING, Problem
from rigloop.config.schema import (
    OMIT,
    REQUIRED,
    Computed,
    Key,
    ListOf,
    Section,
    children,
    sentences,
    suggest,
)


class _Invalid:
    def __repr__(self) -> str:
        return "INVALID"

    def __bool__(self) -> bool:
        return False


#: Stands in the validated mapping for a value that was reported as a problem.
INVALID = _Invalid()


def _join(path: str, name: object) -> str:
    return f"{path}.{name}" if path else str(name)


class SchemaWalker:
    """Validates one mapping; collects problems in ``self.problems``."""

    def __init__(self) -> None:
        self.problems: list[Problem] = []
        self._pending: list[tuple[dict, str, Computed]] = []
        self.root: dict = {}
        self._given: Mapping = {}

    def run(self, mapping: Mapping) -> dict:
        self.root = {}
        self._given = mapping
        self._section("", mapping, "", out=self.root)
        for container, name, computed in self._pending:
            try:
                value = computed.fn(self.root)
            except (AttributeError, KeyError, TypeError, ValueError, ZeroDivisionError):
                value = INVALID  # an input of the computation is already reported
            if value is OMIT:
                container.pop(name, None)
            else:
                container[name] = value
        return self.root

    def report(self, key: str, value: object, message: str) -> None:
        self.problems.append(Problem(key, value, message))

    # ------------------------------------------------------------------------------------------
    def _value(self, key: Key, value: object, path: str) -> object:
        if value is None:
            if key.nullable:
                return None
            self.report(path, None, f"is empty; give {key.type.describe()} ({key.doc})")
            return INVALID
        converted, message = key.type.check(value)
        if message is not None:
            self.report(path, value, message)
            return INVALID
        if isinstance(key.type, Section):
            return self._section(key.path, converted, path)
        if isinstance(key.type, ListOf):
            return self._list(key, converted, path)
        return converted

    def _list(self, key: Key, items: list, path: str) -> list:
        item_type = key.type.item
        out = []
        for index, item in enumerate(items):
            item_path = _join(path, index)
            if isinstance(item_type, Section):
                if not isinstance(item, Mapping):
                    self.report(item_path, item, f"each item of {path} must be {item_type.describe()}")
                    out.append(INVALID)
                else:
                    out.append(self._section(key.path + "[]", item, item_path))
                continue
            if item is None:
                self.report(item_path, None, f"is empty; give {item_type.describe()}")
                out.append(INVALID)
                continue
            converted, message = item_type.check(item)
            if message is not None:
                self.report(item_path, item, message)
                out.append(INVALID)
            else:
                out.append(converted)
        return out

    def _wildcard_names(self, section: Section) -> list[str] | None:
        if not section.wildcard_from:
            return None
        # A section before its name list in the table (device.sim.sensors before channels)
        # reads the names as given; a broken item then lets every name through, as below.
        items = self.root.get(section.wildcard_from, self._given.get(section.wildcard_from))
        if not isinstance(items, list):
            return None
        names = []
        for item in items:
            if not isinstance(item, dict) or not isinstance(item.get("name"), str):
                return None  # some channel is broken: do not second-guess the limit keys
            names.append(item["name"])
        return names

    def _section(self, spec_path: str, mapping: Mapping, path: str, out: dict | None = None) -> dict:
        out = {} if out is None else out
        keys = children(spec_path)
        fixed = {k.name: k for k in keys if not k.name.startswith("<")}
        wildcard_key = next((k for k in keys if k.name.startswith("<")), None)
        section_type = KEY_TYPE_CACHE.get(spec_path)
        wildcard_names = self._wildcard_names(section_type) if section_type else None

        for name in mapping:
            if not isinstance(name, str):
                self.report(_join(path, name), MISSING,
                            f"keys must be text; {name!r} is not (quote it)")

        for name, key in fixed.items():
            key_path = _join(path, name)
            if key.when is not None:
                sibling, allowed = key.when
                discriminator = out.get(sibling, INVALID)
                if discriminator is INVALID:
                    continue  # the kind is wrong: already reported, keys cannot be judged
                if discriminator not in allowed:
                    if name in mapping:
                        used = [k.name for k in fixed.values()
                                if k.when is None or discriminator in k.when[1]]
                        self.report(key_path, MISSING,
                                    f"not used when {sibling} is {discriminator}; keys for "
                                    f"{discriminator}: {', '.join(used)}")
                    continue
            if name in mapping:
                out[name] = self._value(key, mapping[name], key_path)
            elif key.default is REQUIRED:
                self.report(key_path, MISSING, f"missing; add {key.type.describe()}: {key.doc}")
                out[name] = INVALID
            elif key.default is OMIT:
                pass
            elif isinstance(key.default, Computed):
                out[name] = INVALID
                self._pending.append((out, name, key.default))
            elif isinstance(key.type, Section):
                out[name] = self._section(key.path, {}, key_path)
            else:
                out[name] = copy.deepcopy(key.default)

        for name in mapping:
            if not isinstance(name, str) or name in fixed:
                continue
            key_path = _join(path, name)
            if wildcard_key is not None and (wildcard_names is None or name in wildcard_names):
                out[name] = self._value(wildcard_key, mapping[name], key_path)
                continue
            allowed = list(fixed)
            names = list(dict.fromkeys(wildcard_names or []))
            hint = f"Keys allowed here: {', '.join(allowed)}" if allowed else ""
            if wildcard_key is not None:
                hint += f", or a {wildcard_key.name.strip('<>')} name ({', '.join(names)})"
            self.report(key_path, MISSING,
                        sentences(f"unknown key{suggest(name, allowed + names)}", hint))
        return out


def _section_types() -> dict[str, Section]:
    from rigloop.config.schema import SCHEMA

    table: dict[str, Section] = {"": Section()}
    for key in SCHEMA:
        if isinstance(key.type, Section):
            table[key.path] = key.type
        elif isinstance(key.type, ListOf) and isinstance(key.type.item, Section):
            table[key.path + "[]"] = key.type.item
    return table


KEY_TYPE_CACHE: dict[str, Section] = _section_types()
