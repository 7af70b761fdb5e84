"""The Stop control of the desktop app, end to end against the simulated fan rig.

What is checked comes from the device's own receive log (the simulated device writes one line
per frame it received), not from the app's idea of what it sent: after the e-stop the device must
receive STOP before anything but the (safe) commands that answer samples.
"""

from __future__ import annotations

import pytest
from PyQt6.QtCore import Qt

from gui_testdata import has_stop_after_last_arm, read_rx_log, stop_follows_last_arm

pytestmark = pytest.mark.gui
LONG = 20000


def _running(qtbot, win, min_samples: int = 30):
    assert win.connect_and_arm()
    qtbot.waitUntil(lambda: win.state == "running", timeout=LONG)
    start = win.session.last_status.get("samples", 0)
    qtbot.waitUntil(lambda: win.session.last_status.get("samples", 0) >= start + min_samples, timeout=LONG)


def test_stop_button_trips_and_the_device_receives_stop_next(qtbot, rig_window, tmp_path):
    win = rig_window()
    _running(qtbot, win)
    qtbot.mouseClick(win.stop_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: win.state == "tripped", timeout=LONG)
    assert "TRIPPED" in win.banner.text()
    assert "e-stop" in win.banner.text().lower()
    rx = tmp_path / "rx.jsonl"
    qtbot.waitUntil(lambda: has_stop_after_last_arm(read_rx_log(rx)), timeout=LONG)
    assert stop_follows_last_arm(read_rx_log(rx), safe=win.cfg.actuator.safe)
    assert win.reset_button.isEnabled() and not win.arm_button.isEnabled()

    # Reset returns to idle and stays there: motion resumes only when the operator arms.
    qtbot.mouseClick(win.reset_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: win.state == "idle", timeout=LONG)
    seen = win.session.last_status.get("samples", 0)
    qtbot.waitUntil(lambda: win.session.last_status.get("samples", 0) >= seen + 30, timeout=LONG)
    assert win.state == "idle" and win.session.last_status["state"] == "idle"
    assert "TRIPPED" not in win.banner.text()
    qtbot.mouseClick(win.arm_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: win.state == "running", timeout=LONG)


def test_escape_stops_even_with_focus_in_a_line_edit(qtbot, rig_window, tmp_path):
    win = rig_window()
    _running(qtbot, win)
    edit = win.tuning.fields["control.kp"].editor
    win.activateWindow()
    edit.setFocus()
    edit.setText("5")
    qtbot.keyClick(edit, Qt.Key.Key_Escape)
    qtbot.waitUntil(lambda: win.state == "tripped", timeout=LONG)
    assert win.session.last_status["last_trip"]["cause"] == "e-stop"
    assert edit.text() == "5"          # the key stopped the rig; it did not also edit the field
    rx = tmp_path / "rx.jsonl"
    qtbot.waitUntil(lambda: has_stop_after_last_arm(read_rx_log(rx)), timeout=LONG)
    assert stop_follows_last_arm(read_rx_log(rx), safe=win.cfg.actuator.safe)


def test_stop_button_and_key_are_outside_the_tabs_and_say_the_shortcut(qtbot, rig_window):
    win = rig_window()
    assert "Esc" in win.stop_button.caption() and "software stop" in win.stop_button.caption()
    for index in range(win.tabs.count()):
        win.tabs.setCurrentIndex(index)
        assert win.stop_button.isVisible()
        assert not win.tabs.isAncestorOf(win.stop_button)
    # Without a rig the key still answers, and says there is nothing to stop.
    qtbot.keyClick(win.tuning.setpoint_edit, Qt.Key.Key_Escape)
    assert "no rig connected" in win.statusBar().currentMessage()


def test_limit_trip_is_shown_with_its_cause_in_words(qtbot, rig_window, tmp_path):
    # The demo's first level is 1200 rpm; a maximum of 700 rpm is crossed on the way up.
    win = rig_window("limits.speed_rpm.max=700")
    assert win.connect_and_arm()
    qtbot.waitUntil(lambda: win.state == "tripped", timeout=LONG)
    text = win.banner.text()
    assert "A measured channel left its limits" in text
    assert "speed_rpm" in text and "700" in text
    qtbot.waitUntil(lambda: len(win.live.plots.markers) == 1, timeout=LONG)
    rx = tmp_path / "rx.jsonl"
    qtbot.waitUntil(lambda: has_stop_after_last_arm(read_rx_log(rx)), timeout=LONG)


def test_a_device_that_does_not_answer_is_reported_in_words(qtbot, rig_window):
    win = rig_window()
    win.connection.kind_box.setCurrentIndex(list(win.connection.kind_box.itemData(i) for i in
                                                 range(win.connection.kind_box.count())).index("udp"))
    win.connection.host_edit.setText("127.0.0.1")
    win.connection.port_edit.setText("9")          # the discard port: nothing answers there
    assert win.connect_rig()
    qtbot.waitUntil(lambda: not win.session.connected, timeout=60000)
    text = win.banner.text()
    assert text.startswith("DISCONNECTED") and "Could not run the rig" in text
    assert "udp://127.0.0.1:9" in text


def test_an_unusable_device_choice_is_refused_before_starting(qtbot, rig_window):
    win = rig_window()
    win.connection.kind_box.setCurrentIndex(list(win.connection.kind_box.itemData(i) for i in
                                                 range(win.connection.kind_box.count())).index("udp"))
    win.connection.port_edit.setText("99999")
    assert not win.connect_rig()
    assert not win.session.connected
    assert "UDP port 99999 is out of range" in win.banner.text()
