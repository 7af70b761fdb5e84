"""``rigloop gui [CONFIG]``: the desktop app (live traces, tuning, Stop, past sessions).

Qt is imported only inside the functions below (and in a child process that first checks that
Qt can open a window at all), so the other commands never load it.
"""

from __future__ import annotations

import argparse
import os
import sys

from rigloop.exit_codes import EXIT_INTERNAL, EXIT_USAGE

NAME = "gui"
HELP = "open the desktop app: connect to a rig, watch live traces, tune, stop, browse sessions"

DEFAULT_SCREENSHOT_DELAY_S = 5.0


def _window_size(text: str) -> tuple[int, int]:
    width, sep, height = text.lower().partition("x")
    try:
        size = (int(width), int(height))
    except ValueError:
        size = (0, 0)
    if not sep or not (640 <= size[0] <= 7680 and 480 <= size[1] <= 4320):
        raise argparse.ArgumentTypeError(f"{text!r} is not WIDTHxHEIGHT in pixels, e.g. 1280x720 "
                                         "(640x480 to 7680x4320)")
    return size


def _seconds(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = -1.0
    if not 0 <= value < 3600:
        raise argparse.ArgumentTypeError(f"{text!r}: give the number of seconds, 0 to 3600")
    return value


def add_arguments(parser) -> None:
    from rigloop.commands._common import add_config_arguments

    add_config_arguments(parser, config_required=False)
    start = parser.add_mutually_exclusive_group()
    start.add_argument("--connect", action="store_true",
                       help="connect to the configured device at once; the output stays safe (idle)")
    start.add_argument("--connect-and-arm", action="store_true",
                       help="connect to the configured device and arm at once: the loop drives the "
                            "actuator and the rig moves")
    parser.add_argument("--screenshot", metavar="FILE",
                        help="save a PNG of the window after --screenshot-delay seconds and quit "
                             "(works without a display). It never arms: add --connect to show the "
                             "connected idle rig, --connect-and-arm to show it running")
    parser.add_argument("--screenshot-delay", type=_seconds, default=DEFAULT_SCREENSHOT_DELAY_S,
                        metavar="SECONDS",
                        help="seconds before the screenshot, counted from the window opening, from "
                             "idle with --connect, from running with --connect-and-arm (default 5)")
    parser.add_argument("--window-size", type=_window_size, default=None, metavar="WIDTHxHEIGHT",
                        help="initial window size in pixels, e.g. 1280x720 (default 1400x860)")


def _display_problem(screenshot: bool) -> str | None:
    """Qt aborts the whole process without a usable display; say so plainly instead."""
    from rigloop.commands.demo import has_display

    if os.environ.get("QT_QPA_PLATFORM") or has_display():
        return None
    if screenshot:
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
        return None
    return ("no display found (DISPLAY/WAYLAND_DISPLAY unset). Run the session headless with "
            "`rigloop run CONFIG`, or take a picture with `rigloop gui CONFIG --screenshot out.png`")


def launch_gui(config_path: str | None, sets: list[str], *, screenshot: str | None = None,
               screenshot_delay_s: float = DEFAULT_SCREENSHOT_DELAY_S, connect: bool = False,
               arm: bool = False, window_size: tuple[int, int] | None = None,
               checked_display: bool = False) -> int:
    """Open the app on a config (the packaged demo when None); returns the exit code."""
    problem = _display_problem(bool(screenshot))
    if problem:
        print(f"rigloop gui: {problem}", file=sys.stderr)
        return EXIT_USAGE
    if not checked_display and not os.environ.get("QT_QPA_PLATFORM", "").startswith(("offscreen", "minimal")):
        from rigloop.gui.probe import probe_display

        probe = probe_display()
        if not probe.ok and screenshot:
            print(f"rigloop gui: Qt cannot use the display ({probe.reason}); rendering the screenshot "
                  "offscreen", file=sys.stderr)
            os.environ["QT_QPA_PLATFORM"] = "offscreen"
        elif not probe.ok:
            print(f"rigloop gui: {probe.advice()}", file=sys.stderr)
            return EXIT_INTERNAL
    if config_path is None:
        from rigloop.commands.demo import demo_config_path

        config_path = str(demo_config_path())
    from rigloop.commands._common import load_config_or_report

    if load_config_or_report(config_path, list(sets)) is None:
        return EXIT_USAGE
    try:
        from rigloop.gui.app import run_gui
    except ImportError as exc:  # pragma: no cover - PyQt6/pyqtgraph are dependencies
        print(f"rigloop gui: the desktop app needs PyQt6 and pyqtgraph ({exc}); "
              "install them with `pip install PyQt6 pyqtgraph`", file=sys.stderr)
        return EXIT_INTERNAL
    return run_gui(config_path, list(sets), screenshot=screenshot, screenshot_delay_s=screenshot_delay_s,
                   connect=connect, arm=arm, window_size=window_size)


def run(args) -> int:
    return launch_gui(args.config, list(getattr(args, "sets", None) or []), screenshot=args.screenshot,
                      screenshot_delay_s=args.screenshot_delay, connect=args.connect,
                      arm=args.connect_and_arm, window_size=args.window_size)
