"""Colours and the style sheet of the app: dark, low-glare controls around light plot panels.

Colours carry meaning only together with words (see :mod:`rigloop.gui.words`). Trace colours come
from :mod:`rigloop.palette` (a colour-blind-safe set, shared with the report figures), drawn on
the light surface that set is made for.

The software stop is deliberately *not* red on yellow: the machine-safety standards reserve that
combination for the hardwired emergency-stop device (IEC 60204-1, ISO 13850), and a screen button
is not one. It is a red button with a white border and the words "software stop".
"""

from __future__ import annotations

from rigloop import palette

BG = "#12171e"
PANEL = "#1a2029"
PANEL_2 = "#212936"
BORDER = "#2e3847"
TEXT = "#dbe2ea"
MUTED = "#8d99a8"
ACCENT = "#4f9fd9"
ERROR_TEXT = "#ff8a7a"
OK_TEXT = "#7fd6a0"
WARN_TEXT = "#f3c460"

#: state -> (background, text) of the state banner
STATE_COLOURS = {
    "disconnected": ("#3a4250", "#e8edf2"),
    "connecting": ("#3a4250", "#e8edf2"),
    "idle": ("#24507a", "#f2f7fc"),
    "running": ("#1f7a4c", "#f4fff8"),
    "stopping": ("#a8731a", "#fffaf0"),
    "tripped": ("#b3261e", "#fff6f5"),
}

#: the software stop: red, a white border, no yellow anywhere near it
STOP_RED = "#b81d18"
STOP_RED_DOWN = "#7d100c"
STOP_BORDER = "#f4f4f4"

#: plots: the light surface of the colour-blind-safe palette
PLOT_BG = palette.PLOT_BACKGROUND
PLOT_TEXT = palette.PLOT_TEXT
#: trace name -> colour (palette.TRACES also gives each a line style)
TRACE_COLOURS = {name: colour for name, (colour, _style) in palette.TRACES.items()}
#: colours for extra channels, in the order they are ticked
EXTRA_COLOURS = palette.EXTRA

STYLE_SHEET = f"""
QWidget {{ background: {BG}; color: {TEXT}; font-size: 10pt; }}
QGroupBox {{ border: 1px solid {BORDER}; border-radius: 4px; margin-top: 14px; padding: 6px 6px 4px 6px;
            background: {PANEL}; }}
QGroupBox::title {{ subcontrol-origin: margin; left: 8px; padding: 0 4px; color: {MUTED};
                   font-weight: bold; }}
QLabel {{ background: transparent; }}
QLabel[role="muted"] {{ color: {MUTED}; }}
QLabel[role="error"] {{ color: {ERROR_TEXT}; }}
QLabel[role="ok"] {{ color: {OK_TEXT}; }}
QLabel[role="warn"] {{ color: {WARN_TEXT}; }}
QLineEdit, QComboBox, QSpinBox, QDoubleSpinBox {{ background: {PANEL_2}; border: 1px solid {BORDER};
    border-radius: 3px; padding: 2px 4px; min-height: 20px; selection-background-color: {ACCENT}; }}
QLineEdit[invalid="true"] {{ border: 2px solid {ERROR_TEXT}; }}
QLineEdit:focus, QComboBox:focus {{ border: 1px solid {ACCENT}; }}
QPushButton {{ background: {PANEL_2}; border: 1px solid {BORDER}; border-radius: 4px; padding: 4px 10px;
    min-height: 22px; }}
QPushButton:hover {{ border: 1px solid {ACCENT}; }}
QPushButton:disabled {{ color: #59636f; border-color: #262e3a; }}
QPushButton[kind="go"] {{ background: #1e5e3d; border-color: #2f9e62; font-weight: bold; }}
QPushButton[kind="go"]:disabled {{ background: {PANEL_2}; border-color: #262e3a; }}
QTabWidget::pane {{ border: 1px solid {BORDER}; top: -1px; }}
QTabBar::tab {{ background: {PANEL}; border: 1px solid {BORDER}; padding: 5px 14px; margin-right: 2px; }}
QTabBar::tab:selected {{ background: {PANEL_2}; border-bottom-color: {PANEL_2}; color: white; }}
QTableWidget {{ background: {PANEL}; gridline-color: {BORDER}; border: none; }}
QHeaderView::section {{ background: {PANEL_2}; color: {MUTED}; border: none; padding: 3px; }}
QCheckBox {{ background: transparent; spacing: 5px; }}
QCheckBox::indicator {{ width: 12px; height: 12px; border: 1px solid {MUTED}; border-radius: 2px;
    background: {PANEL_2}; }}
QCheckBox::indicator:checked {{ background: {ACCENT}; border-color: {ACCENT}; }}
QScrollArea {{ border: none; }}
QListWidget {{ background: {PANEL}; border: 1px solid {BORDER}; }}
QStatusBar {{ color: {MUTED}; }}
QSplitter::handle {{ background: {BORDER}; }}
"""


def apply_theme(app) -> None:
    """Style the whole application (Fusion style + the sheet above)."""
    app.setStyle("Fusion")
    app.setStyleSheet(STYLE_SHEET)
