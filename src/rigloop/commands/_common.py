"""Pieces every command shares: the CONFIG argument, ``--set``, exit codes, config reporting."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from typing import TextIO

from rigloop.config import Config, ConfigError, warnings_of



class _AppendSet(argparse.Action):
    """Collect ``--set`` values in ``args.sets`` (and, for convenience, the same list as ``args.set``)."""

    def __call__(self, parser, namespace, values, option_string=None):
        items = list(getattr(namespace, "sets", None) or []) + [values]
        namespace.sets = items
        namespace.set = items


def add_config_arguments(parser: argparse.ArgumentParser, *, config_required: bool = True) -> None:
    """Positional CONFIG (a YAML file) and repeatable ``--set KEY=VALUE`` (``args.sets``)."""
    parser.add_argument("config", metavar="CONFIG", nargs=None if config_required else "?",
                        default=None, help="rig configuration, a YAML file (see docs/config.md)")
    parser.set_defaults(set=[])
    parser.add_argument("--set", dest="sets", metavar="KEY=VALUE", action=_AppendSet, default=[],
                        help="override one key of the configuration, e.g. --set control.kp=4 or "
                             "--set channels.0.unit=rpm (VALUE is read as YAML; repeatable)")


def report_config_error(error: ConfigError, stream: TextIO | None = None) -> None:
    """Print each problem as ``config error: ...`` and a count, to stderr by default."""
    stream = stream if stream is not None else sys.stderr
    for line in error.lines():
        print(f"config error: {line}", file=stream)
    count = len(error.problems)
    print(f"{count} problem{'s' if count != 1 else ''} found in {error.source}", file=stream)


def load_config_or_report(path, sets: Sequence[str] | None, *, show_warnings: bool = True,
                          stream: TextIO | None = None) -> Config | None:
    """Load and validate; on problems print them (no traceback) and return None.

    Warnings (legal but doubtful settings) go to the same stream as ``config warning: ...`` unless
    ``show_warnings`` is False (``rigloop check`` prints them in its own table).
    """
    stream = stream if stream is not None else sys.stderr
    from rigloop.config import load_config

    if path is None:
        print("config error: no configuration file given; pass one such as configs/demo_fan.yaml",
              file=stream)
        return None
    try:
        cfg = load_config(path, list(sets or ()))
    except ConfigError as error:
        report_config_error(error, stream)
        return None
    if show_warnings:
        for item in warnings_of(cfg):
            print(f"config warning: {item.label}: {item.note}", file=stream)
    return cfg
