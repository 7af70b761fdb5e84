"""Read YAML the way a configuration needs it: safe, strict about duplicates, with line numbers.

PyYAML silently keeps the last of two equal keys and reads ``1e3`` as a string (YAML 1.1 wants
``1.0e3``); both have cost people an afternoon, so this loader reports duplicates and accepts the
exponent form. It also remembers the line of every key so that a problem can say where to look.

Every document is bounded before anything is built from it (:func:`check_bounds`): aliases may
share a node many times over ("billion laughs"), or point back into themselves (``a: &a [*a]``);
both are refused with a message instead of eating memory or the stack.
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


#: Bounds of a configuration document. A rig config is a few hundred nodes and a few levels deep;
#: test plans a few thousand nodes. These leave two orders of magnitude of room (common practice
#: for parser limits) and stop an alias bomb after a bounded amount of work.
MAX_TEXT_CHARS = 4_000_000
MAX_EXPANDED_NODES = 200_000
MAX_DEPTH = 64


class DocumentTooLarge(ValueError):
    """A YAML document beyond the bounds above; the message says which bound and how to fix it."""


def check_bounds(node: yaml.Node, *, max_nodes: int = MAX_EXPANDED_NODES,
                 max_depth: int = MAX_DEPTH) -> int:
    """Count the nodes of ``node`` as they would be after alias expansion, without expanding.

    Each distinct node is visited once (its expanded size is remembered), so an alias bomb costs
    time proportional to its text, not to its expansion. Raises :class:`DocumentTooLarge` on an
    alias that refers to itself, nesting deeper than ``max_depth`` or more than ``max_nodes``
    expanded nodes; returns the expanded count otherwise.
    """
    sizes: dict[int, int] = {}
    on_path: set[int] = set()

    def size(n: yaml.Node, depth: int) -> int:
        key = id(n)
        if key in sizes:
            return sizes[key]
        if key in on_path:
            raise DocumentTooLarge(
                f"an alias refers to itself (line {n.start_mark.line + 1}): a recursive structure "
                f"cannot be a configuration; write the values out")
        if depth > max_depth:
            raise DocumentTooLarge(
                f"the document is nested more than {max_depth} levels deep (line {n.start_mark.line + 1}); "
                f"a configuration needs a handful of levels")
        total = 1
        if isinstance(n, (yaml.SequenceNode, yaml.MappingNode)):
            on_path.add(key)
            children = n.value if isinstance(n, yaml.SequenceNode) else \
                [c for pair in n.value for c in pair]
            for child in children:
                total += size(child, depth + 1)
                if total > max_nodes:
                    raise DocumentTooLarge(
                        f"the document expands to more than {max_nodes} values (aliases such as *name repeat "
                        f"whole blocks; line {n.start_mark.line + 1}); a configuration is a few "
                        f"hundred values - remove the repeated aliases")
            on_path.discard(key)
        sizes[key] = total
        return total

    return size(node, 0)


def _compose_bounded(text: str) -> yaml.Node | None:
    """Compose (no objects built yet) and check the bounds; DocumentTooLarge if out of them."""
    if len(text) > MAX_TEXT_CHARS:
        raise DocumentTooLarge(f"the document is {len(text)} characters long, more than {MAX_TEXT_CHARS}; "
                               f"is this really a configuration?")
    try:
        node = yaml.compose(text, Loader=_StrictLoader)
    except RecursionError:
        raise DocumentTooLarge(f"the document is nested too deeply to read; a configuration needs a handful "
                               f"of levels (at most {MAX_DEPTH})") from None
    if node is not None:
        check_bounds(node)
    return node


def _construct(node: yaml.Node) -> object:
    loader = _StrictLoader("")
    try:
        return loader.construct_document(node)
    finally:
        loader.dispose()


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
        node = _compose_bounded(text)
    except DocumentTooLarge as error:
        raise ConfigError([Problem("", MISSING, f"refused: {error}")], source=source,
                          locations={"": source}) from None
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
        data = _construct(node)
    except yaml.YAMLError as error:  # e.g. an unhashable key: composed fine, cannot be built
        raise ConfigError([Problem("", MISSING, f"YAML error: {error}")], source=source,
                          locations={"": source}) from None
    return data, locations


def parse_yaml_value(text: str) -> object:
    """Parse one ``--set`` value with the same rules as the file; ValueError on bad YAML."""
    try:
        node = _compose_bounded(text)
        return None if node is None else _construct(node)
    except DocumentTooLarge as error:
        raise ValueError(f"refused: {error}") from None
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

