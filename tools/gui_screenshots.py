"""Screenshots of the desktop app in each state, for docs/ and for looking at the layout.

    xvfb-run -s "-screen 0 1920x1080x24" .venv/bin/python tools/gui_screenshots.py OUT_DIR

Drives the real window against the simulated fan (an engine process and a simulated device, as
``rigloop gui`` does) and saves, for each window size: idle (connected, output safe), running,
completed (back to idle after the run), tripped (a limit below the profile's top level, so the
config warning shows too) and the past-sessions view. Works offscreen as well
(``QT_QPA_PLATFORM=offscreen``), but fonts then differ from a real X server's.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "configs" / "demo_fan.yaml"
SIZES = ((1280, 720), (1920, 1080))


class _TimedOut(Exception):
    pass


def _wait(app, predicate, timeout_s: float, what: str) -> None:
    deadline = time.monotonic() + timeout_s
    while not predicate():
        if time.monotonic() > deadline:
            raise _TimedOut(f"timed out waiting for {what}")
        app.processEvents()
        time.sleep(0.01)


def _settle(app, seconds: float) -> None:
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        app.processEvents()
        time.sleep(0.01)


def _shoot(app, win, path: Path) -> None:
    _settle(app, 0.3)
    win.live.redraw()
    app.processEvents()
    win.grab().save(str(path), "PNG")
    print(f"saved {path}")


def _window(size, sets):
    from rigloop.gui.main_window import MainWindow

    win = MainWindow(str(DEMO), sets)
    win.resize(*size)
    win.show()
    return win


def _close(app, win) -> None:
    if win.state in ("running", "stopping"):
        win.estop("screenshot tool")
    win.close()
    _wait(app, lambda: not win.session.connected, 60, "the engine to end")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out", type=Path, help="folder for the PNG files")
    parser.add_argument("--sizes", default=",".join(f"{w}x{h}" for w, h in SIZES),
                        help="window sizes, e.g. 1280x720,1920x1080")
    args = parser.parse_args(argv)
    args.out.mkdir(parents=True, exist_ok=True)
    sizes = [tuple(int(x) for x in s.split("x")) for s in args.sizes.split(",")]

    from PyQt6.QtWidgets import QApplication

    from rigloop.gui.app import configure_graphics
    from rigloop.gui.theme import apply_theme

    app = QApplication(sys.argv[:1])
    apply_theme(app)
    configure_graphics()
    sessions = Path(tempfile.mkdtemp(prefix="rigloop-shots-"))
    # a machine busy with other work must not trip the rig on stale data while it is pictured
    base = [f"recording.dir={sessions}", "device.rate_hz=200", "device.watchdog_ms=500",
            "limits.stale_periods=100", "limits.overruns.max=100000"]
    windows = []
    try:
        for size in sizes:
            _pictures(app, size, base, args.out, windows)
    except _TimedOut as exc:
        print(f"gui_screenshots: {exc} (a busy machine can trip the rig; try again)", file=sys.stderr)
        return 1
    finally:
        for win in windows:             # end every engine: no shared memory left behind
            if win.session.connected:
                _close(app, win)
    return 0


def _pictures(app, size, base, out, windows) -> None:
    """idle, running, completed; then tripped and past sessions, at one window size."""
    w, h = size
    tag = f"{w}x{h}"
    win = _window((w, h), base)
    windows.append(win)
    _shoot(app, win, out / f"gui-{tag}-disconnected.png")
    win.connect_rig()
    _wait(app, lambda: win.state == "idle", 60, "idle")
    _settle(app, 1.0)
    _shoot(app, win, out / f"gui-{tag}-idle.png")
    win.arm()
    _wait(app, lambda: win.state == "running", 60, "running")
    _settle(app, 6.0)
    if h >= 1000:                 # room for two more panels (one per unit)
        win.live.tick_channel("current_a")
        win.live.tick_channel("temp_c")
    _settle(app, 1.0)
    _shoot(app, win, out / f"gui-{tag}-running.png")
    _wait(app, lambda: "completed" in win.banner.text(), 60, "the run to complete")
    _settle(app, 1.0)
    _shoot(app, win, out / f"gui-{tag}-completed.png")
    _close(app, win)

    win = _window((w, h), [*base, "limits.speed_rpm.max=2000"])
    windows.append(win)
    win.connect_and_arm()
    _wait(app, lambda: win.state == "tripped", 60, "the limit trip")
    _settle(app, 1.5)
    _shoot(app, win, out / f"gui-{tag}-tripped.png")
    win.tabs.setCurrentWidget(win.past)
    win.past.refresh()
    win.past.open(win.past.list.item(1).data(256))     # the completed run of the first window
    _settle(app, 0.5)
    win.past.plots.move_cursor(4.0)
    _shoot(app, win, out / f"gui-{tag}-past-sessions.png")
    _close(app, win)


if __name__ == "__main__":
    sys.exit(main())
