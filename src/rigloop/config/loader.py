"""Load a configuration: YAML file -> overrides -> device URL -> schema walk -> rules -> Config.

Every step adds to one list of problems; nothing is built unless that list is empty, and then
the whole list is raised at once as a :class:`~rigloop.config.problems.ConfigError`.
"""

from __future__ import annotations

import copy
from collections.abc import Mapping, Sequence
from pathlib import Path

from rigloop.config.device_url import device_url, parse_device_url
from rigloop.config.model import Config, build_config
from rigloop.config.overrides import apply_overrides, override_locations
from rigloop.config.problems import MISSING, ConfigError, Problem
from rigloop.config.rules import check_rules
from rigloop.config.validate import SchemaWalker
from rigloop.config.yaml_source import read_yaml_file

_EMPTY = ("the configuration is empty; it needs at least channels, actuator and control "
          "(see configs/demo_fan.yaml)")


def _top_level_problem(data: object) -> Problem | None:
    if data is None:
        return Problem("", MISSING, _EMPTY)
    if not isinstance(data, Mapping):
        return Problem("", MISSING, "the configuration must be a mapping of keys (rig:, device:, "
                                    "channels:, ...), not a " + type(data).__name__)
    return None


def _merge_url(mapping: dict, problems: list[Problem]) -> None:
    """Let ``device.url`` overwrite ``device.link`` and the keys it carries."""
    device = mapping.get("device")
    if not isinstance(device, dict):
        return
    url = device.get("url")
    if not isinstance(url, str) or not url.strip():
        return  # null, or a wrong type / empty text the schema walk reports
    try:
        parsed = parse_device_url(url)
    except ValueError as error:
        message = str(error)
        message = message.removeprefix(f"{url.strip()!r}: ")  # the problem shows the value already
        problems.append(Problem("device.url", url, message))
        return
    device["link"] = parsed.pop("link")
    for section, values in parsed.items():
        target = device.get(section)
        if target is None:
            device[section] = target = {}
        if isinstance(target, dict):
            target.update(values)


def _serial_port_url(mapping: dict, problems: list[Problem]) -> None:
    """Accept ``device.serial.port: serial:///dev/pts/3[?baud=N]`` - the form ``rigloop sim --pty``
    prints - as the port path it names (and its baud, unless ``device.serial.baud`` is given)."""
    device = mapping.get("device")
    serial = device.get("serial") if isinstance(device, dict) else None
    port = serial.get("port") if isinstance(serial, dict) else None
    if not isinstance(port, str) or not port.strip().lower().startswith("serial:"):
        return
    try:
        parsed = parse_device_url(port.strip())
    except ValueError as error:
        message = str(error).removeprefix(f"{port.strip()!r}: ")
        problems.append(Problem("device.serial.port", port, message))
        return
    serial["port"] = parsed["serial"]["port"]
    if "baud" in parsed["serial"] and serial.get("baud") is None:
        serial["baud"] = parsed["serial"]["baud"]


def _parse(mapping: object, *, base_dir: Path, source: str, locations: dict[str, str],
           source_path: Path | None) -> Config:
    problem = _top_level_problem(mapping)
    if problem is not None:
        raise ConfigError([problem], source=source, locations=locations)
    work = copy.deepcopy(dict(mapping))  # type: ignore[arg-type]
    problems: list[Problem] = []
    _merge_url(work, problems)
    _serial_port_url(work, problems)
    walker = SchemaWalker()
    root = walker.run(work)
    problems.extend(walker.problems)
    problems.extend(check_rules(root, base_dir))
    if problems:
        raise ConfigError(problems, source=source, locations=locations)
    dev = root["device"]
    url = dev["url"] or device_url(dev["link"], dev["udp"], dev["serial"], dev["sim"])
    return build_config(root, source_path=source_path, base_dir=base_dir, url=url)


def parse_config(mapping: dict, *, base_dir: Path | None = None, source: str = "<dict>") -> Config:
    """Validate a mapping (as read from YAML) and build the Config.

    Relative files in it (reference table, plant parameters, plan) are taken from ``base_dir``
    (default: the current folder). Raises ConfigError with every problem found.
    """
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    return _parse(mapping, base_dir=base.absolute(), source=source, locations={},
                  source_path=None)


def load_config(path: str | Path, overrides: Sequence[str] = ()) -> Config:
    """Read a YAML configuration file, apply ``--set`` overrides, validate, build the Config."""
    path = Path(path)
    data, locations = read_yaml_file(path)
    problem = _top_level_problem(data)
    if problem is not None:
        raise ConfigError([problem], source=str(path), locations=locations)
    if overrides:
        data = apply_overrides(data, overrides)  # type: ignore[arg-type]
        locations.update(override_locations(overrides))
    return _parse(data, base_dir=path.absolute().parent, source=str(path), locations=locations,
                  source_path=path.absolute())
