"""Can Qt open a window here? Asked in a child process, because when it cannot, Qt aborts the
whole process (SIGABRT) instead of raising: a display that points nowhere (a remote shell with a
stale ``DISPLAY``), or a Linux machine without the system libraries of Qt's X11 plugin.

``python -m rigloop.gui.probe`` opens and closes a small window and exits 0; anything else means
no. :func:`probe_display` runs it with a timeout and, on failure, says what is missing and how to
fix it (:data:`SYSTEM_PACKAGES`). This module imports Qt only in the child.
"""

from __future__ import annotations

import os
import subprocess
import sys
from dataclasses import dataclass

#: longest wait for the child (a hung X server must not hang the demo)
PROBE_TIMEOUT_S = 30.0

#: System packages the desktop app's Qt X11 (xcb) plugin needs on Linux, per distribution family
#: (Qt's "Qt for X11 requirements" list, from memory); README.md lists the same.
SYSTEM_PACKAGES = {
    "Debian/Ubuntu": "sudo apt-get install libxcb-cursor0 libxcb-icccm4 libxcb-keysyms1 libxcb-image0 "
                     "libxcb-render-util0 libxcb-shape0 libxcb-xkb1 libxkbcommon-x11-0 libegl1 libgl1 "
                     "libfontconfig1 libdbus-1-3",
    "Fedora": "sudo dnf install xcb-util-cursor xcb-util-wm xcb-util-keysyms xcb-util-image "
              "xcb-util-renderutil libxkbcommon-x11 mesa-libEGL mesa-libGL fontconfig dbus-libs",
}


@dataclass(frozen=True)
class ProbeResult:
    ok: bool
    reason: str = ""       # Qt's own words (or the timeout), when not ok

    def advice(self) -> str:
        """What to do about it, in a few lines."""
        if self.ok:
            return ""
        lines = [f"Qt cannot open a window here: {self.reason}",
                 "If no display is meant to be used, unset DISPLAY (and WAYLAND_DISPLAY). "
                 "Otherwise the desktop app needs these system packages:"]
        lines += [f"  {family}: {command}" for family, command in SYSTEM_PACKAGES.items()]
        lines.append("To see which library Qt misses, run it with QT_DEBUG_PLUGINS=1, e.g. "
                     "`QT_DEBUG_PLUGINS=1 rigloop gui`.")
        return "\n".join(lines)


def _reason(stderr: str, returncode: int | None) -> str:
    """The telling line of Qt's output (it prints several, the first is usually the cause)."""
    lines = [ln.strip() for ln in stderr.splitlines() if ln.strip()]
    for key in ("could not connect to display", "is needed to load", "Could not load the Qt platform",
                "no Qt platform plugin", "cannot open display"):
        for ln in lines:
            if key.lower() in ln.lower():
                return ln.removeprefix("qt.qpa.xcb: ").removeprefix("qt.qpa.plugin: ")
    if lines:
        return lines[-1]
    return f"the test window's process ended with code {returncode}"


def probe_display(timeout_s: float = PROBE_TIMEOUT_S, env: dict | None = None) -> ProbeResult:
    """Open a window in a child process; ok when it could."""
    try:
        done = subprocess.run([sys.executable, "-m", "rigloop.gui.probe"], capture_output=True, text=True,
                              timeout=timeout_s, env=env if env is not None else dict(os.environ))
    except subprocess.TimeoutExpired:
        return ProbeResult(False, f"opening a test window took longer than {timeout_s:g} s "
                                  f"(DISPLAY={os.environ.get('DISPLAY', '')!r} does not answer)")
    except OSError as exc:
        return ProbeResult(False, f"could not start the test window's process ({exc})")
    if done.returncode == 0 and "window ok" in done.stdout:
        return ProbeResult(True)
    return ProbeResult(False, _reason(done.stderr, done.returncode))


def _open_and_close_a_window() -> int:
    from PyQt6.QtWidgets import QApplication, QWidget

    app = QApplication(sys.argv[:1] or ["rigloop-probe"])
    window = QWidget()
    window.resize(40, 30)
    window.show()
    app.processEvents()
    window.close()
    print(f"window ok ({app.platformName()})")
    return 0


if __name__ == "__main__":
    sys.exit(_open_and_close_a_window())
