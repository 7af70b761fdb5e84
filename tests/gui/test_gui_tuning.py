"""Live tuning from the desktop app: valid changes reach the engine and the recording; invalid
ones are refused in place, with the allowed range, and nothing is sent."""

from __future__ import annotations

import pytest
from PyQt6.QtCore import Qt

from gui_testdata import events_of, has_stop_after_last_arm, read_rx_log, session_dirs, session_meta

pytestmark = pytest.mark.gui
LONG = 20000


def _count_requests(win):
    """Wrap the engine client's send() to count every request written to the engine's pipe."""
    sent = []
    original = win.session.client.send

    def counting(kind, **args):
        if kind != "ping":
            sent.append((kind, args))
        return original(kind, **args)

    win.session.client.send = counting
    return sent


def _enter(qtbot, edit, text: str) -> None:
    edit.setText(text)
    qtbot.keyClick(edit, Qt.Key.Key_Return)


def test_tuning_change_is_applied_recorded_and_invalid_entries_are_refused(qtbot, rig_window, tmp_path):
    win = rig_window()
    assert win.connect_and_arm()
    qtbot.waitUntil(lambda: win.state == "running", timeout=LONG)
    sent = _count_requests(win)
    tuning = win.tuning
    kp = tuning.fields["control.kp"].editor

    # Refused in place: the schema allows Kp >= 0 (rigloop.config.schema), nothing is sent.
    _enter(qtbot, kp, "-1")
    assert "a number >= 0" in tuning.message("control.kp")
    assert kp.property("invalid") == "true"
    _enter(qtbot, kp, "fast")
    assert "a number >= 0" in tuning.message("control.kp")
    # The estimator window must hold at least two samples: 2 / 100 Hz = 0.02 s.
    _enter(qtbot, tuning.fields["control.estimator.window_s"].editor, "0.005")
    assert "0.02 s" in tuning.message("control.estimator.window_s")
    # A setpoint outside the output's limits (-100 .. 3300 rpm in the demo config).
    _enter(qtbot, tuning.setpoint_edit, "5000")
    assert "from -100 to 3300 rpm" in tuning.message("setpoint")
    assert sent == []

    # Accepted: reaches the engine, the engine says so, the field says so.
    _enter(qtbot, kp, "6.5")
    assert sent and sent[-1][0] == "set" and sent[-1][1]["key"] == "control.kp"
    qtbot.waitUntil(lambda: (win.session.last_status.get("params") or {}).get("control.kp") == 6.5, timeout=LONG)
    qtbot.waitUntil(lambda: tuning.message("control.kp").startswith("applied"), timeout=LONG)
    assert kp.property("invalid") == "false"

    # A manual setpoint inside the limits is accepted too.
    tuning.blend_edit.setText("0.5")
    _enter(qtbot, tuning.setpoint_edit, "2000")
    qtbot.waitUntil(lambda: tuning.message("setpoint").startswith("applied"), timeout=LONG)

    # Closing while running: the rig is stopped first, then the window closes.
    win.close()
    assert win.isVisible() or not win.session.connected
    qtbot.waitUntil(lambda: not win.session.connected, timeout=30000)
    assert not win.isVisible()
    folder = session_dirs(tmp_path / "sessions")[-1]
    meta = session_meta(folder)
    assert meta["outcome"] != "running"
    assert has_stop_after_last_arm(read_rx_log(tmp_path / "rx.jsonl"))
    params = events_of(folder, "param")
    assert any("kp=6.5" in d for d in params), params
    assert len(params) == 1                       # the refused entries left no trace
    assert events_of(folder, "setpoint")
