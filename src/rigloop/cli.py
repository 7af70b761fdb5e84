"""Command-line front door.

Each sub-command is a module in :mod:`rigloop.commands` that defines ``NAME``, ``HELP``,
``add_arguments(parser)`` and ``run(args) -> int``. This file only discovers and dispatches, so
adding a command never means editing a central list.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys

from rigloop import __version__
from rigloop import commands as _commands_pkg
from rigloop.exit_codes import EXIT_OK, EXIT_SIGNAL


def _command_modules():
    for info in sorted(pkgutil.iter_modules(_commands_pkg.__path__), key=lambda i: i.name):
        if info.name.startswith("_"):
            continue
        module = importlib.import_module(f"rigloop.commands.{info.name}")
        if hasattr(module, "NAME") and hasattr(module, "run"):
            yield module


class _Parser(argparse.ArgumentParser):
    """argparse exits 2 on usage errors already; keep its message short and friendly."""


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="rigloop",
        description="Run model-free control (iP/iPI/iPD/iPID) on a motor or fan rig, "
        "or on the built-in simulated rig.",
    )
    parser.add_argument("--version", action="version", version=f"rigloop {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in _command_modules():
        p = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP)
        module.add_arguments(p)
        p.set_defaults(_run=module.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "_run", None) is None:
        parser.print_help()
        return EXIT_OK
    try:
        return int(args._run(args))
    except KeyboardInterrupt:
        print("rigloop: interrupted", file=sys.stderr)
        return EXIT_SIGNAL
    except BrokenPipeError:
        return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
