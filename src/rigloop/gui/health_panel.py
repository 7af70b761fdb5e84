"""Limits and health: how far each guarded channel is from its limits, and how well the link,
the loop and the device are doing, refreshed from the engine's status block.

Margins are shown in the channel's unit and in words (``ok``, ``near``, ``BEYOND``), with a
colour as a second cue only. A limit is judged by where the value is going
(:class:`MarginJudge`), so that a rig at rest is not warned about a limit on the far side of its
rest point (a fan at 0 rpm and a -100 rpm reverse-rotation limit).
"""

from __future__ import annotations

import math
from collections import deque

from PyQt6.QtCore import Qt
from PyQt6.QtGui import QBrush, QColor
from PyQt6.QtWidgets import (QAbstractItemView, QFormLayout, QGroupBox, QHeaderView, QLabel,
                             QTableWidget, QTableWidgetItem, QVBoxLayout)

from rigloop.gui import theme
from rigloop.gui.words import fmt_num, status_bit_words

#: Warning band for a value heading toward a limit: a tenth of the allowed span (of |limit| when
#: only one limit is set). Common practice for a warning band.
NEAR_FRACTION = 0.10
#: Warning band whatever the direction (a value at rest right under its limit): a fiftieth.
CLOSE_FRACTION = 0.02
#: The noise can carry a value this many times its recent peak-to-peak spread.
NOISE_REACH = 1.0
#: History used to tell a trend from noise, seconds.
TREND_WINDOW_S = 1.0

_COLOURS = {"BEYOND": theme.ERROR_TEXT, "near": theme.WARN_TEXT, "ok": theme.OK_TEXT, "-": theme.MUTED}


class MarginJudge:
    """Says ``ok``, ``near`` or ``BEYOND`` for each guarded channel from its recent values.

    A side (min or max) is *near* when the value is inside that side's warning band and either
    heads toward it while the loop drives the rig (its trend over the last second moves it toward
    the limit by more than the noise does), or sits in the inner band (:data:`CLOSE_FRACTION`)
    whatever its direction, or is close enough for its own noise to reach the limit. A value at
    rest in the outer band is ``ok``: it cannot cross the limit without moving toward it first;
    nor is a rig coasting down with its output safe warned about the limit beyond its rest point.
    """

    def __init__(self, window_s: float = TREND_WINDOW_S):
        self.window_s = window_s
        self._history: dict[str, deque[tuple[float, float]]] = {}

    def reset(self) -> None:
        self._history.clear()

    def judge(self, channel: str, value, lo, hi, t=None, driven: bool = True) -> str:
        if value is None or not isinstance(value, (int, float)) or not math.isfinite(value):
            return "-"
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            return "BEYOND"
        hist = self._history.setdefault(channel, deque())
        if isinstance(t, (int, float)) and math.isfinite(t):
            if hist and t < hist[-1][0]:
                hist.clear()                 # a new session's clock
            hist.append((float(t), float(value)))
            while hist and hist[0][0] < t - self.window_s:
                hist.popleft()
        trend, noise = _trend_and_noise(hist)
        span = (hi - lo) if (lo is not None and hi is not None) else None
        for limit, toward in ((hi, 1.0), (lo, -1.0)):
            if limit is None:
                continue
            scale = span if span else abs(limit)
            if not scale:
                continue
            margin = (limit - value) * toward
            if margin >= NEAR_FRACTION * scale:
                continue
            heading = driven and trend * toward > max(noise, 1e-12 * scale)
            if heading or margin < CLOSE_FRACTION * scale or margin < NOISE_REACH * noise:
                return "near"
        return "ok"


def _trend_and_noise(hist) -> tuple[float, float]:
    """(movement over the window from a least-squares line, peak-to-peak of the residuals)."""
    if len(hist) < 2:
        return 0.0, 0.0
    t = [p[0] for p in hist]
    v = [p[1] for p in hist]
    n = len(t)
    tm, vm = sum(t) / n, sum(v) / n
    stt = sum((x - tm) ** 2 for x in t)
    if stt <= 0:
        return 0.0, max(v) - min(v)
    slope = sum((x - tm) * (y - vm) for x, y in zip(t, v)) / stt
    resid = [y - (vm + slope * (x - tm)) for x, y in zip(t, v)]
    return slope * (t[-1] - t[0]), max(resid) - min(resid)


class HealthPanel(QGroupBox):
    def __init__(self, parent=None):
        super().__init__("Limits and health", parent)
        self.table = QTableWidget(0, 4)
        self.table.setHorizontalHeaderLabels(["channel", "value", "min .. max", "margin"])
        self.table.verticalHeader().setVisible(False)
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.NoSelection)
        self.table.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.table.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.table.setVerticalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.table.setWordWrap(False)
        self.table.verticalHeader().setDefaultSectionSize(22)
        hdr = self.table.horizontalHeader()
        hdr.setMinimumSectionSize(40)
        hdr.setSectionResizeMode(QHeaderView.ResizeMode.Fixed)
        hdr.setSectionResizeMode(3, QHeaderView.ResizeMode.Stretch)
        for col, width in enumerate((88, 84, 92)):
            self.table.setColumnWidth(col, width)
        self._fit_table(0)
        self.rate = QLabel("-")
        self.frames = QLabel("-")
        self.latency = QLabel("-")
        self.compute = QLabel("-")
        self.device = QLabel("-")
        for label in (self.rate, self.frames, self.latency, self.compute, self.device):
            label.setWordWrap(True)
        self.recording = QLabel("-")
        self.recording.setWordWrap(True)
        self.recording.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        form = QFormLayout()
        form.setVerticalSpacing(3)
        form.setLabelAlignment(Qt.AlignmentFlag.AlignRight)
        form.addRow(self._muted("Sample rate"), self.rate)
        form.addRow(self._muted("Frames"), self.frames)
        form.addRow(self._muted("Latency"), self.latency)
        form.addRow(self._muted("Compute"), self.compute)
        form.addRow(self._muted("Device"), self.device)
        form.addRow(self._muted("Recording"), self.recording)
        lay = QVBoxLayout(self)
        lay.setSpacing(4)
        lay.addWidget(self.table)
        lay.addLayout(form)
        lay.addStretch(1)
        self.rate_hz = None
        self.judge = MarginJudge()
        self._prev: tuple[float, int] | None = None
        self._measured_hz: float | None = None

    @staticmethod
    def _muted(text: str) -> QLabel:
        label = QLabel(text)
        label.setProperty("role", "muted")
        return label

    def reset(self, cfg=None) -> None:
        self.rate_hz = cfg.device.rate_hz if cfg is not None else None
        self._prev = None
        self._measured_hz = None
        self.judge.reset()
        self.table.setRowCount(0)
        for w in (self.rate, self.frames, self.latency, self.compute, self.device):
            w.setText("-")

    def set_recording(self, path: str | None) -> None:
        # zero-width spaces after separators let a long path wrap inside the narrow panel
        self.recording.setText((path or "-").replace("/", "/\u200b").replace("\\", "\\\u200b"))
        self.recording.setToolTip(path or "")

    def update_from_status(self, st: dict) -> None:
        self._margins(st.get("margins") or [], st.get("t"), st.get("state") in ("running", None))
        self._rate(st)
        rejected = {k: v for k, v in (st.get("rejected") or {}).items()
                    if k not in ("accepted", "total_rejected") and isinstance(v, (int, float))}
        total = (st.get("rejected") or {}).get("total_rejected", sum(rejected.values()))
        detail = ", ".join(f"{k} {v}" for k, v in rejected.items() if v)
        self.frames.setText(f"{st.get('samples', 0)} samples, {st.get('lost_samples', 0)} lost, "
                            f"{int(total)} rejected" + (f" ({detail})" if detail else ""))
        lat = st.get("latency_ms") or {}
        late = st.get("lateness_ms") or {}
        self.latency.setText(f"p50 {fmt_num(lat.get('p50'), 3)} / p99 {fmt_num(lat.get('p99'), 3)} ms; "
                             f"lateness p99 {fmt_num(late.get('p99'), 3)} ms; {st.get('late_ticks', 0)} late ticks")
        comp = st.get("compute_us") or {}
        self.compute.setText(f"p50 {fmt_num(comp.get('p50'), 3)} / p99 {fmt_num(comp.get('p99'), 3)} us per sample")
        words = status_bit_words(st.get("device_status"))
        if words:
            html = ", ".join(f"<span style='color:{theme.ERROR_TEXT}; font-weight:bold'>{w}</span>" if warn else w
                             for w, warn in words)
        else:
            html = "no status bits set"
        self.device.setText(html)
        if st.get("session_dir"):
            self.set_recording(st["session_dir"])

    def _rate(self, st: dict) -> None:
        t, n = st.get("t"), st.get("samples")
        if isinstance(t, (int, float)) and isinstance(n, int):
            if self._prev is not None and t > self._prev[0] + 0.5:
                hz = (n - self._prev[1]) / (t - self._prev[0])
                self._measured_hz = hz
                self._prev = (t, n)
            elif self._prev is None or t < self._prev[0]:
                self._prev = (t, n)
        want = f" (configured {self.rate_hz:g} Hz)" if self.rate_hz else ""
        self.rate.setText(f"{fmt_num(self._measured_hz, 4)} Hz{want}" if self._measured_hz else f"-{want}")

    def _margins(self, margins: list[dict], t=None, driven: bool = True) -> None:
        if self.table.rowCount() != len(margins):
            self.table.setRowCount(len(margins))
        for row, m in enumerate(margins):
            unit = m.get("unit") or ""
            lo, hi = m.get("min"), m.get("max")
            word = self.judge.judge(str(m.get("channel", "?")), m.get("value"), lo, hi, t, driven)
            colour = _COLOURS[word]
            rng = f"{'' if lo is None else fmt_num(lo)} .. {'' if hi is None else fmt_num(hi)}"
            cells = [m.get("channel", "?"), f"{fmt_num(m.get('value'))} {unit}".strip(), rng,
                     f"{word} {fmt_num(m.get('margin'), 3)}" if word != "-" else "-"]   # unit: the value's
            for col, text in enumerate(cells):
                item = self.table.item(row, col)
                if item is None:
                    item = QTableWidgetItem()
                    self.table.setItem(row, col, item)
                if item.text() != text:
                    item.setText(text)
                    item.setToolTip(text)
                if col == 3:
                    item.setForeground(QBrush(QColor(colour)))
        self._fit_table(len(margins))

    def _fit_table(self, rows: int) -> None:
        height = self.table.horizontalHeader().sizeHint().height() + 22 * max(1, rows) + 4
        self.table.setFixedHeight(height)
