"""The config's warnings in the window: legal but doubtful settings, the same lines ``rigloop
check`` prints as WARNING (a reference that reaches a trip limit, loosened protections ...).

A terminal line is easily missed when the app was started from a launcher, so the window shows
them in amber under the top bar for as long as that config is loaded.
"""

from __future__ import annotations

from PyQt6.QtCore import Qt
from PyQt6.QtWidgets import QLabel, QSizePolicy


class ConfigWarningStrip(QLabel):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("configWarnings")
        self.setProperty("role", "warn")
        self.setWordWrap(True)
        self.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        # wraps inside the window's width; never widens it
        self.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        self.warnings: list[str] = []
        self.setVisible(False)

    def show_for(self, cfg) -> list[str]:
        """Show the warnings of ``cfg`` (hidden when there are none); returns them."""
        from rigloop.config import warnings_of

        self.warnings = [f"{w.label}: {w.note}" for w in warnings_of(cfg)]
        if self.warnings:
            head = "Config warning" + ("s" if len(self.warnings) > 1 else "")
            self.setText(f"\u26a0 {head}: " + " \u2022 ".join(self.warnings))
        self.setVisible(bool(self.warnings))
        return self.warnings
