"""The live view: the plot stack fed from the engine's telemetry, a time window, pause, extra
channels and a cross-hair read-out.

Rows are buffered as they arrive (about 30 times a second) and the plots are redrawn on their own
~30 Hz timer, so a burst of rows never causes a burst of redraws. Pausing freezes the *view*
only: the loop keeps running, rows keep being buffered, and Resume jumps back to the newest data.
"""

from __future__ import annotations

from PyQt6.QtCore import QTimer
from PyQt6.QtWidgets import (QCheckBox, QComboBox, QHBoxLayout, QLabel, QPushButton, QVBoxLayout,
                             QWidget)

from rigloop.gui.trace_buffer import TraceBuffer
from rigloop.gui.trace_plots import TracePlots
from rigloop.gui.words import CAUSE_WORDS, fmt_num

WINDOWS_S = (5, 10, 20, 30, 60, 120)
DEFAULT_WINDOW_S = 30
REDRAW_MS = 33
STEP_LEAD = 0.9     # after a step of the time axis the newest sample sits at 90 % of the width
_HOLD_S = 125.0     # history kept for the longest window
MAX_HELD_ROWS = 300_000   # memory bound (~70 MB): above 2.4 kHz less than 120 s is held


class LiveTraces(QWidget):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.buffer: TraceBuffer | None = None
        self.cfg = None
        self.paused = False
        self._dirty = False
        self._last_trip_key = None
        self._shown_x: tuple[float, float, float] | None = None
        self.units: dict[str, str] = {}

        self.window_box = QComboBox()
        for w in WINDOWS_S:
            self.window_box.addItem(f"{w} s", w)
        self.window_box.setCurrentIndex(WINDOWS_S.index(DEFAULT_WINDOW_S))
        self.window_box.setToolTip("Time span shown (5 to 120 s)")
        self.window_box.currentIndexChanged.connect(self._window_changed)
        self.pause_button = QPushButton("Pause view")
        self.pause_button.setCheckable(True)
        self.pause_button.setToolTip("Freeze the plots to read or zoom them; the loop keeps running")
        self.pause_button.toggled.connect(self.set_paused)
        self.channel_row = QHBoxLayout()
        self.channel_row.setSpacing(8)
        self.channel_boxes: dict[str, QCheckBox] = {}
        self.readout = QLabel("Move the mouse over the plots to read values.")
        self.readout.setProperty("role", "muted")
        self.readout.setMinimumHeight(20)
        self.readout.setWordWrap(True)

        bar = QHBoxLayout()
        bar.setContentsMargins(4, 2, 4, 2)
        bar.addWidget(QLabel("Window"))
        bar.addWidget(self.window_box)
        bar.addWidget(self.pause_button)
        bar.addSpacing(16)
        more = QLabel("More channels:")
        more.setProperty("role", "muted")
        bar.addWidget(more)
        bar.addLayout(self.channel_row)
        bar.addStretch(1)

        self.plots = TracePlots()
        self.plots.hovered.connect(self._show_readout)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.setSpacing(2)
        lay.addLayout(bar)
        lay.addWidget(self.plots, 1)
        lay.addWidget(self.readout)

        self.timer = QTimer(self)
        self.timer.setInterval(REDRAW_MS)
        self.timer.timeout.connect(self.redraw)
        self.timer.start()

    # ------------------------------------------------------------------ set-up
    @property
    def window_s(self) -> float:
        return float(self.window_box.currentData())

    def set_window(self, seconds: int) -> None:
        self.window_box.setCurrentIndex(WINDOWS_S.index(seconds))

    def preview(self, cfg) -> None:
        """A config is loaded, nothing is connected: label the empty plots for this rig."""
        if self.buffer is not None and len(self.buffer):
            return                      # a finished session stays on screen until the next one
        self._configure_plots(cfg)

    def _configure_plots(self, cfg) -> None:
        self.units = {c.name: c.unit for c in cfg.channels}
        lim = cfg.limits.channels.get(cfg.control.output)
        a = cfg.actuator
        self.plots.configure(output=cfg.control.output, output_unit=self.units.get(cfg.control.output, ""),
                             actuator=a.name, actuator_unit=a.unit, u_min=a.min, u_max=a.max,
                             order=cfg.control.order, out_min=lim.min if lim else None,
                             out_max=lim.max if lim else None)

    def start_session(self, cfg, fields) -> None:
        """New engine, new session: fresh buffer, curves for this rig, tick boxes for its channels."""
        self.cfg = cfg
        capacity = min(MAX_HELD_ROWS, max(1000, int(cfg.device.rate_hz * _HOLD_S)))
        self.buffer = TraceBuffer(fields, capacity)
        self._configure_plots(cfg)
        for box in self.channel_boxes.values():
            self.channel_row.removeWidget(box)
            box.deleteLater()
        self.channel_boxes = {}
        for ch in cfg.channels:
            if ch.name == cfg.control.output:
                continue
            box = QCheckBox(f"{ch.name}" + (f" [{ch.unit}]" if ch.unit else ""))
            box.toggled.connect(self._channels_changed)
            self.channel_row.addWidget(box)
            self.channel_boxes[ch.name] = box
        self.plots.set_extra_channels([])
        self._last_trip_key = None
        self._shown_x = None
        if self.paused:
            self.pause_button.setChecked(False)
        self._dirty = True

    def tick_channel(self, name: str, on: bool = True) -> None:
        self.channel_boxes[name].setChecked(on)

    def _channels_changed(self) -> None:
        self.plots.set_extra_channels([n for n, b in self.channel_boxes.items() if b.isChecked()], self.units)
        self._dirty = True
        if self.paused:
            self._show_all()

    def _window_changed(self) -> None:
        self._dirty = True

    # ------------------------------------------------------------------ data in
    def add_rows(self, rows) -> None:
        if self.buffer is None:
            return
        self.buffer.append(rows)
        self._dirty = True

    def note_status(self, status: dict) -> None:
        """Mark a new trip on the plots at the device time it happened."""
        trip = status.get("last_trip")
        if not trip or trip.get("t") is None:
            return
        key = (trip.get("cause"), trip.get("t"))
        if key == self._last_trip_key:
            return
        self._last_trip_key = key
        cause = str(trip.get("cause"))
        self.plots.add_marker(float(trip["t"]), f"TRIP: {CAUSE_WORDS.get(cause, cause)}")

    # ------------------------------------------------------------------ drawing
    def set_paused(self, paused: bool) -> None:
        self.paused = bool(paused)
        if self.pause_button.isChecked() != self.paused:
            self.pause_button.setChecked(self.paused)
        self.pause_button.setText("Resume view" if self.paused else "Pause view")
        self.plots.set_interactive(self.paused)
        if self.paused:
            self._show_all()
        else:
            self._dirty = True
            self._shown_x = None
            self.redraw()

    def _show_all(self) -> None:
        """While paused: hand the whole held history to the plots so the operator can pan back."""
        buf = self.buffer
        if buf is None or not len(buf):
            return
        self.plots.show_rows(buf, follow=False)

    def redraw(self) -> None:
        if self.paused or not self._dirty or self.buffer is None:
            return
        self._dirty = False
        buf = self.buffer
        t_end = buf.t_last
        if t_end is None:
            self.plots.show_rows(buf)
            return
        t_first = float(buf.column("t")[0])
        t_from, t_to = self._x_range(t_first, t_end)
        self.plots.show_rows(buf, t_from, t_to, follow=True)
        self.plots.prune_markers(t_first)

    def _x_range(self, t_first: float, t_end: float) -> tuple[float, float]:
        """A strip chart of fixed width that advances in steps of a tenth of the window.

        Moving the time axis every frame would make every curve re-clip and re-decimate twice
        and every axis repaint its ticks each frame; stepping keeps the redraw cost to the new
        data. The newest sample is always on screen; it walks from 90 % to 100 % of the width."""
        w = self.window_s
        cur = self._shown_x
        if cur is None or cur[2] != w or not (cur[0] <= t_end <= cur[1]):
            lo = max(t_end - STEP_LEAD * w, t_first)
            cur = (lo, lo + w, w)
            self._shown_x = cur
        return cur[0], cur[1]

    def _show_readout(self, t: float) -> None:
        buf = self.buffer
        cfg = self.cfg
        if buf is None or cfg is None or not len(buf):
            return
        out = cfg.control.output
        ou = self.units.get(out, "")
        a = cfg.actuator

        def v(col):
            return fmt_num(buf.value_at(t, col))

        parts = [f"t = {fmt_num(t, 6)} s",
                 f"{out} {v('y')} {ou}".rstrip(), f"reference {v('ref')}",
                 f"{a.name} commanded {v('u_cmd')} / applied {v('u')} {a.unit}".rstrip(),
                 f"F estimate {v('f_hat')}", f"error {v('e')}"]
        for name in self.plots.extra_names:
            parts.append(f"{name} {v('ch:' + name)} {self.units.get(name, '')}".rstrip())
        self.readout.setText("   |   ".join(parts))
