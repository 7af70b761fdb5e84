"""Fixtures of the desktop-app tests: a themed main window on the demo fan rig (simulated)."""

from __future__ import annotations

import pytest

from gui_testdata import CALM_SETS, DEMO_FAN


@pytest.fixture
def rig_window(qtbot, tmp_path):
    """Factory: ``rig_window(*extra_sets)`` -> a MainWindow on configs/demo_fan.yaml that records to
    tmp_path/sessions and logs every frame the simulated device receives to tmp_path/rx.jsonl.
    At the end of the test the window is closed the way an operator does (e-stop first if the
    rig still moves) and the test waits until the engine process has ended."""
    from PyQt6.QtWidgets import QApplication

    from rigloop.gui.app import configure_graphics
    from rigloop.gui.main_window import MainWindow
    from rigloop.gui.theme import apply_theme

    def shut_down(win) -> None:
        if win.session.connected:
            if win.state in ("running", "stopping"):
                win.estop("test teardown")
            win.close()
            qtbot.waitUntil(lambda: not win.session.connected, timeout=30000)

    def factory(*extra_sets: str):
        apply_theme(QApplication.instance())
        configure_graphics()
        sets = [f"recording.dir={tmp_path / 'sessions'}", *CALM_SETS, *extra_sets]
        win = MainWindow(str(DEMO_FAN), sets, sim_extra={"rx_log": str(tmp_path / "rx.jsonl")})
        qtbot.addWidget(win, before_close_func=shut_down)
        win.show()
        return win

    return factory
