"""Start the desktop app: one QApplication, one main window; optional connect, arm and screenshot.

``--screenshot FILE`` saves a PNG of the window after ``--screenshot-delay`` seconds and quits. It
never arms the rig by itself: with ``--connect`` the picture shows the connected, idle rig
(output safe); only with the separate ``--connect-and-arm`` does the loop run, and then the delay
counts from the moment the rig runs. Afterwards the window closes the way an operator closes it
(a ramped stop first if the rig moves).

SIGTERM and SIGINT are handled like closing the window: a rig that moves is ramped down, the
engine ends the session and frees its shared memory, and the app exits 0.
"""

from __future__ import annotations

import os
import signal
import socket
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

    pg.setConfigOptions(antialias=False, background=theme.PLOT_BG, foreground=theme.PLOT_TEXT)


class ScreenshotDriver:
    """Take the picture ``delay_s`` seconds after the window reaches the wanted state (shown;
    connected and idle; running), then close the window."""

    def __init__(self, window, path: str, delay_s: float, *, connect: bool = False, arm: bool = False):
        from PyQt6.QtCore import QTimer

        self.window = window
        self.path = path
        self.delay_s = max(0.0, float(delay_s))
        self.connect = connect or arm
        self.arm = arm
        self.saved = False
        self.error: str | None = None
        self._waiting = True
        self._shot = QTimer(window)
        self._shot.setSingleShot(True)
        self._shot.timeout.connect(self.take)
        self._fallback = QTimer(window)
        self._fallback.setSingleShot(True)
        self._fallback.timeout.connect(self.take)
        window.session.state_changed.connect(self._on_state)
        window.session.ended.connect(lambda _final: self._shot.start(200) if not self.saved else None)

    def start(self) -> None:
        self._fallback.start(int(1000 * (self.delay_s + SCREENSHOT_START_TIMEOUT_S)))
        if not self.connect:
            self._waiting = False
            self._shot.start(int(1000 * self.delay_s))
            return
        started = self.window.connect_and_arm() if self.arm else self.window.connect_rig()
        if not started:
            self._shot.start(200)

    def _on_state(self, state: str) -> None:
        wanted = "running" if self.arm else "idle"
        if state == wanted and self._waiting:
            self._waiting = False
            self._shot.start(int(1000 * self.delay_s))

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


def close_on_signals(window, signals=(signal.SIGTERM, signal.SIGINT)):
    """Make SIGTERM/SIGINT close the window (the same path as the close button).

    Python runs a signal handler only when it gets control, and inside Qt's event loop it gets
    none until some Python callback runs; the wake-up fd makes the loop call back at once."""
    from PyQt6.QtCore import QSocketNotifier, QTimer

    reader, writer = socket.socketpair()
    reader.setblocking(False)
    writer.setblocking(False)
    old_fd = signal.set_wakeup_fd(writer.fileno())
    notifier = QSocketNotifier(reader.fileno(), QSocketNotifier.Type.Read, window)

    def drain() -> None:
        try:
            reader.recv(256)
        except OSError:
            pass

    notifier.activated.connect(drain)

    def on_signal(signum, _frame) -> None:
        name = signal.Signals(signum).name
        print(f"rigloop gui: {name} received: closing the window (the rig is ramped down if it moves)",
              file=sys.stderr, flush=True)
        QTimer.singleShot(0, window.close)

    old = {s: signal.signal(s, on_signal) for s in signals}

    def restore() -> None:
        for s, h in old.items():
            signal.signal(s, h)
        signal.set_wakeup_fd(old_fd)
        notifier.setEnabled(False)
        reader.close()
        writer.close()

    return restore


def run_gui(config_path: str | None = None, sets=(), *, screenshot: str | None = None,
            screenshot_delay_s: float = 5.0, connect: bool = False, arm: bool = False,
            window_size: tuple[int, int] | None = None, sim_extra: dict | None = None) -> int:
    """Run the app until its window closes. Exit code: 0, 1 if a requested screenshot failed or
    a rig asked to run could not be run, 2 without a usable config."""
    app = _make_app()
    configure_graphics()
    from rigloop.gui.main_window import MainWindow
    from rigloop.gui.theme import apply_theme

    apply_theme(app)
    window = MainWindow(config_path, sets, sim_extra=sim_extra)
    size = window_size or WINDOW_SIZE
    if screenshot:
        window.setFixedSize(*size)
    else:
        window.resize(*size)
    window.show()
    restore_signals = close_on_signals(window)
    driver = None
    if (screenshot or connect or arm) and window.config_path is None:
        print("rigloop gui: no usable config: nothing to connect to, no screenshot taken", file=sys.stderr)
        window.close()
        restore_signals()
        return 2
    if screenshot:
        driver = ScreenshotDriver(window, os.fspath(screenshot), screenshot_delay_s, connect=connect, arm=arm)
        driver.start()
    elif arm:
        window.connect_and_arm()
    elif connect:
        window.connect_rig()
    window.closed.connect(app.quit)
    try:
        app.exec()
    finally:
        restore_signals()
    final = window.last_final or {}
    if driver is not None:
        if not driver.saved:
            print(f"rigloop gui: {driver.error or 'no screenshot taken'}", file=sys.stderr)
            return 1
        print(f"rigloop gui: screenshot saved to {screenshot}")
        if driver.connect and final.get("error") and not final.get("samples"):
            print(f"rigloop gui: the rig did not run: {final['error']}", file=sys.stderr)
            return 1
    return 0
