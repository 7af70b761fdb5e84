"""Read YAML the way a configuration needs it: safe, strict about duplicates, with line numbers.

PyYAML silently keeps the last of two equal keys and reads ``1e3`` as a string (YAML 1.1 wants
``1.0e3``); both have cost people an afternoon, so this loader reports duplicates and accepts the
exponent form. It also remembers the line of every key so that a problem can say where to look.
"""

from __future__ import annotations

import re
from pathlib import Path

import yaml

from rigloop.config.problems import MISSING, ConfigError, Problem


class _StrictLoader(yaml.SafeLoader):
    """SafeLoader that also reads ``1e3`` / ``-2.5E-4`` as floats."""


_FLOAT_WITH_EXPONENT = re.compile(r"^[-+]?(?:[0-9][0-9_]*)(?:\.[0-9_]*)?[eE][-+]?[0-9]+$")
_StrictLoader.add_implicit_resolver("tag:yaml.org,2002:float", _FLOAT_WITH_EXPONENT,
                                    list("-+0123456789"))


def _line_map(node: yaml.Node, prefix: str, source: str, out: dict[str, str],
              duplicates: list[Problem]) -> None:
    """Record ``key path -> "source, line N"`` for every mapping key and list item under node."""
    if isinstance(node, yaml.MappingNode):
        seen: dict[object, int] = {}
        for key_node, value_node in node.value:
            if not isinstance(key_node, yaml.ScalarNode):
                continue
            key = key_node.value
            path = f"{prefix}.{key}" if prefix else str(key)
            line = key_node.start_mark.line + 1
            if key in seen:
                duplicates.append(Problem(
                    path, MISSING,
                    f"written twice (lines {seen[key]} and {line}); keep one of them"))
            seen[key] = line
            out.setdefault(path, f"{source}, line {line}")
            _line_map(value_node, path, source, out, duplicates)
    elif isinstance(node, yaml.SequenceNode):
        for index, item in enumerate(node.value):
            path = f"{prefix}.{index}" if prefix else str(index)
            out.setdefault(path, f"{source}, line {item.start_mark.line + 1}")
            _line_map(item, path, source, out, duplicates)


def _syntax_hint(error: yaml.YAMLError) -> str:
    text = str(getattr(error, "problem", "") or "")
    if "'\\t'" in text or "\\t" in text:
        return "; YAML does not allow tab characters for indentation, use spaces"
    if "mapping values are not allowed" in text:
        return "; check the indentation of this line and quote values that contain ': '"
    if "could not find expected ':'" in text or "expected <block end>" in text:
        return "; check the indentation of this line and the line before it"
    return ""


def parse_yaml_text(text: str, source: str) -> tuple[object, dict[str, str]]:
    """Parse YAML text; return ``(data, locations)`` or raise :class:`ConfigError`.

    ``locations`` maps dotted key paths to ``"source, line N"``.
    """
    try:
        node = yaml.compose(text, Loader=_StrictLoader)
    except yaml.MarkedYAMLError as error:
        mark = error.problem_mark or error.context_mark
        where = f"{source}, line {mark.line + 1}, column {mark.column + 1}" if mark else source
        problem = error.problem or error.context or "not valid YAML"
        raise ConfigError([Problem("", MISSING, f"YAML syntax error: {problem}"
                                   f"{_syntax_hint(error)}")],
                          source=source, locations={"": where}) from None
    except yaml.YAMLError as error:
        raise ConfigError([Problem("", MISSING, f"YAML error: {error}")], source=source,
                          locations={"": source}) from None
    if node is None:
        return None, {"": source}
    locations: dict[str, str] = {"": source}
    duplicates: list[Problem] = []
    _line_map(node, "", source, locations, duplicates)
    if duplicates:
        raise ConfigError(duplicates, source=source, locations=locations)
    try:
        data = _StrictLoader(text).get_single_data()
    except yaml.YAMLError as error:  # e.g. an unhashable key: composed fine, cannot be built
        raise ConfigError([Problem("", MISSING, f"YAML error: {error}")], source=source,
                          locations={"": source}) from None
    return data, locations


def parse_yaml_value(text: str) -> object:
    """Parse one ``--set`` value with the same rules as the file; ValueError on bad YAML."""
    try:
        return yaml.load(text, Loader=_StrictLoader)
    except yaml.YAMLError as error:
        problem = getattr(error, "problem", None) or str(error)
        raise ValueError(f"not a valid YAML value ({problem}); quote it if it is text") from None


def read_yaml_file(path: Path, *, what: str = "configuration") -> tuple[object, dict[str, str]]:
    """Read and parse a YAML file; missing files, folders and bad encodings are ConfigErrors."""
    source = str(path)
    problem: str | None = None
    text = ""
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        problem = (f"{what} file not found (looked for {path.resolve()}); check the path and "
                   f"the current folder")
    except IsADirectoryError:
        problem = f"is a folder; give the path of a YAML {what} file inside it"
    except PermissionError:
        problem = f"no permission to read {path}; check the file's permissions"
    except OSError as error:
        problem = f"cannot read {path}: {error.strerror or error}"
    else:
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError as error:
            line = raw[: error.start].count(b"\n") + 1
            problem = (f"not UTF-8 text (byte {error.start}, line {line}); save the file as UTF-8 "
                       f"- is this really a YAML {what}?")
    if problem is not None:
        raise ConfigError([Problem("", MISSING, problem)], source=source,
                          locations={"": source})
    return parse_yaml_text(text, source)

