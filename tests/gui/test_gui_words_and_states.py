"""What the window says and shows in each state: the idle screen, config warnings, a completed
run, a re-armed rig stopped again, the quit key, the margins at rest, and the trace styles."""

from __future__ import annotations

import numpy as np
import pytest
from PyQt6.QtCore import Qt

from gui_testdata import DEMO_FAN, events_of, session_dirs

pytestmark = pytest.mark.gui
LONG = 30000


# ------------------------------------------------------------------ words
def test_an_estop_trip_says_its_cause_once():
    from rigloop.gui.words import describe_trip

    text = describe_trip({"cause": "e-stop", "t": 3.2, "message": "operator e-stop (gui button)",
                          "stop": "immediate"})
    assert text.startswith("Operator e-stop (gui button).")
    assert text.lower().count("operator e-stop") == 1


def test_a_completed_run_says_so_and_where_it_is_recorded():
    from rigloop.gui.words import describe_completed_run

    text = describe_completed_run(1, 20.0, "/data/sessions/20261204-101500_bench-fan")
    assert "completed (20 s)" in text and "/data/sessions/20261204-101500_bench-fan" in text
    assert "output safe" in text


# ------------------------------------------------------------------ idle screen
def test_idle_screen_labels_every_plot_and_says_there_is_no_data(qtbot, rig_window):
    win = rig_window()
    plots = win.live.plots
    labels = {key: plots.plots[key].getAxis("left").labelText for key in ("output", "actuator", "f_hat", "error")}
    assert "[rpm]" in labels["output"] and "[%]" in labels["actuator"]
    assert "rpm/s" in labels["f_hat"] and "[rpm]" in labels["error"]
    assert all(item.isVisible() and item.textItem.toPlainText() == "no data yet" for item in plots._no_data.values())
    lo, hi = plots.plots["output"].viewRange()[1]
    assert lo <= -100 and hi >= 3300          # the empty output panel spans the trip limits, not 0..1


def test_config_warnings_are_shown_in_the_window(qtbot, rig_window):
    # The demo's reference reaches 2500 rpm: with a maximum of 2000 rpm the run will trip, and
    # `rigloop check` warns so. The window must say it too, not only the terminal.
    from rigloop.config import load_config, warnings_of

    sets = ["limits.speed_rpm.max=2000"]
    expected = [w.note for w in warnings_of(load_config(DEMO_FAN, sets))]
    assert expected                              # the check itself warns
    win = rig_window(*sets)
    assert win.warning_strip.isVisibleTo(win)
    assert all(note in win.warning_strip.text() for note in expected)
    from gui_testdata import CALM_SETS

    calm = rig_window()
    calm_notes = [w.note for w in warnings_of(load_config(DEMO_FAN, CALM_SETS))]
    assert calm.warning_strip.isVisibleTo(calm) == bool(calm_notes)
    assert "limits.speed_rpm.max (2000)" not in calm.warning_strip.text()


def test_help_says_the_stop_is_not_an_emergency_stop_device(qtbot, rig_window):
    win = rig_window()
    qtbot.mouseClick(win.help_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: getattr(win, "help_box", None) is not None and win.help_box.isVisible(), timeout=5000)
    text = win.help_box.text()
    assert "not an emergency-stop device" in text and "hardwired emergency stop" in text
    assert "Esc" in text and "Ctrl+Q" in text
    assert "not an emergency-stop device" in win.stop_button.toolTip()
    win.help_box.close()


def test_ctrl_q_closes_the_window(qtbot, rig_window):
    win = rig_window()
    closed = []
    win.closed.connect(lambda: closed.append(True))
    qtbot.keyClick(win.tuning.fields["control.kp"].editor, Qt.Key.Key_Q, Qt.KeyboardModifier.ControlModifier)
    qtbot.waitUntil(lambda: closed == [True], timeout=5000)
    assert not win.isVisible()


# ------------------------------------------------------------------ margins at rest
def test_no_near_warning_at_rest_from_a_limit_on_the_far_side():
    """A fan at standstill (0 rpm) with a lower limit of -100 rpm (reverse rotation) is not
    'near' anything: it is at rest and not heading there. The same margin approached at speed is."""
    from rigloop.gui.health_panel import MarginJudge

    judge = MarginJudge()
    rest = [0.0, 0.4, -0.3, 0.0, 0.2, -0.1] * 5          # quantized tach noise around 0
    for k, v in enumerate(rest):
        word = judge.judge("speed_rpm", v, -100.0, 3300.0, t=k * 0.03)
    assert word == "ok"
    falling = MarginJudge()
    for k in range(30):                                  # 3000 rpm/s down through 200 rpm
        word = falling.judge("speed_rpm", 200.0 - 100.0 * k, -100.0, 3300.0, t=k * 0.033)
        if 200.0 - 100.0 * k < 150:
            break
    assert word == "near"
    coasting = MarginJudge()                             # the same fall, output safe: coming to rest
    for k in range(2):
        word = coasting.judge("speed_rpm", 200.0 - 100.0 * k, -100.0, 3300.0, t=k * 0.033, driven=False)
    assert word == "ok"
    hot = MarginJudge()                                  # steady just under a maximum: near
    for k in range(30):
        word = hot.judge("temp_c", 69.0 + 0.2 * ((-1) ** k), None, 70.0, t=k * 0.03)
    assert word == "near"
    beyond = MarginJudge()
    assert beyond.judge("temp_c", 71.0, None, 70.0, t=0.0) == "BEYOND"


# ------------------------------------------------------------------ trace styles
def test_app_and_figure_share_the_palette_and_keep_the_reference_visible(tmp_path):
    """Reference above the output, dashed; commanded and applied actuator differ in colour and
    line style; the same colours in the app and in the report figure (rigloop.palette)."""
    from rigloop import palette
    from rigloop.analysis.figures import session_figure
    from rigloop.analysis.report import analyse
    from rigloop.analysis.session import load_session
    from rigloop.gui.trace_plots import TracePlots

    from gui_testdata import write_fake_session

    plots = TracePlots()
    plots.configure(output="speed_rpm", output_unit="rpm", actuator="duty", actuator_unit="%",
                    u_min=0.0, u_max=100.0)
    c = plots.curves
    assert c["ref"].zValue() > c["y"].zValue() and c["u"].zValue() > c["u_cmd"].zValue()
    assert c["ref"].opts["pen"].style() == Qt.PenStyle.DashLine
    assert c["u"].opts["pen"].style() != c["u_cmd"].opts["pen"].style()
    assert c["u"].opts["pen"].color().name() != c["u_cmd"].opts["pen"].color().name()
    assert c["y"].opts["pen"].color().name() == palette.colour("y")

    folder = write_fake_session(tmp_path / "s", trip_t=None)
    fig = session_figure([analyse(load_session(folder))])
    ax_y, ax_u = fig.axes[0], fig.axes[1]
    lines = {ln.get_label(): ln for ln in ax_y.get_lines() + ax_u.get_lines()}
    ref, out = lines["reference r"], lines["output y"]
    assert ref.get_zorder() > out.get_zorder() and ref.get_linestyle() == "--"
    assert ref.get_color() == palette.colour("ref") and out.get_color() == palette.colour("y")
    cmd, applied = lines["commanded"], lines["applied (device)"]
    assert (cmd.get_color(), cmd.get_linestyle()) != (applied.get_color(), applied.get_linestyle())
    assert cmd.get_color() == palette.colour("u_cmd")
    assert applied.get_zorder() > cmd.get_zorder()
    # every trace colour is one of the published colour-blind-safe set (CUD, 2008)
    cud = {palette.BLACK, palette.ORANGE, palette.SKY_BLUE, palette.BLUISH_GREEN, palette.BLUE,
           palette.VERMILLION, palette.REDDISH_PURPLE}
    assert {colour for colour, _ in palette.TRACES.values()} - {palette.NEUTRAL} <= cud
    assert set(palette.EXTRA) <= cud


# ------------------------------------------------------------------ against the simulated rig
def test_rearmed_rig_stopped_again_shows_the_new_cause_not_the_old_one(qtbot, rig_window, tmp_path):
    """limit trip -> Reset -> Arm -> Esc: the banner says e-stop (as events.csv does), and each
    arm starts the profile afresh from the measured speed. The maximum lies between the
    profile's first level (1200 rpm, reached in 1.5 s) and its second (2200 rpm at t = 2 s),
    so the re-armed run has two seconds below it in which the e-stop comes."""
    win = rig_window("limits.speed_rpm.max=1300")
    assert win.connect_and_arm()
    qtbot.waitUntil(lambda: win.state == "tripped", timeout=LONG)
    assert "left its limits" in win.banner.text()

    def speed():
        return next(m["value"] for m in win.session.last_status["margins"] if m["channel"] == "speed_rpm")

    # as an operator would: let the fan coast below the limit (a limit is watched at rest too)
    qtbot.waitUntil(lambda: speed() < 1000, timeout=LONG)
    win.reset()
    qtbot.waitUntil(lambda: win.state == "idle", timeout=LONG)
    win.arm()
    qtbot.waitUntil(lambda: win.state == "running", timeout=LONG)
    qtbot.keyClick(win.tuning.fields["control.kp"].editor, Qt.Key.Key_Escape)
    qtbot.waitUntil(lambda: win.state == "tripped", timeout=LONG)
    qtbot.waitUntil(lambda: "e-stop" in win.banner.text().lower(), timeout=LONG)
    assert "left its limits" not in win.banner.text()
    assert "1300" not in win.banner.text()
    win.close()
    qtbot.waitUntil(lambda: not win.session.connected, timeout=LONG)
    folder = session_dirs(tmp_path / "sessions")[-1]
    blends = events_of(folder, "profile")
    assert len(blends) == 2
    for text in blends:             # each arm blends into the profile's own first level
        assert text.endswith("first level 1200 rpm over 1.5 s"), text


def test_a_completed_run_says_it_completed_and_where(qtbot, rig_window, tmp_path):
    win = rig_window("duration_s=1.0", "device.sim.clock=lockstep")
    assert win.connect_and_arm()
    qtbot.waitUntil(lambda: "completed" in win.banner.text(), timeout=LONG)
    assert win.state == "idle"
    text = win.banner.text()
    assert "IDLE" in text and "The run completed (1 s)" in text
    folder = session_dirs(tmp_path / "sessions")[-1]
    assert str(folder) in text.replace("\u200b", "")


# ------------------------------------------------------------------ layout
def test_window_fits_1280x720_and_never_widens_itself(qtbot, rig_window):
    win = rig_window()
    win.resize(1280, 720)
    qtbot.waitExposed(win)
    hint = win.minimumSizeHint()
    assert hint.width() <= 1280 and hint.height() <= 720
    # the longest things the window says: a trip in the banner, a refusal under every field
    win.banner.set_state("tripped", "A measured channel left its limits: speed_rpm 3105.2 rpm above its "
                                    "maximum 3000 rpm. Value 3105 rpm, limit 3000 rpm, at t = 12.34 s.")
    for key in win.tuning.fields:
        win.tuning._say(key, "law = iPD refused: it needs a model of order 2, this session runs order 1; "
                             "allowed now: iP, iPI, PID (change control.order in the config and reconnect)",
                        "error")
    win.warning_strip.setText("Config warnings: " + "the reference reaches 2500, at or above max 2000. " * 6)
    win.warning_strip.setVisible(True)
    qtbot.wait(50)
    assert win.width() == 1280
    assert win.minimumSizeHint().width() <= 1280
    # the margin column shows its words whole
    win.health.update_from_status({"state": "running", "t": 1.0, "margins": [
        {"channel": "airflow_m3h", "unit": "m3/h", "value": 123.45, "min": -100.0, "max": 3300.0,
         "margin": 223.45}]})
    table = win.health.table
    for col in range(4):
        text = table.item(0, col).text()
        assert table.fontMetrics().horizontalAdvance(text) <= table.columnWidth(col), (col, text)


def test_extra_channels_get_one_labelled_panel_per_unit(qtbot):
    """Past sessions show every channel: A, m3/h and degC never share one unlabelled axis."""
    from rigloop.gui.trace_plots import TracePlots

    plots = TracePlots()
    qtbot.addWidget(plots)
    plots.configure(output="speed_rpm", output_unit="rpm", actuator="duty", actuator_unit="%",
                    u_min=0.0, u_max=100.0)
    units = {"current_a": "A", "airflow_m3h": "m3/h", "temp_c": "degC", "temp_b": "degC"}
    plots.set_extra_channels(list(units), units)
    extra = {k: p for k, p in plots.plots.items() if k.startswith("extra:")}
    assert sorted(extra) == ["extra:A", "extra:degC", "extra:m3/h"]
    for key, plot in extra.items():
        assert plot.getAxis("left").labelText == f"[{key.removeprefix('extra:')}]"
    in_degc = [n for n, p in plots._plot_of.items() if p == "extra:degC"]
    assert sorted(in_degc) == ["ch:temp_b", "ch:temp_c"]
    plots.add_marker(2.0, "TRIP: test")
    assert len(plots.markers[0][1]) == len(plots.plots)          # the marker crosses every panel
    plots.set_extra_channels([], units)
    assert not any(k.startswith("extra:") for k in plots.plots)


def test_demo_with_a_usable_display_opens_the_app_connected_and_running(monkeypatch, capsys):
    import argparse

    from rigloop.commands import demo, gui
    from rigloop.gui import probe

    calls = []
    monkeypatch.setattr(demo, "has_display", lambda: True)
    monkeypatch.setattr(probe, "probe_display", lambda *a, **k: probe.ProbeResult(True))
    monkeypatch.setattr(gui, "launch_gui", lambda path, sets, **kw: calls.append(kw) or 0)
    args = argparse.Namespace(config=None, headless=False, duration=None, set=[])
    assert demo.run(args) == 0
    assert calls and calls[0]["arm"] is True          # connects and starts by itself
    assert "starts the run" in capsys.readouterr().out
