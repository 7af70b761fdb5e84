"""Parts of the desktop app on their own: words, local validation, device overrides, the trace
buffer, the tuning and health panels, the Stop key, past sessions and the close logic (with a
stand-in engine client, so these run in well under a second each)."""

from __future__ import annotations

import numpy as np
import pytest
from PyQt6.QtCore import QEvent, Qt
from PyQt6.QtGui import QKeyEvent
from PyQt6.QtWidgets import QApplication, QLineEdit

from gui_testdata import DEMO_FAN, RATE_HZ, write_fake_session

pytestmark = pytest.mark.gui


@pytest.fixture
def demo_cfg(tmp_path):
    from rigloop.config import load_config

    return load_config(DEMO_FAN, [f"recording.dir={tmp_path / 'sessions'}", f"device.rate_hz={RATE_HZ}"])


# ------------------------------------------------------------------ words
def test_every_engine_state_and_trip_cause_has_words():
    from rigloop.engine.records import TRIP_CAUSES
    from rigloop.engine.states import State
    from rigloop.gui.words import CAUSE_WORDS, STATE_WORDS

    assert {s.value for s in State} <= set(STATE_WORDS)
    assert set(TRIP_CAUSES) <= set(CAUSE_WORDS)


def test_trip_description_names_cause_value_limit_and_time():
    from rigloop.gui.words import describe_trip

    text = describe_trip({"cause": "limit", "t": 12.34, "channel": "speed_rpm", "value": 3105.2,
                          "limit": 3000.0, "message": "speed_rpm 3105.2 rpm above its maximum 3000 rpm",
                          "stop": "immediate"}, {"speed_rpm": "rpm"})
    assert text.startswith("A measured channel left its limits: speed_rpm 3105.2 rpm above its maximum")
    assert "Value 3105 rpm, limit 3000 rpm, at t = 12.34 s." in text


def test_status_bits_in_words_flag_the_worrying_ones():
    from rigloop.gui.words import status_bit_words
    from rigloop.protocol.messages import Status

    assert status_bit_words(int(Status.ARMED | Status.CONFIGURED)) == [("armed", False), ("configured", False)]
    assert ("watchdog expired", True) in status_bit_words(int(Status.WATCHDOG | Status.STOP_LATCHED))
    assert status_bit_words(0) == []


# ------------------------------------------------------------------ local validation
@pytest.mark.parametrize("key, text", [
    ("control.kp", "6.5"), ("control.kp", "-1"), ("control.kp", "abc"), ("control.ki", "0"),
    ("control.alpha", "0"), ("control.alpha", "-30"), ("control.alpha", ".nan"),
    ("control.estimator.window_s", "0.015"), ("control.estimator.window_s", "0.005"),
    ("control.estimator.window_s", "0"), ("control.estimator.kind", "averaging"),
    ("control.estimator.kind", "median"), ("control.law", "iPI"), ("control.law", "iPD"),
    ("control.law", "ip"), ("control.derivative_window_s", "null"), ("control.derivative_window_s", "0.01"),
])
def test_local_check_agrees_with_the_config_loader(key, text, demo_cfg):
    """The app refuses exactly what the engine's own check of a live change refuses: the running
    config's complete mapping with the one key overridden, validated by rigloop.config."""
    from rigloop.config import ConfigError, apply_overrides, parse_config
    from rigloop.gui.validation import check_tunable

    try:
        parse_config(apply_overrides(demo_cfg.raw, [f"{key}={text}"]), base_dir=demo_cfg.base_dir)
        loader_ok = True
    except ConfigError:
        loader_ok = False
    local = check_tunable(key, text, demo_cfg.device.rate_hz, order=demo_cfg.control.order,
                          estimator=demo_cfg.control.estimator.kind)
    assert local.ok == loader_ok, local.message
    if not local.ok:
        assert "refused" in local.message and "allowed" in local.message


def test_refusal_shows_the_allowed_range():
    from rigloop.gui.validation import check_blend, check_setpoint, check_tunable

    assert "a number >= 0" in check_tunable("control.kp", "-1").message
    assert "at least 2 samples (0.02 s at 100 Hz)" in check_tunable("control.estimator.window_s", "0.001", 100.0).message
    assert "needs a model of order 2" in check_tunable("control.law", "iPD", 100.0, order=1).message
    assert "from -100 to 3300 rpm" in check_setpoint("5000", -100.0, 3300.0, "rpm").message
    assert check_setpoint("1500", -100.0, 3300.0).value == 1500.0
    assert not check_blend("-1").ok and check_blend("0").ok


# ------------------------------------------------------------------ device choice
def test_device_choice_becomes_overrides_the_loader_accepts():
    from rigloop.config import load_config
    from rigloop.gui.device_choice import DeviceChoice, overrides_for

    cfg = load_config(DEMO_FAN, overrides_for(DeviceChoice("udp", host="192.168.7.20", port="47801")))
    assert (cfg.device.link, cfg.device.udp.host, cfg.device.udp.port) == ("udp", "192.168.7.20", 47801)
    assert cfg.device.udp.local_host not in ("127.0.0.1", "::1")   # the computed default follows the new device
    cfg = load_config(DEMO_FAN, overrides_for(DeviceChoice("serial", serial_port="/dev/ttyACM3", baud="115200")))
    assert (cfg.device.link, cfg.device.serial.port, cfg.device.serial.baud) == ("serial", "/dev/ttyACM3", 115200)
    assert load_config(DEMO_FAN, overrides_for(DeviceChoice("sim"))).device.link == "sim"


@pytest.mark.parametrize("choice, words", [
    (dict(kind="udp", host="", port=47800), "UDP host is empty"),
    (dict(kind="udp", host="10.0.0.2", port="70000"), "1..65535"),
    (dict(kind="udp", host="10.0.0.2", port="abc"), "not a whole number"),
    (dict(kind="serial", serial_port=""), "no serial port chosen"),
])
def test_unusable_device_choice_says_what_to_fix(choice, words):
    from rigloop.gui.device_choice import DeviceChoice, overrides_for

    with pytest.raises(ValueError, match=words):
        overrides_for(DeviceChoice(**choice))


def test_serial_port_list_puts_usb_boards_first_and_describes_them(monkeypatch):
    from types import SimpleNamespace

    from serial.tools import list_ports

    from rigloop.gui.device_choice import list_serial_ports

    found = [SimpleNamespace(device="/dev/ttyS0", description="n/a", manufacturer=None),
             SimpleNamespace(device="/dev/ttyACM0", description="Fan rig board", manufacturer="Bench Co"),
             SimpleNamespace(device="/dev/ttyUSB1", description="USB serial", manufacturer=None)]
    monkeypatch.setattr(list_ports, "comports", lambda: found)
    assert list_serial_ports() == [("/dev/ttyACM0", "Fan rig board (Bench Co)"),
                                   ("/dev/ttyUSB1", "USB serial"), ("/dev/ttyS0", "")]


# ------------------------------------------------------------------ trace buffer
def test_trace_buffer_keeps_the_newest_rows_in_order():
    from rigloop.gui.trace_buffer import TraceBuffer

    buf = TraceBuffer(("t", "y"), capacity=100)
    t = 0
    for batch in (7, 30, 64, 1, 99, 250, 3):
        rows = np.column_stack([np.arange(t, t + batch) * 0.01, np.arange(t, t + batch) * 2.0])
        buf.append(rows)
        t += batch
        held = buf.column("t")
        assert np.all(np.diff(held) > 0)
        assert held[-1] == pytest.approx((t - 1) * 0.01)
        assert len(buf) >= min(t, 100)
    assert buf.total == t and len(buf) <= 200
    assert buf.value_at(buf.t_last - 0.0149, "y") == pytest.approx(2.0 * (t - 2))
    i = buf.start_of(buf.t_last - 0.05)
    assert buf.column("t")[i] == pytest.approx(buf.t_last - 0.05)


# ------------------------------------------------------------------ panels with a stand-in session
class FakeSession:
    connected = True

    def __init__(self):
        self.sent = []

    def set_param(self, key, value):
        self.sent.append(("set", key, value))
        return len(self.sent)

    def set_setpoint(self, level, blend):
        self.sent.append(("setpoint", level, blend))
        return len(self.sent)

    def start_profile(self):
        self.sent.append(("profile",))
        return len(self.sent)


def test_tuning_panel_refuses_in_place_and_shows_the_engine_reply(qtbot, demo_cfg):
    from rigloop.gui.tuning_panel import TuningPanel

    panel = TuningPanel()
    qtbot.addWidget(panel)
    session = FakeSession()
    panel.bind(session, demo_cfg)
    panel.set_enabled_for("running")
    f = panel.fields["control.kd"]
    f.editor.setText("-0.5")
    assert panel.apply("control.kd") is None and session.sent == []
    assert "a number >= 0" in panel.message("control.kd")
    law = panel.fields["control.law"].editor
    law.setCurrentText("iPID")
    assert panel.apply("control.law") is None
    assert law.currentText() == "iP" and "order" in panel.message("control.law")
    f.editor.setText("0.2")
    rid = panel.apply("control.kd")
    assert session.sent == [("set", "control.kd", 0.2)]
    panel.on_reply({"id": rid, "kind": "set", "ok": False, "message": "control.kd: not used here"})
    assert panel.message("control.kd") == "refused by the engine: control.kd: not used here"
    # alpha changing sign asks for a second Enter
    alpha = panel.fields["control.alpha"].editor
    alpha.setText("-30")
    assert panel.apply("control.alpha") is None and "changes sign" in panel.message("control.alpha")
    assert panel.apply("control.alpha") is not None and session.sent[-1] == ("set", "control.alpha", -30.0)


def test_health_panel_shows_margins_and_status_in_words(qtbot, demo_cfg):
    from rigloop.gui.health_panel import HealthPanel

    panel = HealthPanel()
    qtbot.addWidget(panel)
    panel.reset(demo_cfg)
    panel.update_from_status({
        "margins": [{"channel": "speed_rpm", "unit": "rpm", "value": 3250.0, "min": -100.0, "max": 3300.0,
                     "margin": 50.0},
                    {"channel": "temp_c", "unit": "degC", "value": 72.0, "min": None, "max": 70.0, "margin": -2.0}],
        "samples": 10, "lost_samples": 1, "rejected": {"accepted": 9, "crc": 2, "total_rejected": 2},
        "latency_ms": {"p50": 0.1, "p99": 0.4}, "device_status": 1 | 4, "session_dir": "/tmp/s/x"})
    assert panel.table.item(0, 3).text() == "near 50"        # 1.5 % of the span: near at rest too
    assert panel.table.item(1, 3).text() == "BEYOND -2"
    assert "2 rejected (crc 2)" in panel.frames.text()
    assert "watchdog expired" in panel.device.text()


def test_stop_key_filter_fires_once_per_press_whatever_has_focus(qtbot):
    from rigloop.gui.stop_control import StopKeyFilter

    app = QApplication.instance()
    filt = StopKeyFilter()
    app.installEventFilter(filt)
    try:
        edit = QLineEdit("3")
        qtbot.addWidget(edit)
        with qtbot.waitSignal(filt.triggered, timeout=1000):
            qtbot.keyClick(edit, Qt.Key.Key_Escape)
        fired = []
        filt.triggered.connect(lambda: fired.append(1))
        repeat = QKeyEvent(QEvent.Type.KeyPress, Qt.Key.Key_Escape, Qt.KeyboardModifier.NoModifier, "", True)
        QApplication.sendEvent(edit, repeat)
        assert fired == []
        qtbot.keyClick(edit, Qt.Key.Key_A)
        assert fired == [] and edit.text() == "3a"
    finally:
        app.removeEventFilter(filt)


def test_past_session_opens_read_only_with_trip_marker(qtbot, tmp_path):
    from rigloop.gui.past_sessions import PastSessions

    folder = write_fake_session(tmp_path / "sessions" / "20261201-215005_bench-fan")
    before = {p.name: p.stat().st_mtime_ns for p in folder.iterdir()}
    view = PastSessions()
    qtbot.addWidget(view)
    view.set_root(tmp_path / "sessions")
    assert view.list.count() == 1
    assert view.list.item(0).text().endswith("tripped · 1 run")     # outcome and number of runs
    assert view.open(folder)
    assert len(view.buffer) == 300
    assert len(view.plots.markers) == 1 and view.plots.markers[0][0] == pytest.approx(2.0)
    assert "outcome <b>tripped</b>" in view.info.text()
    assert "A measured channel left its limits" in view.info.text()
    assert {p.name: p.stat().st_mtime_ns for p in folder.iterdir()} == before
    assert not view.open(tmp_path)
    assert "Cannot open" in view.info.text()


# ------------------------------------------------------------------ window logic with a stand-in client
class FakeClient:
    def __init__(self, cfg, **_kw):
        from rigloop.engine.telemetry import ring_fields

        self.fields = ring_fields([c.name for c in cfg.channels])
        self.state = "idle"
        self.requests = []
        self.closed = False

    def start(self):
        return self

    def status(self):
        return {"state": self.state, "samples": 0, "params": {}, "margins": []}

    def read_since(self, cursor, max_rows=None):
        return cursor, np.empty((0, len(self.fields)))

    def is_alive(self):
        return not self.closed

    def close(self):
        self.closed = True
        return {"state": self.state, "outcome": "stopped", "done": True}

    def ping(self):
        """Heartbeats are not requests the tests count."""

    def __getattr__(self, name):
        if name in ("estop", "arm", "stop", "ramp_down", "reset", "set_param", "set_setpoint",
                    "start_profile"):
            return lambda *a, **k: self.requests.append(name) or len(self.requests)
        raise AttributeError(name)


def test_closing_while_running_ramps_down_first_then_closes(qtbot, tmp_path):
    from rigloop.gui.main_window import MainWindow

    clients = []

    def factory(cfg, **kw):
        clients.append(FakeClient(cfg, **kw))
        return clients[-1]

    win = MainWindow(str(DEMO_FAN), [f"recording.dir={tmp_path}"], client_factory=factory)
    qtbot.addWidget(win)
    win.show()
    assert win.connect_rig()
    client = clients[0]
    client.state = "running"
    qtbot.waitUntil(lambda: win.state == "running", timeout=5000)
    assert win.banner.headline.text() == "RUNNING"
    win.close()
    assert win.isVisible() and client.requests[-1] == "ramp_down" and not client.closed
    assert "Closing" in win.banner.text()
    client.state = "stopping"
    qtbot.waitUntil(lambda: win.state == "stopping", timeout=5000)
    assert win.isVisible()
    client.state = "idle"
    qtbot.waitUntil(lambda: not win.isVisible(), timeout=5000)
    assert client.closed


def test_stop_reaches_the_client_before_anything_else(qtbot, tmp_path):
    from rigloop.gui.main_window import MainWindow

    clients = []
    win = MainWindow(str(DEMO_FAN), [f"recording.dir={tmp_path}"],
                     client_factory=lambda cfg, **kw: clients.append(FakeClient(cfg)) or clients[-1])
    qtbot.addWidget(win)
    win.show()
    assert win.connect_and_arm()
    qtbot.waitUntil(lambda: clients[0].requests == ["arm"], timeout=5000)
    qtbot.mouseClick(win.stop_button, Qt.MouseButton.LeftButton)
    assert clients[0].requests == ["arm", "estop"]     # sent in the click handler, not on a timer
    win.disconnect_rig()


def test_live_view_window_pause_readout_and_trip_marker(qtbot, demo_cfg):
    from rigloop.engine.telemetry import ring_fields
    from rigloop.gui.live_traces import LiveTraces

    fields = ring_fields([c.name for c in demo_cfg.channels])
    live = LiveTraces()
    qtbot.addWidget(live)
    live.resize(900, 600)
    live.show()
    live.start_session(demo_cfg, fields)

    def rows(k0, n):
        out = np.zeros((n, len(fields)))
        k = np.arange(k0, k0 + n)
        out[:, fields.index("t")] = k * 0.01
        out[:, fields.index("y")] = 1000.0 + k
        out[:, fields.index("ch:current_a")] = 0.5
        return out

    live.add_rows(rows(0, 2000))                     # 20 s of samples at 100 Hz
    live.set_window(5)
    live.redraw()
    lo, hi = live.plots.plots["output"].viewRange()[0]
    assert hi - lo == pytest.approx(5.0) and lo <= 19.99 <= hi
    live.tick_channel("current_a")
    assert "ch:current_a" in live.plots.curves
    live.set_paused(True)
    shown = len(live.plots.curves["y"].xData)
    live.add_rows(rows(2000, 500))
    live.redraw()
    assert len(live.plots.curves["y"].xData) == shown   # the view is frozen ...
    assert live.buffer.t_last == pytest.approx(24.99)   # ... the data keep coming
    live.set_paused(False)
    assert live.plots.curves["y"].xData[-1] == pytest.approx(24.99)
    live.plots.move_cursor(22.0)
    assert "t = 22 s" in live.readout.text() and "speed_rpm 3200 rpm" in live.readout.text()
    live.note_status({"last_trip": {"cause": "limit", "t": 24.5}})
    live.note_status({"last_trip": {"cause": "limit", "t": 24.5}})
    assert [t for t, _ in live.plots.markers] == [24.5]


def test_a_recording_is_held_once_not_doubled():
    """Past sessions are read-only: the buffer wraps the rows without an appending reserve."""
    import numpy as np

    from rigloop.gui.trace_buffer import TraceBuffer

    rows = np.arange(12.0).reshape(4, 3)
    buf = TraceBuffer.from_rows(("t", "y", "u"), rows)
    assert len(buf) == 4 and buf.rows.shape == (4, 3) and buf._data.shape == (4, 3)
    assert buf.column("y").tolist() == [1.0, 4.0, 7.0, 10.0]
    buf.append(np.array([[12.0, 13.0, 14.0]]))          # still usable: the oldest row makes room
    assert buf.column("t").tolist() == [3.0, 6.0, 9.0, 12.0]
