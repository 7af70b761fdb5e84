"""The state of the rig in large words, with a line saying what it means or why it tripped.

The trip text stays until the operator resets, even if the engine moves on (for example when the
app reconnects), so a trip is never missed because it happened while someone looked away.
"""

from __future__ import annotations

from PyQt6.QtCore import Qt
from PyQt6.QtWidgets import QFrame, QLabel, QSizePolicy, QVBoxLayout

from rigloop.gui import theme
from rigloop.gui.words import state_headline, state_hint


class StateBanner(QFrame):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("stateBanner")
        self.state = "disconnected"
        self.headline = QLabel()
        self.headline.setObjectName("stateHeadline")
        self.headline.setAlignment(Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignVCenter)
        # wraps rather than widening the window when a long state word meets a narrow screen
        self.headline.setWordWrap(True)
        self.detail = QLabel()
        self.detail.setObjectName("stateDetail")
        self.detail.setWordWrap(True)
        self.detail.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(14, 6, 14, 6)
        lay.setSpacing(2)
        lay.addWidget(self.headline)
        lay.addWidget(self.detail, 1)
        self.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Expanding)
        self.setMinimumHeight(84)
        self.set_state("disconnected")

    def set_state(self, state: str, detail: str | None = None) -> None:
        self.state = state
        bg, fg = theme.STATE_COLOURS.get(state, theme.STATE_COLOURS["disconnected"])
        self.setStyleSheet(
            f"QFrame#stateBanner {{ background: {bg}; border-radius: 8px; }}"
            f"QLabel#stateHeadline {{ color: {fg}; font-size: 18pt; font-weight: 800; }}"
            f"QLabel#stateDetail {{ color: {fg}; font-size: 10.5pt; }}")
        self.headline.setText(state_headline(state))
        self.headline.setAccessibleName(f"Rig state: {state_headline(state)}")
        self.detail.setText(detail if detail is not None else state_hint(state))

    def text(self) -> str:
        """Everything the banner says (for tests and the status bar)."""
        return f"{self.headline.text()} {self.detail.text()}"
