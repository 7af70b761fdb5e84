"""``rigloop demo``: the main job on the built-in simulated fan rig.

With a display Qt can use, the desktop app opens, connects to the simulated fan and starts the
run by itself, the stop control in view. Otherwise - no display, or a display Qt cannot use (a
stale ``DISPLAY`` in a remote shell, missing system libraries) - the same session runs headless,
and the demo says why. This is what ``make demo`` runs.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

NAME = "demo"
HELP = ("run the built-in simulated fan rig: in the desktop app when a display is usable (it connects "
        "and starts by itself), else headless")


def demo_config_path() -> Path:
    """The packaged demo config (a copy of configs/demo_fan.yaml; a test keeps them equal)."""
    return Path(__file__).resolve().parent.parent / "data" / "demo_fan.yaml"


def has_display() -> bool:
    if sys.platform in ("win32", "darwin"):
        return True
    if os.environ.get("QT_QPA_PLATFORM", "").startswith(("offscreen", "minimal")):
        return False
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def add_arguments(parser) -> None:
    parser.add_argument("config", nargs="?", help="config to run (default: the built-in simulated fan)")
    parser.add_argument("--headless", action="store_true", help="never open the desktop app")
    parser.add_argument("--duration", type=float, metavar="S", help="run length in seconds (headless)")
    parser.add_argument("--set", action="append", metavar="KEY=VALUE", default=[],
                        help="override a config field for this run (repeatable)")


def run(args) -> int:
    from rigloop.commands._common import load_config_or_report

    path = args.config or str(demo_config_path())
    if not args.headless and has_display():
        from rigloop.gui.probe import probe_display

        probe = probe_display()
        if probe.ok:
            print(f"rigloop demo: a display is available, opening the desktop app on {path}; it connects "
                  "to the simulated rig and starts the run (Stop: the red button or Esc)")
            from rigloop.commands.gui import launch_gui

            return launch_gui(path, args.set, arm=True, checked_display=True)
        print(f"rigloop demo: {probe.advice()}", file=sys.stderr)
        print(f"rigloop demo: running the same session headless instead ({path})")
    else:
        why = "--headless given" if args.headless else "no display found (DISPLAY/WAYLAND_DISPLAY unset)"
        print(f"rigloop demo: {why}, running headless on the simulated rig ({path})")
    cfg = load_config_or_report(path, args.set)
    if cfg is None:
        return 2
    from rigloop.commands.run import run_headless

    return run_headless(cfg, duration_s=args.duration)
