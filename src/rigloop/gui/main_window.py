"""The main window: state and Stop always on top, traces and past sessions in tabs, tuning and
health on the right.

Closing while the rig moves: the window asks the engine for a **ramped stop** (down at the
actuator's slew rate, then STOP - the same controlled stop as the end of a run) and closes when
the output is safe. A flywheel or a belt is spared an abrupt stop by a mere window close; the
operator who wants the rig stopped *now* presses Stop (Esc), which also works during that ramp.
If the ramp does not finish in time (ramp time + 5 s), the window sends the e-stop and closes.
"""

from __future__ import annotations

import sys
from pathlib import Path

from PyQt6.QtCore import Qt, QTimer, pyqtSignal
from PyQt6.QtWidgets import (QApplication, QGridLayout, QHBoxLayout, QMainWindow, QPushButton,
                             QScrollArea, QSplitter, QTabWidget, QVBoxLayout, QWidget)

from rigloop.gui.config_warnings import ConfigWarningStrip
from rigloop.gui.connection_bar import ConnectionBar
from rigloop.gui.device_choice import choice_from_config, overrides_for
from rigloop.gui.engine_session import EngineSession
from rigloop.gui.health_panel import HealthPanel
from rigloop.gui.live_traces import LiveTraces
from rigloop.gui.past_sessions import PastSessions
from rigloop.gui.state_banner import StateBanner
from rigloop.gui.stop_control import STOP_KEY_TEXT, StopButton, StopKeyFilter
from rigloop.gui.tuning_panel import TuningPanel
from rigloop.gui.words import HELP_TEXT, describe_completed_run, describe_trip, state_headline

WINDOW_SIZE = (1400, 860)

CLOSE_GRACE_S = 5.0


class MainWindow(QMainWindow):
    #: emitted once the window really closed (after a stop, if the rig was moving)
    closed = pyqtSignal()

    def __init__(self, config_path: str | None = None, sets=(), *, sim_extra: dict | None = None,
                 out_dir=None, client_factory=None):
        super().__init__()
        self.config_path: str | None = None
        self.sets = list(sets)
        self.sim_extra = sim_extra
        self.out_dir = out_dir
        self.base_cfg = None          # the config as loaded (before the device choice)
        self.cfg = None               # the config of the connected engine
        self.state = "disconnected"
        self.trip_text = ""
        self.last_final: dict | None = None
        self._arm_when_idle = False
        self._runs_completed = 0
        self.config_warnings: list[str] = []
        self._close_pending = False
        self._really_close = False
        self.session = EngineSession(self, client_factory=client_factory)
        self.session.state_changed.connect(self._on_state)
        self.session.status_updated.connect(self._on_status)
        self.session.rows_arrived.connect(self._on_rows)
        self.session.reply_received.connect(self._on_reply)
        self.session.ended.connect(self._on_ended)

        self.setWindowTitle("rigloop")
        self.resize(*WINDOW_SIZE)
        self._build()
        self.stop_filter = StopKeyFilter(self)
        self.stop_filter.triggered.connect(lambda: self.estop(f"{STOP_KEY_TEXT} key"))
        QApplication.instance().installEventFilter(self.stop_filter)
        self._close_timer = QTimer(self)
        self._close_timer.setSingleShot(True)
        self._close_timer.timeout.connect(self._close_timed_out)
        # Ctrl+Q (Cmd+Q on macOS) quits the way closing the window does
        self.stop_filter.quit_requested.connect(self.close)
        self._on_state("disconnected")
        if config_path:
            self.open_config(config_path)

    # ------------------------------------------------------------------ layout
    def _build(self) -> None:
        self.connection = ConnectionBar()
        self.connection.open_requested.connect(self.open_config)
        self.connection.demo_requested.connect(self.open_demo)
        self.connection.connect_requested.connect(self.connect_rig)
        self.connection.disconnect_requested.connect(self.disconnect_rig)
        self.arm_button = QPushButton("Arm && start")
        self.arm_button.setProperty("kind", "go")
        self.arm_button.setToolTip("Close the loop: the device is armed and the law drives the actuator")
        self.arm_button.clicked.connect(self.arm)
        self.ramp_button = QPushButton("Ramp down")
        self.ramp_button.setToolTip("Controlled stop: down at the actuator's slew rate, then STOP; back to idle")
        self.ramp_button.clicked.connect(self.ramp_down)
        self.reset_button = QPushButton("Reset trip")
        self.reset_button.setToolTip("Clear a latched trip after making the rig safe; the output stays safe "
                                     "(idle) until you arm again")
        self.reset_button.clicked.connect(self.reset)
        runbox = QGridLayout()
        runbox.setSpacing(4)
        runbox.addWidget(self.arm_button, 0, 0)
        runbox.addWidget(self.ramp_button, 1, 0)
        runbox.addWidget(self.reset_button, 2, 0)
        self.banner = StateBanner()
        self.stop_button = StopButton()
        self.stop_button.clicked.connect(lambda: self.estop("gui button"))

        top = QHBoxLayout()
        top.setSpacing(10)
        top.addWidget(self.connection, 0)
        top.addLayout(runbox, 0)
        top.addWidget(self.banner, 1)
        top.addWidget(self.stop_button, 0)

        self.live = LiveTraces()
        self.past = PastSessions()
        self.tabs = QTabWidget()
        self.tabs.addTab(self.live, "Live traces")
        self.tabs.addTab(self.past, "Past sessions")
        self.tuning = TuningPanel()
        self.health = HealthPanel()
        side = QWidget()
        side.setObjectName("sidePanel")
        # a point smaller than the rest: tuning and health fit a 1280 x 720 screen unscrolled
        side.setStyleSheet("QWidget#sidePanel, QWidget#sidePanel QWidget { font-size: 9pt; }")
        sl = QVBoxLayout(side)
        sl.setContentsMargins(0, 0, 4, 0)
        sl.setSpacing(6)
        sl.addWidget(self.tuning, 0)
        sl.addWidget(self.health, 1)
        scroll = QScrollArea()
        scroll.setWidget(side)
        scroll.setWidgetResizable(True)
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        scroll.setMinimumWidth(380)
        split = QSplitter(Qt.Orientation.Horizontal)
        split.addWidget(self.tabs)
        split.addWidget(scroll)
        split.setStretchFactor(0, 1)
        split.setSizes([WINDOW_SIZE[0] - 420, 420])

        self.warning_strip = ConfigWarningStrip()

        central = QWidget()
        lay = QVBoxLayout(central)
        lay.setContentsMargins(8, 8, 8, 4)
        lay.setSpacing(6)
        lay.addLayout(top)
        lay.addWidget(self.warning_strip)
        lay.addWidget(split, 1)
        self.setCentralWidget(central)
        self.statusBar().showMessage(f"Software stop: the red button or the {STOP_KEY_TEXT} key, from anywhere in "
                                     "the window. It is not an emergency-stop device. Ctrl+Q quits.")
        self.help_button = QPushButton("Help")
        self.help_button.setFlat(True)
        self.help_button.setToolTip("Keys, the stop control and what it is not")
        self.help_button.clicked.connect(self.show_help)
        self.statusBar().addPermanentWidget(self.help_button)

    def show_help(self) -> None:
        from PyQt6.QtWidgets import QMessageBox

        box = QMessageBox(QMessageBox.Icon.Information, "rigloop - help", HELP_TEXT, parent=self)
        box.setTextFormat(Qt.TextFormat.RichText)
        box.open()
        self.help_box = box

    # ------------------------------------------------------------------ config and device
    def open_demo(self) -> None:
        from rigloop.commands.demo import demo_config_path

        self.open_config(str(demo_config_path()))

    def open_config(self, path: str) -> bool:
        """Load and validate a config; problems are shown in the banner, nothing is started."""
        from rigloop.config import ConfigError, load_config

        try:
            cfg = load_config(path, self.sets)
        except ConfigError as exc:
            self._show_problem(f"Config {path} has problems:\n" + "\n".join(exc.lines()[:6]))
            return False
        except (OSError, ValueError) as exc:
            self._show_problem(f"Config {path} cannot be used: {exc}")
            return False
        self.config_path = str(path)
        self.base_cfg = cfg
        self.connection.set_config_path(self.config_path, cfg.rig)
        sim_text = f"{cfg.device.sim.plant} plant, {cfg.device.rate_hz:g} Hz"
        self.connection.set_choice(choice_from_config(cfg), sim_text)
        self.past.set_root(Path(self.out_dir) if self.out_dir else cfg.recording.dir)
        self.tuning.bind(self.session, cfg)      # shows the config's values until connected
        self.live.preview(cfg)                   # labelled, empty plots until the first sample
        self.config_warnings = self.warning_strip.show_for(cfg)
        self.banner.set_state("disconnected", f"Config {Path(path).name} loaded (rig {cfg.rig}). "
                                              "Check the device, then Connect.")
        return True

    def _show_problem(self, text: str) -> None:
        print(f"rigloop gui: {text}", file=sys.stderr)
        self.banner.set_state(self.state if self.state != "connecting" else "disconnected", text)
        self.statusBar().showMessage(text.splitlines()[0], 15000)

    def connect_rig(self) -> bool:
        """Start an engine on the loaded config with the chosen device (a new session)."""
        from rigloop.config import ConfigError, load_config

        if self.session.connected:
            return False
        if self.config_path is None:
            self._show_problem("No config loaded: open a config file, or press Demo.")
            return False
        try:
            device_sets = overrides_for(self.connection.choice())
        except ValueError as exc:
            self._show_problem(f"Device: {exc}")
            return False
        try:
            # Re-read with the device choice as overrides: defaults that depend on the device
            # (such as the local UDP address) then follow the choice, as with `rigloop run --set`.
            cfg = load_config(self.config_path, [*self.sets, *device_sets])
        except ConfigError as exc:
            self._show_problem("Config problems:\n" + "\n".join(exc.lines()[:6]))
            return False
        except (OSError, ValueError) as exc:
            self._show_problem(f"Config {self.config_path} cannot be used: {exc}")
            return False
        self.cfg = cfg
        self.trip_text = ""
        self.last_final = None
        self._runs_completed = 0
        self.config_warnings = self.warning_strip.show_for(cfg)
        self.session.start(cfg, sim_extra=self.sim_extra, out_dir=self.out_dir)
        self.live.start_session(cfg, self.session.fields)
        self.tuning.bind(self.session, cfg)
        self.health.reset(cfg)
        self.past.set_root(Path(self.out_dir) if self.out_dir else cfg.recording.dir)
        return True

    def disconnect_rig(self) -> None:
        if self.state in ("running", "stopping"):
            self.statusBar().showMessage("Stop the rig before disconnecting (Ramp down or Stop).", 8000)
            return
        final = self.session.close()
        if final:
            self._on_ended(final)

    def connect_and_arm(self) -> bool:
        """Connect, then arm as soon as the engine reports idle (``--connect-and-arm``, the demo)."""
        self._arm_when_idle = True
        ok = self.connect_rig()
        if not ok:
            self._arm_when_idle = False
        return ok

    # ------------------------------------------------------------------ operator actions
    def estop(self, source: str = "gui button") -> bool:
        """The e-stop: sent to the engine at once (the engine writes STOP to the device first)."""
        self._arm_when_idle = False
        if self.session.estop(source):
            self.statusBar().showMessage(f"E-stop sent ({source}).", 10000)
            return True
        self.statusBar().showMessage("E-stop: no rig connected, nothing to stop. "
                                     "Use the rig's hardwired e-stop if something moves.", 10000)
        return False

    def arm(self) -> None:
        self.session.arm()

    def ramp_down(self) -> None:
        self.session.ramp_down()

    def reset(self) -> None:
        self.session.reset()

    # ------------------------------------------------------------------ engine feedback
    def _on_state(self, state: str) -> None:
        self.state = state
        if state == "tripped":
            st = self.session.last_status
            self.trip_text = describe_trip(st.get("trip") or st.get("last_trip"), self._units()) or self.trip_text
            self.banner.set_state(state, (self.trip_text or "Trip latched.") + " Press Reset trip when the rig is safe.")
        elif state == "disconnected":
            pass  # _on_ended or open_config says why
        else:
            if state in ("idle", "running"):
                self.trip_text = ""
            detail = None
            if state == "running" and self.cfg is not None:
                c = self.cfg.control
                detail = (f"Loop closed at {self.cfg.device.rate_hz:g} Hz: {c.law} on {c.output}, "
                          f"{c.estimator.kind} estimator. Stop: red button or {STOP_KEY_TEXT}.")
            if self._close_pending and state == "stopping":
                detail = ("Closing: ramping the actuator down; the window closes when the output is safe. "
                          f"Press Stop ({STOP_KEY_TEXT}) to stop at once.")
            self.banner.set_state(state, detail)
        self.arm_button.setEnabled(state == "idle")
        self.ramp_button.setEnabled(state == "running")
        self.reset_button.setEnabled(state == "tripped")
        self.connection.set_state(state)
        self.tuning.set_enabled_for(state)
        rig = self.cfg.rig if self.cfg is not None else (self.base_cfg.rig if self.base_cfg else "")
        self.setWindowTitle(f"rigloop - {rig} - {state_headline(state)}" if rig else "rigloop")
        if state == "idle" and self._arm_when_idle:
            self._arm_when_idle = False
            self.session.arm()
        if self._close_pending and state in ("idle", "tripped"):
            self._finish_close()

    def _note_completed_runs(self, st: dict) -> None:
        """A run that reached duration_s returns the rig to idle: say so, and where it is recorded."""
        runs = st.get("runs_completed")
        if not isinstance(runs, int) or runs <= self._runs_completed:
            return
        self._runs_completed = runs
        duration = self.cfg.duration_s if self.cfg is not None else None
        text = describe_completed_run(runs, duration, st.get("session_dir"))
        if self.state == "idle":
            self.banner.set_state("idle", text)
        self.statusBar().showMessage(text, 20000)

    def _units(self) -> dict[str, str]:
        cfg = self.cfg or self.base_cfg
        return {c.name: c.unit for c in cfg.channels} if cfg is not None else {}

    def _on_status(self, st: dict) -> None:
        self._note_completed_runs(st)
        self.health.update_from_status(st)
        self.tuning.update_from_status(st)
        self.live.note_status(st)
        if self.state == "tripped":
            text = describe_trip(st.get("trip") or st.get("last_trip"), self._units())
            if text and text != self.trip_text:
                self.trip_text = text
                self.banner.set_state("tripped", text + " Press Reset trip when the rig is safe.")

    def _on_rows(self, rows) -> None:
        self.live.add_rows(rows)

    def _on_reply(self, reply: dict) -> None:
        self.tuning.on_reply(reply)
        if not reply.get("ok"):
            self.statusBar().showMessage(f"Engine refused {reply.get('kind')}: {reply.get('message')}", 10000)

    def _on_ended(self, final: dict) -> None:
        self.last_final = final
        error = final.get("error")
        outcome = final.get("outcome")
        where = final.get("session_dir")
        if error and not outcome or (error and outcome == "stopped" and not final.get("samples")):
            text = f"Could not run the rig: {error}"
        else:
            text = f"Session ended: {outcome or 'unknown'}"
            reason = final.get("stop_reason")
            if reason:
                text += f" ({reason})"
            if error:
                text += f". Error: {error}"
            trip = final.get("trip")
            if trip and trip.get("cause") not in (None, "front-end-lost"):
                text += ". Trip: " + describe_trip(trip, self._units())
        if where:
            text += f". Recording: {where}"
            self.health.set_recording(where)
        self.banner.set_state("disconnected", text)
        self.statusBar().showMessage(text, 20000)
        self.past.refresh()
        if self._close_pending:
            self._finish_close()

    # ------------------------------------------------------------------ closing
    def closeEvent(self, event) -> None:  # noqa: N802 - Qt's name
        if self._really_close or not self.session.connected:
            self._teardown()
            event.accept()
            return
        if self.state in ("running", "stopping"):
            if not self._close_pending:
                self._close_pending = True
                self._arm_when_idle = False
                if self.state == "running":
                    self.session.ramp_down()
                self._close_timer.start(int(1000 * (self._ramp_time_s() + CLOSE_GRACE_S)))
                self.banner.set_state(self.state, "Closing: ramping the actuator down; the window closes when "
                                                  f"the output is safe. Press Stop ({STOP_KEY_TEXT}) to stop at once.")
            event.ignore()
            return
        self._teardown()
        event.accept()

    def _ramp_time_s(self) -> float:
        a = self.cfg.actuator if self.cfg is not None else None
        if a is None or not a.slew_per_s:
            return 1.0
        return (a.max - a.min) / a.slew_per_s

    def _close_timed_out(self) -> None:
        if self._close_pending and self.state in ("running", "stopping"):
            self.estop("window closed; the ramped stop took too long")
            QTimer.singleShot(300, self._finish_close)

    def _finish_close(self) -> None:
        self._close_pending = False
        self._close_timer.stop()
        self._really_close = True
        QTimer.singleShot(0, self.close)

    def _teardown(self) -> None:
        """Free the engine (ending the session) and the key filter; safe to call twice."""
        app = QApplication.instance()
        if app is not None:
            app.removeEventFilter(self.stop_filter)
        self.live.timer.stop()
        if self.session.connected:
            final = self.session.close()
            if final:
                self.last_final = final
        for plots in (self.live.plots, self.past.plots):
            plots.shut_down()
        if not getattr(self, "_closed_emitted", False):
            self._closed_emitted = True
            self.closed.emit()
