"""The Stop control: one large button outside every tab, and the Escape key, both an e-stop.

The key is caught by an application-wide event filter rather than a QShortcut: a shortcut can be
swallowed by the focused widget (a line edit, an open combo box, a dialog), an application event
filter sees every key press before any widget does. The filter consumes the key so that, for
example, a combo box popup does not also treat it as "cancel" and leave the operator wondering
whether the stop went out.
"""

from __future__ import annotations

from PyQt6.QtCore import QEvent, QObject, Qt, pyqtSignal
from PyQt6.QtWidgets import QPushButton, QSizePolicy

from rigloop.gui import theme

STOP_KEY = Qt.Key.Key_Escape
STOP_KEY_TEXT = "Esc"


class StopButton(QPushButton):
    """A big red-on-yellow button; ``clicked`` is connected to the e-stop by the window."""

    def __init__(self, parent=None):
        super().__init__(f"STOP\n[{STOP_KEY_TEXT}]", parent)
        self.setObjectName("estop")
        self.setToolTip(f"E-stop: safe output and STOP to the device at once (key: {STOP_KEY_TEXT}, "
                        "works wherever the focus is). The stop latches until you press Reset.")
        self.setAccessibleName("Emergency stop")
        self.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.setMinimumSize(170, 84)
        self.setSizePolicy(QSizePolicy.Policy.Fixed, QSizePolicy.Policy.Expanding)
        self.setStyleSheet(
            f"QPushButton#estop {{ background: {theme.ESTOP_RED}; color: white; font-size: 20pt;"
            f" font-weight: 800; border: 5px solid {theme.ESTOP_YELLOW}; border-radius: 10px; }}"
            f"QPushButton#estop:pressed {{ background: {theme.ESTOP_RED_DOWN}; }}"
            f"QPushButton#estop:hover {{ border-color: #ffe066; }}")


class StopKeyFilter(QObject):
    """Install on the QApplication; emits ``triggered`` on every (non-repeat) press of the key."""

    triggered = pyqtSignal()

    def __init__(self, parent=None, key=STOP_KEY):
        super().__init__(parent)
        self.key = key
        self.enabled = True

    def eventFilter(self, obj, event) -> bool:  # noqa: N802 - Qt's name
        etype = event.type()
        if etype in (QEvent.Type.KeyPress, QEvent.Type.ShortcutOverride) and self.enabled:
            if event.key() == self.key:
                if etype == QEvent.Type.KeyPress and not event.isAutoRepeat():
                    self.triggered.emit()
                event.accept()
                return True
        return False
