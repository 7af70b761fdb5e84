"""Start the desktop app: one QApplication, one main window, optional autostart and screenshot.

``--screenshot FILE --after S`` connects and arms on the configured device, waits S seconds of
running (so the traces have something to show), saves a PNG of the window, stops the rig the
way closing the window does, and quits - a picture for the docs and a smoke test in one command.
"""

from __future__ import annotations

import os
import sys

from rigloop.gui.main_window import WINDOW_SIZE

#: longest wait for the rig to reach "running" before a screenshot is taken anyway
SCREENSHOT_START_TIMEOUT_S = 40.0


def _make_app():
    from PyQt6.QtWidgets import QApplication

    app = QApplication.instance()
    if app is None:
        app = QApplication(sys.argv[:1] or ["rigloop"])
        app.setApplicationName("rigloop")
        app.setApplicationDisplayName("rigloop")
    return app


def configure_graphics() -> None:
    import pyqtgraph as pg

    from rigloop.gui import theme

    pg.setConfigOptions(antialias=False, background=theme.BG, foreground=theme.MUTED)


class ScreenshotDriver:
    """Take the picture ``after_s`` seconds after the rig first runs, then close the window."""

    def __init__(self, window, path: str, after_s: float):
        from PyQt6.QtCore import QTimer

        self.window = window
        self.path = path
        self.after_s = max(0.0, float(after_s))
        self.saved = False
        self.error: str | None = None
        self._armed = False
        self._shot = QTimer(window)
        self._shot.setSingleShot(True)
        self._shot.timeout.connect(self.take)
        self._fallback = QTimer(window)
        self._fallback.setSingleShot(True)
        self._fallback.timeout.connect(self.take)
        window.session.state_changed.connect(self._on_state)
        window.session.ended.connect(lambda _final: self._shot.start(200) if not self.saved else None)

    def start(self) -> None:
        self._fallback.start(int(1000 * (self.after_s + SCREENSHOT_START_TIMEOUT_S)))
        if not self.window.connect_and_arm():
            self._shot.start(200)

    def _on_state(self, state: str) -> None:
        if state == "running" and not self._armed:
            self._armed = True
            self._shot.start(int(1000 * self.after_s))

    def take(self) -> None:
        if self.saved:
            return
        self._fallback.stop()
        self._shot.stop()
        self.window.live.redraw()
        pixmap = self.window.grab()
        self.saved = bool(pixmap.save(self.path, "PNG"))
        if not self.saved:
            self.error = f"could not write the screenshot to {self.path}; check the folder exists and is writable"
        self.window.close()


def run_gui(config_path: str | None = None, sets=(), *, screenshot: str | None = None,
            after_s: float = 5.0, autostart: bool = False, sim_extra: dict | None = None) -> int:
    """Run the app until its window closes. Exit code: 0, or 1 if a requested screenshot failed
    or an autostarted rig could not be run."""
    app = _make_app()
    configure_graphics()
    from rigloop.gui.main_window import MainWindow
    from rigloop.gui.theme import apply_theme

    apply_theme(app)
    window = MainWindow(config_path, sets, sim_extra=sim_extra)
    if screenshot:
        window.setFixedSize(*WINDOW_SIZE)
    window.show()
    driver = None
    if screenshot:
        if window.config_path is None:
            print("rigloop gui: no usable config, no screenshot taken", file=sys.stderr)
            window.close()
            return 2
        driver = ScreenshotDriver(window, os.fspath(screenshot), after_s)
        driver.start()
    elif autostart and window.config_path is not None:
        window.connect_and_arm()
    elif autostart:
        return 2
    window.closed.connect(app.quit)
    app.exec()
    final = window.last_final or {}
    if driver is not None:
        if not driver.saved:
            print(f"rigloop gui: {driver.error or 'no screenshot taken'}", file=sys.stderr)
            return 1
        print(f"rigloop gui: screenshot saved to {screenshot}")
        if final.get("error") and not final.get("samples"):
            print(f"rigloop gui: the rig did not run: {final['error']}", file=sys.stderr)
            return 1
    return 0
