"""The Stop control: one large button outside every tab, and the Escape key, both an e-stop.

It is a *software* stop: a request to the engine, which sends STOP to the device. It is not an
emergency-stop device and does not look like one (no red on yellow - the colours the
machine-safety standards reserve for the hardwired device); it says "software stop" on its face.
The rig's hardwired emergency stop stays the one that cuts power (safety.md).

The key is caught by an application-wide event filter rather than a QShortcut: a shortcut can be
swallowed by the focused widget (a line edit, an open combo box, a dialog), an application event
filter sees every key press before any widget does. The filter consumes the key so that, for
example, a combo box popup does not also treat it as "cancel" and leave the operator wondering
whether the stop went out.
"""

from __future__ import annotations

from PyQt6.QtCore import QEvent, QObject, Qt, pyqtSignal
from PyQt6.QtGui import QKeySequence
from PyQt6.QtWidgets import QLabel, QPushButton, QSizePolicy, QVBoxLayout

from rigloop.gui import theme

STOP_KEY = Qt.Key.Key_Escape
STOP_KEY_TEXT = "Esc"
STOP_WORD = "STOP"
STOP_SUBTITLE = f"software stop \u00b7 {STOP_KEY_TEXT}"


class StopButton(QPushButton):
    """A big red button with a white border, labelled as a software stop; ``clicked`` is
    connected to the e-stop request by the window."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("estop")
        self.word = QLabel(STOP_WORD)
        self.word.setObjectName("stopWord")
        self.subtitle = QLabel(STOP_SUBTITLE)
        self.subtitle.setObjectName("stopSubtitle")
        lay = QVBoxLayout(self)
        lay.setContentsMargins(8, 4, 8, 6)
        lay.setSpacing(0)
        for label in (self.word, self.subtitle):
            label.setAlignment(Qt.AlignmentFlag.AlignCenter)
            label.setAttribute(Qt.WidgetAttribute.WA_TransparentForMouseEvents)
            lay.addWidget(label)
        self.setToolTip(f"Software stop: safe output and STOP to the device at once (key: {STOP_KEY_TEXT}, "
                        "works wherever the focus is). The stop latches until you press Reset.\n"
                        "This is not an emergency-stop device: keep the rig's hardwired emergency "
                        "stop within reach.")
        self.setAccessibleName("Software stop (not an emergency-stop device)")
        self.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.setMinimumSize(172, 76)
        self.setSizePolicy(QSizePolicy.Policy.Fixed, QSizePolicy.Policy.Expanding)
        self.setStyleSheet(
            f"QPushButton#estop {{ background: {theme.STOP_RED}; border: 3px solid {theme.STOP_BORDER};"
            f" border-radius: 6px; }}"
            "QLabel#stopWord { color: white; font-size: 22pt; font-weight: 800; }"
            "QLabel#stopSubtitle { color: white; font-size: 9pt; font-weight: 600; }"
            f"QPushButton#estop:pressed {{ background: {theme.STOP_RED_DOWN}; }}"
            f"QPushButton#estop:hover {{ border-color: white; }}")

    def caption(self) -> str:
        """What the button says (its face is two labels, not the button's own text)."""
        return f"{self.word.text()} {self.subtitle.text()}"


def _is_quit_key(event) -> bool:
    """Ctrl+Q (Qt reports macOS's Cmd as Control), or the platform's own quit binding."""
    ctrl = event.modifiers() & Qt.KeyboardModifier.ControlModifier
    return bool(ctrl and event.key() == Qt.Key.Key_Q) or event.matches(QKeySequence.StandardKey.Quit)


class StopKeyFilter(QObject):
    """Install on the QApplication; emits ``triggered`` on every (non-repeat) press of the key,
    and ``quit_requested`` on the platform's quit keys (Ctrl+Q; Cmd+Q on macOS), which, like the
    stop key, must work wherever the focus is."""

    triggered = pyqtSignal()
    quit_requested = pyqtSignal()

    def __init__(self, parent=None, key=STOP_KEY):
        super().__init__(parent)
        self.key = key
        self.enabled = True

    def eventFilter(self, obj, event) -> bool:  # noqa: N802 - Qt's name
        etype = event.type()
        if etype in (QEvent.Type.KeyPress, QEvent.Type.ShortcutOverride) and self.enabled:
            if _is_quit_key(event):
                if etype == QEvent.Type.KeyPress and not event.isAutoRepeat():
                    self.quit_requested.emit()
                event.accept()
                return True
            if event.key() == self.key:
                if etype == QEvent.Type.KeyPress and not event.isAutoRepeat():
                    self.triggered.emit()
                event.accept()
                return True
        return False
