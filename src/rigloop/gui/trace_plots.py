"""Stacked, time-linked plots of one session: output and reference, actuator, F estimate, error,
and any extra channels (one panel per unit); with a cross-hair and trip markers.

Redraw cost must not grow with the time window (design §7: 8 traces x 30 s at 1 kHz at 30 fps),
so every curve clips to the visible range and decimates by peaks (min/max per pixel column,
which keeps spikes visible, unlike plain subsampling). The same widget shows a live buffer and a
recorded session; the caller hands it a :class:`rigloop.gui.trace_buffer.TraceBuffer`.

Colours and line styles come from :mod:`rigloop.palette` (the same as the report figures); the
reference and the applied actuator value are drawn above the output and the commanded value.
Until the first sample arrives each panel says what it will show and that there is no data yet.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PyQt6.QtCore import Qt, pyqtSignal

from rigloop import palette
from rigloop.gui import theme

_FIXED = ("output", "actuator", "f_hat", "error")
#: samples kept per pixel column by the peak decimation
SAMPLES_PER_PIXEL = 2.0
#: pen width of traces: 1 px lines take Qt's fast path; wider ones cost ~8x more per frame
TRACE_WIDTH = 1.0
NO_DATA_TEXT = "no data yet"
_QT_STYLE = {"solid": Qt.PenStyle.SolidLine, "dashed": Qt.PenStyle.DashLine, "dotted": Qt.PenStyle.DotLine}


def _pen(colour: str, width: float = TRACE_WIDTH, style: str = "solid"):
    pen = pg.mkPen(colour, width=min(width, TRACE_WIDTH))
    pen.setStyle(_QT_STYLE[style])
    return pen


#: tick labels of a value axis at least this far apart (a short panel doubles the spacing)
MIN_TICK_PX = 13


def _spaced_ticks(axis, default):
    """Wrap the axis's own tick spacing so that its labels never pile up on a short panel (many
    channels on a small screen): the spacing doubles until labels are MIN_TICK_PX apart.

    A wrapper on pyqtgraph's own axis, not a subclass handed to PlotItem: an axis made outside
    its plot stays owned by Python and can be freed twice when the window is deleted."""

    def tick_spacing(min_val, max_val, size):
        levels = default(min_val, max_val, size)
        span = max_val - min_val
        if not levels or span <= 0 or size <= 0:
            return levels
        spacing, offset = levels[0]
        while spacing * size / span < MIN_TICK_PX and 2 * spacing <= span:
            spacing *= 2
        return [(spacing, offset)]

    return tick_spacing


def _tick_font():
    from PyQt6.QtGui import QFont

    font = QFont()
    font.setPointSizeF(8.0)
    return font


def _trip_pen():
    """Trip markers are few and must stand out: 2 px, not the traces' fast 1 px."""
    return pg.mkPen(theme.TRACE_COLOURS["trip"], width=2)


def _legend_html(items: list[tuple[str, str, str]]) -> str:
    parts = []
    for colour, text, style in items:
        mark = {"solid": "&#9472;&#9472; ", "dashed": "- - ", "dotted": "&middot;&middot;&middot; "}[style]
        parts.append(f"<span style='color:{colour}; font-weight:bold'>{mark}</span>"
                     f"<span style='color:{theme.PLOT_TEXT}'>{text}</span>")
    return "&nbsp;&nbsp;&nbsp;".join(parts)


def _extra_key(unit: str) -> str:
    return f"extra:{unit}"


class TracePlots(pg.GraphicsLayoutWidget):
    """The plot stack. ``hovered(t)`` is emitted when the mouse moves over any plot."""

    hovered = pyqtSignal(float)

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setBackground(theme.PLOT_BG)
        self.ci.layout.setSpacing(2)
        self.ci.setContentsMargins(2, 2, 6, 2)
        self.plots: dict[str, pg.PlotItem] = {}
        self.curves: dict[str, pg.PlotDataItem] = {}
        self.columns: dict[str, str] = {}
        self.cursor_lines: list[pg.InfiniteLine] = []
        self.markers: list[tuple[float, list[pg.InfiniteLine]]] = []
        self.static_lines: list[tuple[pg.PlotItem, pg.InfiniteLine]] = []
        self.extra_names: list[str] = []
        self.extra_units: dict[str, str] = {}
        self.has_data = False
        self._plot_of: dict[str, str] = {}
        self._y_ranges: dict[str, tuple[float, float]] = {}
        self._no_data: dict[str, pg.TextItem] = {}
        self._cursor_of: dict[str, pg.InfiniteLine] = {}
        self._retired: list[pg.PlotItem] = []
        self.is_shut_down = False
        for row, key in enumerate(_FIXED):
            self.ci.addItem(self._new_plot(key), row=row, col=0)
        self._mouse_proxy = pg.SignalProxy(self.scene().sigMouseMoved, rateLimit=60, slot=self._on_mouse)
        self._update_axes()

    def _new_plot(self, key: str) -> pg.PlotItem:
        p = pg.PlotItem()
        p.showGrid(x=True, y=True, alpha=0.25)
        for side in ("left", "bottom"):
            # major ticks only: each grid level costs as much to paint as all the traces
            axis = p.getAxis(side)
            axis.setStyle(maxTickLevel=0)
            axis.setPen(palette.PLOT_GRID)
            axis.setTextPen(theme.PLOT_TEXT)
        p.setMenuEnabled(False)
        p.hideButtons()
        left = p.getAxis("left")
        left.tickSpacing = _spaced_ticks(left, left.tickSpacing)
        p.getAxis("left").setWidth(68)
        p.getAxis("left").setStyle(tickFont=_tick_font())
        p.getAxis("left").enableAutoSIPrefix(False)     # "(x0.001)" beside a unit reads as a unit

        p.setMouseEnabled(x=False, y=False)
        # On the PlotItem, not on each curve: PlotItem.addItem() imposes its own settings
        # on every curve added to it.
        p.setDownsampling(auto=True, mode="peak")
        p.setClipToView(True)
        p.getViewBox().setAutoVisible(y=True)
        line = pg.InfiniteLine(angle=90, movable=False, pen=_pen(theme.TRACE_COLOURS["cursor"], 1, "dotted"))
        line.setVisible(False)
        p.addItem(line, ignoreBounds=True)
        self.cursor_lines.append(line)
        self._cursor_of[key] = line
        label = pg.TextItem(NO_DATA_TEXT, color=palette.NEUTRAL, anchor=(0.5, 0.5))
        label.setVisible(not self.has_data)
        p.addItem(label, ignoreBounds=True)
        self._no_data[key] = label
        if self.plots:
            p.setXLink(self.plots["output"])
        self.plots[key] = p
        return p

    # ------------------------------------------------------------------ set-up
    def configure(self, *, output: str, output_unit: str, actuator: str, actuator_unit: str,
                  u_min: float, u_max: float, order: int = 1, out_min: float | None = None,
                  out_max: float | None = None) -> None:
        """Create the fixed curves for one rig (units in the titles and on the axes, bounds as
        dotted lines). Called when a config is loaded, so an idle window already says what each
        panel will show."""
        self.has_data = False
        for name in list(self.curves):
            if not name.startswith("ch:"):
                self._remove_curve(name)
        for plot, line in self.static_lines:
            plot.removeItem(line)
        self.static_lines = []
        c = theme.TRACE_COLOURS
        st = palette.style
        ou = f" [{output_unit}]" if output_unit else ""
        au = f" [{actuator_unit}]" if actuator_unit else ""
        fu = f" [{output_unit}/s{'' if order == 1 else '²'}]" if output_unit else ""
        # order of adding = order of drawing; the z values put the reference and the applied
        # actuator value on top, where they stay visible over a good output and an exact device
        self._add_curve("y", "output", "y", c["y"], style=st("y"))
        self._add_curve("ref", "output", "ref", c["ref"], style=st("ref"))
        self._add_curve("u_cmd", "actuator", "u_cmd", c["u_cmd"], style=st("u_cmd"))
        self._add_curve("u", "actuator", "u", c["u"], style=st("u"))
        self._add_curve("f_hat", "f_hat", "f_hat", c["f_hat"], style=st("f_hat"))
        self._add_curve("e", "error", "e", c["e"], style=st("e"))
        for name, z in palette.ON_TOP.items():
            self.curves[name].setZValue(z)
        self._title("output", [(c["y"], f"{output} (measured){ou}", st("y")), (c["ref"], "reference", st("ref"))]
                    + ([(c["limit"], "trip limits", st("limit"))] if out_min is not None or out_max is not None else []))
        self._title("actuator", [(c["u_cmd"], f"{actuator} commanded{au}", st("u_cmd")),
                                 (c["u"], "applied (device)", st("u")),
                                 (c["bound"], f"min {u_min:g} / max {u_max:g}", st("bound"))])
        self._title("f_hat", [(c["f_hat"], f"F estimate{fu}", st("f_hat"))])
        self._title("error", [(c["e"], f"error e = y - r{ou}", st("e"))])
        # the axes carry the units (the titles above name the traces)
        for key, text in (("output", ou.strip() or output), ("actuator", au.strip() or actuator),
                          ("f_hat", fu.strip() or "F"), ("error", ou.strip() or "e")):
            self.plots[key].getAxis("left").setLabel(text, color=theme.PLOT_TEXT)
        for value in (u_min, u_max):
            self._static_line("actuator", value, c["bound"], st("bound"))
        for value in (out_min, out_max):
            if value is not None:
                self._static_line("output", value, c["limit"], st("limit"))
        self.plots["actuator"].disableAutoRange(axis="y")
        span = (u_max - u_min) or 1.0
        self.plots["actuator"].setYRange(u_min - 0.06 * span, u_max + 0.06 * span, padding=0)
        lims = [v for v in (out_min, out_max) if v is not None]
        if lims and not self.has_data:          # an empty output panel spans the allowed range
            lo, hi = (min(lims), max(lims)) if len(lims) == 2 else (min(0.0, lims[0]), max(0.0, lims[0]))
            self.plots["output"].setYRange(lo, hi if hi > lo else lo + 1.0)
        self._y_ranges.clear()
        self.clear_markers()
        self._place_no_data()

    def set_extra_channels(self, names: list[str], units: dict[str, str] | None = None) -> None:
        """Show the ticked channels below the fixed plots, one panel per unit (a current, an
        air flow and a temperature never share an axis); no panel when none is ticked."""
        units = dict(units or {})
        for name in self.extra_names:
            self._remove_curve(f"ch:{name}")
        self.extra_names = list(names)
        self.extra_units = {n: units.get(n, "") for n in self.extra_names}
        groups: dict[str, list[str]] = {}
        for name in self.extra_names:
            groups.setdefault(self.extra_units[name], []).append(name)
        for key in [k for k in self.plots if k.startswith("extra:")]:
            self.ci.removeItem(self.plots[key])
            self.cursor_lines.remove(self._cursor_of.pop(key))
            # kept referenced: freeing a plot item while Qt may still deliver it an event crashes
            self._retired.append(self.plots.pop(key))
            self._no_data.pop(key, None)
        del self._retired[:-16]         # long out of the scene: these may go
        colour_index = 0
        for row, (unit, members) in enumerate(groups.items(), start=len(_FIXED)):
            key = _extra_key(unit)
            plot = self._new_plot(key)
            self.ci.addItem(plot, row=row, col=0)
            items = []
            for name in members:
                colour = theme.EXTRA_COLOURS[colour_index % len(theme.EXTRA_COLOURS)]
                colour_index += 1
                self._add_curve(f"ch:{name}", key, f"ch:{name}", colour)
                items.append((colour, name + (f" [{unit}]" if unit else ""), "solid"))
            self._title(key, items)
            plot.getAxis("left").setLabel(f"[{unit}]" if unit else "(no unit)", color=theme.PLOT_TEXT)
            for t, lines in self.markers:         # trips already marked reach the new panel too
                line = pg.InfiniteLine(pos=t, angle=90, movable=False, pen=_trip_pen())
                plot.addItem(line, ignoreBounds=True)
                lines.append(line)
        self._update_axes()
        self._place_no_data()

    def _add_curve(self, name: str, plot: str, column: str, colour: str, width: float = 1.5,
                   style: str = "solid") -> None:
        curve = pg.PlotDataItem(pen=_pen(colour, width, style))
        # ~2 samples per pixel column are enough with peak decimation (min and max of each block)
        curve.opts["autoDownsampleFactor"] = SAMPLES_PER_PIXEL
        self.plots[plot].addItem(curve)
        self._plot_of[name] = plot
        curve.setDownsampling(auto=True, method="peak")
        curve.setClipToView(True)
        self.curves[name] = curve
        self.columns[name] = column

    def _remove_curve(self, name: str) -> None:
        curve = self.curves.pop(name, None)
        self.columns.pop(name, None)
        self._plot_of.pop(name, None)
        if curve is not None:
            for p in self.plots.values():
                if curve in p.items:
                    p.removeItem(curve)

    def _static_line(self, plot: str, value: float, colour: str, style: str = "dashed") -> None:
        line = pg.InfiniteLine(pos=value, angle=0, movable=False, pen=_pen(colour, 1.0, style))
        self.plots[plot].addItem(line, ignoreBounds=True)
        self.static_lines.append((self.plots[plot], line))

    def _title(self, plot: str, items) -> None:
        self.plots[plot].setTitle(_legend_html(items), size="9pt", justify="left")

    def _update_axes(self) -> None:
        order = list(_FIXED) + [k for k in self.plots if k.startswith("extra:")]
        for key in order:
            axis = self.plots[key].getAxis("bottom")
            last = key == order[-1]
            axis.setStyle(showValues=last)
            axis.setLabel("device time [s]" if last else None, color=theme.PLOT_TEXT)
            if not last:
                axis.showLabel(False)

    def _mark_empty_panels(self, per_plot: dict[str, list[np.ndarray]]) -> None:
        """'no data yet' stays on a panel until it has a finite value (F and e stay empty while
        the loop is idle: the estimator runs only while armed)."""
        for key, label in self._no_data.items():
            empty = not any(np.isfinite(a).any() for a in per_plot.get(key, ()))
            if empty != label.isVisible():
                label.setVisible(empty)
            if empty:                   # the time axis moves on: keep the words in the middle
                (x0, x1), (y0, y1) = self.plots[key].viewRange()
                label.setPos((x0 + x1) / 2, (y0 + y1) / 2)

    def _place_no_data(self) -> None:
        """Centre the 'no data yet' words in each panel (or hide them once data arrived)."""
        for key, label in self._no_data.items():
            label.setVisible(not self.has_data)
            if not self.has_data:
                (x0, x1), (y0, y1) = self.plots[key].viewRange()
                label.setPos((x0 + x1) / 2, (y0 + y1) / 2)

    # ------------------------------------------------------------------ end of life
    def shut_down(self) -> None:
        """Take the plots apart in pyqtgraph's order (its ``close``), before Qt deletes them.

        Without it, deleting the window can deliver a resize to an axis whose C++ half is
        already gone, and the process crashes; pyqtgraph's axes skip such late events once
        closed. Safe to call twice; the widget shows nothing afterwards."""
        if self.is_shut_down:
            return
        self.is_shut_down = True
        self._mouse_proxy.disconnect()
        for plot in self.plots.values():
            if plot.scene() is not None:
                plot.close()
        for plot in self._retired:                 # out of the scene: just mute their axes
            for axis in (plot.axes or {}).values():
                axis["item"].label = None

    def closeEvent(self, event) -> None:  # noqa: N802 - Qt's name
        self.shut_down()
        super().closeEvent(event)

    # ------------------------------------------------------------------ data
    def show_rows(self, buf, t_from: float | None = None, t_to: float | None = None,
                  follow: bool = True) -> None:
        """Draw the buffer's rows from ``t_from`` (all rows if None); in follow mode pin the
        x range to [t_from, t_to]. Data are copied: the buffer may move its rows later."""
        if self.is_shut_down:
            return
        if len(buf) == 0:
            for curve in self.curves.values():
                curve.setData([], [])
            return
        if not self.has_data:
            self.has_data = True
        i0 = max(0, buf.start_of(t_from) - 1) if t_from is not None else 0
        t = np.array(buf.column("t", i0))
        per_plot: dict[str, list[np.ndarray]] = {}
        for name, curve in self.curves.items():
            col = self.columns[name]
            if col in buf.index:
                y = np.array(buf.column(col, i0))
                curve.setData(t, y)
                per_plot.setdefault(self._plot_of[name], []).append(y)
        self._mark_empty_panels(per_plot)
        if follow and t_from is not None and t_to is not None:
            self.plots["output"].setXRange(t_from, t_to, padding=0)
            for key, arrays in per_plot.items():
                if key != "actuator":
                    self._follow_y(key, arrays)

    def _follow_y(self, key: str, arrays: list[np.ndarray]) -> None:
        """Fit the y range to the shown data, with hysteresis: the range grows at once when data
        leave it and shrinks only when the data use less than half of it. A range that moves
        every frame would redraw the axis every frame (most of the cost of a frame) and jitter."""
        lo = hi = None
        for a in arrays:
            finite = a[np.isfinite(a)]
            if finite.size:
                a_lo, a_hi = float(finite.min()), float(finite.max())
                lo = a_lo if lo is None else min(lo, a_lo)
                hi = a_hi if hi is None else max(hi, a_hi)
        if lo is None:
            return
        span = hi - lo
        if span <= 0:
            span = abs(hi) * 0.1 or 1.0
        cur = self._y_ranges.get(key)
        if cur is not None and cur[0] <= lo and hi <= cur[1] and span >= 0.5 * (cur[1] - cur[0]):
            return
        new = (lo - 0.1 * span, hi + 0.1 * span)
        self._y_ranges[key] = new
        plot = self.plots[key]
        plot.disableAutoRange(axis="y")
        plot.setYRange(*new, padding=0)

    def set_interactive(self, on: bool) -> None:
        """Paused or browsing: the operator may pan and zoom with the mouse."""
        for p in self.plots.values():
            p.setMouseEnabled(x=on, y=on)

    def fit_all(self) -> None:
        self._y_ranges.clear()
        self.plots["output"].enableAutoRange(axis="x")
        for key, p in self.plots.items():
            if key != "actuator":
                p.enableAutoRange(axis="y")

    # ------------------------------------------------------------------ markers and cursor
    def add_marker(self, t: float, text: str) -> None:
        """A trip marker: a red line through every plot, labelled in the top one."""
        if self.is_shut_down:
            return
        lines = []
        for key, p in self.plots.items():
            opts = {}
            if key == "output":
                opts = {"label": text, "labelOpts": {"position": 0.88, "color": theme.TRACE_COLOURS["trip"],
                                                     "fill": (251, 251, 248, 230), "movable": False}}
            line = pg.InfiniteLine(pos=t, angle=90, movable=False,
                                   pen=_trip_pen(), **opts)
            p.addItem(line, ignoreBounds=True)
            lines.append(line)
        self.markers.append((t, lines))

    def clear_markers(self) -> None:
        for _, lines in self.markers:
            for line in lines:
                for p in self.plots.values():
                    if line in p.items:
                        p.removeItem(line)
        self.markers = []

    def prune_markers(self, t_oldest: float) -> None:
        """Drop markers older than the held data (memory stays flat in long sessions)."""
        keep = []
        for t, lines in self.markers:
            if t < t_oldest:
                for line in lines:
                    for p in self.plots.values():
                        if line in p.items:
                            p.removeItem(line)
            else:
                keep.append((t, lines))
        self.markers = keep

    def _on_mouse(self, event) -> None:
        pos = event[0]
        for p in self.plots.values():
            if p.scene() is not None and p.sceneBoundingRect().contains(pos):
                t = p.getViewBox().mapSceneToView(pos).x()
                for line in self.cursor_lines:
                    line.setPos(t)
                    line.setVisible(True)
                self.hovered.emit(float(t))
                return

    def move_cursor(self, t: float) -> None:
        """Place the cross-hair programmatically (keyboard users, tests)."""
        for line in self.cursor_lines:
            line.setPos(t)
            line.setVisible(True)
        self.hovered.emit(float(t))
