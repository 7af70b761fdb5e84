"""``rigloop gui [CONFIG]``: the desktop app (live traces, tuning, Stop, past sessions).

Qt is imported only inside the functions below, so the other commands never load it.
"""

from __future__ import annotations

import os
import sys

NAME = "gui"
HELP = "open the desktop app: connect to a rig, watch live traces, tune, stop, browse sessions"


def add_arguments(parser) -> None:
    from rigloop.commands._common import add_config_arguments

    add_config_arguments(parser, config_required=False)
    parser.add_argument("--screenshot", metavar="FILE",
                        help="connect and arm, save a PNG of the window after --after seconds of "
                             "running, stop the rig and quit (works without a display)")
    parser.add_argument("--after", type=float, default=5.0, metavar="SECONDS",
                        help="seconds of running before the screenshot (default 5)")
    parser.add_argument("--autostart", action="store_true",
                        help="connect to the configured device and arm at once")


def _display_problem(screenshot: bool) -> str | None:
    """Qt aborts the whole process without a display; say so plainly instead."""
    from rigloop.commands.demo import has_display

    if os.environ.get("QT_QPA_PLATFORM") or has_display():
        return None
    if screenshot:
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
        return None
    return ("no display found (DISPLAY/WAYLAND_DISPLAY unset). Run the session headless with "
            "`rigloop run CONFIG`, or take a picture with `rigloop gui CONFIG --screenshot out.png`")


def launch_gui(config_path: str | None, sets: list[str], *, screenshot: str | None = None,
               after_s: float = 5.0, autostart: bool = False) -> int:
    """Open the app on a config (the packaged demo when None); returns the exit code."""
    problem = _display_problem(bool(screenshot))
    if problem:
        print(f"rigloop gui: {problem}", file=sys.stderr)
        return 2
    if config_path is None:
        from rigloop.commands.demo import demo_config_path

        config_path = str(demo_config_path())
    from rigloop.commands._common import load_config_or_report

    if load_config_or_report(config_path, list(sets)) is None:
        return 2
    try:
        from rigloop.gui.app import run_gui
    except ImportError as exc:  # pragma: no cover - PyQt6/pyqtgraph are dependencies
        print(f"rigloop gui: the desktop app needs PyQt6 and pyqtgraph ({exc}); "
              "install them with `pip install PyQt6 pyqtgraph`", file=sys.stderr)
        return 1
    return run_gui(config_path, list(sets), screenshot=screenshot, after_s=after_s, autostart=autostart)


def run(args) -> int:
    if args.after is not None and not (args.after >= 0 and args.after < 3600):
        print(f"usage error: --after {args.after}: give the number of seconds, 0 to 3600", file=sys.stderr)
        return 2
    return launch_gui(args.config, list(getattr(args, "sets", None) or []), screenshot=args.screenshot,
                      after_s=args.after, autostart=args.autostart)
