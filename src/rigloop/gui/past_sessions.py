"""Past sessions: open a recorded session folder read-only and scroll its traces.

The list shows the session folders found under the recording folder (newest first), each with
its outcome and how many runs (ARM … stop) it holds; any other folder can be opened too. Files are only read (through :func:`rigloop.analysis.session.load_session`,
which also reads a session cut short by a crash); nothing here writes to a recording.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PyQt6.QtCore import Qt
from PyQt6.QtWidgets import (QFileDialog, QHBoxLayout, QLabel, QListWidget, QListWidgetItem,
                             QPushButton, QSplitter, QVBoxLayout, QWidget)

from rigloop.analysis.runs import listing_words
from rigloop.gui.trace_buffer import TraceBuffer
from rigloop.gui.trace_plots import TracePlots
from rigloop.gui.words import CAUSE_WORDS, describe_trip, fmt_num

_BASE = ("t", "ref", "y", "e", "u_cmd", "u", "f_hat")


def session_folders(root: Path) -> list[Path]:
    """Folders under ``root`` that hold a session.yaml, newest name first."""
    try:
        found = [p for p in Path(root).iterdir() if p.is_dir() and (p / "session.yaml").is_file()]
    except OSError:
        return []
    return sorted(found, key=lambda p: p.name, reverse=True)


def buffer_from_session(session) -> TraceBuffer:
    """The session's samples in the same column layout as the live telemetry."""
    channels = [str(c.get("name")) for c in session.config.get("channels") or () if isinstance(c, dict)]
    fields = list(_BASE) + [f"ch:{n}" for n in channels]
    if not session.n_rows:
        return TraceBuffer(fields, 1)
    cols = [session.column(f) for f in _BASE] + [session.column(c) for c in channels]
    return TraceBuffer.from_rows(fields, np.column_stack([np.asarray(c, dtype=float) for c in cols]))


class PastSessions(QWidget):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.root: Path | None = None
        self.session = None
        self.buffer: TraceBuffer | None = None
        self.list = QListWidget()
        self.list.setMinimumWidth(200)
        self.list.itemActivated.connect(self._open_item)
        self.list.itemClicked.connect(self._open_item)
        self.refresh_button = QPushButton("Refresh")
        self.refresh_button.clicked.connect(self.refresh)
        self.open_button = QPushButton("Open folder...")
        self.open_button.clicked.connect(self._pick_folder)
        self.fit_button = QPushButton("Show all")
        self.fit_button.setToolTip("Zoom out to the whole session (drag to pan, wheel to zoom)")
        self.fit_button.clicked.connect(lambda: self.plots.fit_all())
        self.info = QLabel("Pick a session on the left. Recordings are opened read-only.")
        self.info.setWordWrap(True)
        self.info.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.plots = TracePlots()
        self.plots.set_interactive(True)
        self.plots.hovered.connect(self._readout)
        self.readout = QLabel("")
        self.readout.setProperty("role", "muted")
        self.readout.setWordWrap(True)

        left = QWidget()
        ll = QVBoxLayout(left)
        ll.setContentsMargins(0, 0, 0, 0)
        self.root_label = QLabel("")
        self.root_label.setProperty("role", "muted")
        self.root_label.setWordWrap(True)
        ll.addWidget(self.root_label)
        ll.addWidget(self.list, 1)
        row = QHBoxLayout()
        row.addWidget(self.refresh_button)
        row.addWidget(self.open_button)
        ll.addLayout(row)
        right = QWidget()
        rl = QVBoxLayout(right)
        rl.setContentsMargins(0, 0, 0, 0)
        top = QHBoxLayout()
        top.addWidget(self.info, 1)
        top.addWidget(self.fit_button)
        rl.addLayout(top)
        rl.addWidget(self.plots, 1)
        rl.addWidget(self.readout)
        split = QSplitter()
        split.addWidget(left)
        split.addWidget(right)
        split.setStretchFactor(1, 1)
        split.setSizes([230, 900])
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(split)

    def set_root(self, root: Path | None) -> None:
        self.root = Path(root) if root else None
        self.root_label.setText(f"Sessions in {self.root}" if self.root else "")
        self.refresh()

    def refresh(self) -> None:
        self.list.clear()
        if self.root is None:
            return
        for folder in session_folders(self.root):
            item = QListWidgetItem(f"{folder.name}\n    {listing_words(folder)}")
            item.setData(Qt.ItemDataRole.UserRole, str(folder))
            item.setToolTip(str(folder))
            self.list.addItem(item)

    def _pick_folder(self) -> None:
        path = QFileDialog.getExistingDirectory(self, "Open a session folder", str(self.root or ""))
        if path:
            self.open(path)

    def _open_item(self, item) -> None:
        self.open(item.data(Qt.ItemDataRole.UserRole))

    def open(self, path) -> bool:
        """Load a session folder; False (with the reason shown) if it is not a readable session."""
        from rigloop.analysis.report import session_trips
        from rigloop.analysis.session import SessionError, load_session

        try:
            s = load_session(path)
        except SessionError as exc:
            self.info.setText(f"<span style='color:#ff8a7a'>Cannot open {path}: {exc}</span>")
            return False
        self.buffer = buffer_from_session(s)
        act = s.actuator
        ctl = s.config.get("control") if isinstance(s.config.get("control"), dict) else {}
        limits = s.config.get("limits") if isinstance(s.config.get("limits"), dict) else {}
        lim = limits.get(s.output_name) if isinstance(limits.get(s.output_name), dict) else {}
        u_min = act["min"] if np.isfinite(act["min"]) else 0.0
        u_max = act["max"] if np.isfinite(act["max"]) else 1.0
        self.plots.configure(output=s.output_name, output_unit=s.output_unit, actuator=act["name"],
                             actuator_unit=act["unit"], u_min=u_min, u_max=u_max,
                             order=int(ctl.get("order", 1) or 1), out_min=lim.get("min"), out_max=lim.get("max"))
        extra = [n for n in (c.get("name") for c in s.config.get("channels") or () if isinstance(c, dict))
                 if n and n != s.output_name]
        units = {str(c.get("name")): str(c.get("unit") or "") for c in s.config.get("channels") or ()
                 if isinstance(c, dict)}
        self.plots.set_extra_channels(extra, units)     # one panel (and axis) per unit
        self.plots.show_rows(self.buffer, follow=False)
        for trip in session_trips(s):           # session.yaml's trip, other trips and e-stops
            if trip.get("t") is not None:
                cause = trip.get("cause") or "trip"
                self.plots.add_marker(float(trip["t"]), f"TRIP: {CAUSE_WORDS.get(cause, cause)}")
        self.plots.fit_all()
        summary = s.summary
        units = {str(c.get("name")): str(c.get("unit") or "") for c in s.config.get("channels") or ()
                 if isinstance(c, dict)}
        lines = [f"<b>{s.name}</b> &nbsp; rig {s.rig}, outcome <b>{s.outcome}</b>, "
                 f"{s.n_rows} samples, {fmt_num(summary.get('duration_s'))} s running, "
                 f"RMS error {fmt_num(summary.get('rms_error'))} {s.output_unit}"]
        trip = s.meta.get("trip")
        if isinstance(trip, dict):
            lines.append(f"<span style='color:#ff8a7a'>Trip: {describe_trip(trip, units)}</span>")
        if s.truncated:
            lines.append(f"<span style='color:#f3c460'>{s.truncated}</span>")
        self.info.setText("<br>".join(lines))
        s.samples.clear()          # the buffer holds the rows now: keep only the session's metadata
        self.session = s
        return True

    def _readout(self, t: float) -> None:
        buf, s = self.buffer, self.session
        if buf is None or s is None or not len(buf):
            return
        v = (lambda col: fmt_num(buf.value_at(t, col)))
        self.readout.setText(f"t = {fmt_num(t, 6)} s   |   {s.output_name} {v('y')} {s.output_unit}   |   "
                             f"reference {v('ref')}   |   {s.actuator['name']} commanded {v('u_cmd')} / "
                             f"applied {v('u')}   |   F estimate {v('f_hat')}   |   error {v('e')}")
