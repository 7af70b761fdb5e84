"""The desktop app as a real process: killed while the rig runs, stopped by SIGTERM, the
screenshot command, and the demo's fall-back where Qt cannot open a window."""

from __future__ import annotations

import csv
import os
import signal
import subprocess
import sys
import time

import pytest

from gui_testdata import CALM_SETS, DEMO_FAN, session_dirs, session_meta

pytestmark = [pytest.mark.gui, pytest.mark.slow]


def _wait_for(predicate, timeout: float, what: str, proc=None):
    """Poll a condition (files written by other processes) until it holds or time runs out."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        if proc is not None and proc.poll() is not None:
            value = predicate()
            if value:
                return value
            pytest.fail(f"the app exited with {proc.returncode} before {what}")
        time.sleep(0.05)
    pytest.fail(f"timed out after {timeout:g} s waiting for {what}")


def _gui(tmp_path, *args: str) -> list[str]:
    sets = [x for s in [f"recording.dir={tmp_path / 'sessions'}", *CALM_SETS] for x in ("--set", s)]
    return [sys.executable, "-m", "rigloop", "gui", str(DEMO_FAN), *sets, *args]


def _env():
    return dict(os.environ, QT_QPA_PLATFORM="offscreen")


def _running_rows(folder):
    path = folder / "samples.csv"
    if not path.exists():
        return 0
    with open(path, newline="", encoding="utf-8") as fh:
        return sum(1 for row in csv.DictReader(fh) if row.get("state") == "running")


@pytest.fixture(scope="module")
def killed_app_session(tmp_path_factory):
    """Start the app with --connect-and-arm, wait for rows recorded while running, SIGKILL the app and
    wait until the engine has finished the session on its own. Returns the session folder."""
    tmp_path = tmp_path_factory.mktemp("killed")
    out = open(tmp_path / "gui.log", "w")
    proc = subprocess.Popen(_gui(tmp_path, "--connect-and-arm"), env=_env(), stdout=out, stderr=subprocess.STDOUT)
    try:
        folder = _wait_for(lambda: (session_dirs(tmp_path / "sessions") or [None])[-1], 60, "a session folder", proc)
        _wait_for(lambda: _running_rows(folder) >= 20, 60, "rows recorded while running", proc)
        proc.send_signal(signal.SIGKILL)
        proc.wait(30)
        _wait_for(lambda: session_meta(folder).get("outcome") not in (None, "running"), 30,
                  "the engine to end the session")
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(10)
        out.close()
    return folder


def test_killing_the_app_makes_the_engine_stop_the_rig(killed_app_session):
    meta = session_meta(killed_app_session)
    assert meta["outcome"] == "tripped"
    assert meta["trip"]["cause"] == "front-end-lost"
    assert meta["trip"]["stop"] == "ramped"


def test_after_the_app_is_killed_the_ramp_reaches_the_safe_value(killed_app_session):
    from gui_testdata import events_of

    assert [d for d in events_of(killed_app_session, "trip") if not d.startswith("front-end-lost")] == []
    with open(killed_app_session / "samples.csv", newline="", encoding="utf-8") as fh:
        last = list(csv.DictReader(fh))[-1]
    assert float(last["u_cmd"]) == 0.0        # the controlled stop ended at the safe duty


def test_screenshot_command_writes_a_png_of_the_window_size(tmp_path):
    from PyQt6.QtGui import QImage

    png = tmp_path / "window.png"
    done = subprocess.run(_gui(tmp_path, "--screenshot", str(png), "--screenshot-delay", "1",
                               "--connect-and-arm", "--window-size", "1280x720"), env=_env(),
                          capture_output=True, text=True, timeout=180)
    assert done.returncode == 0, done.stderr[-2000:]
    image = QImage(str(png))
    assert (image.width(), image.height()) == (1280, 720)
    folder = session_dirs(tmp_path / "sessions")[-1]
    assert session_meta(folder)["outcome"] not in (None, "running")


def test_screenshot_never_arms_without_being_asked(tmp_path):
    # On a real rig an armed screenshot spins the motor: --screenshot alone only connects when
    # asked (--connect), and the device then never receives ARM.
    png = tmp_path / "idle.png"
    done = subprocess.run(_gui(tmp_path, "--screenshot", str(png), "--screenshot-delay", "0.5", "--connect"),
                          env=_env(), capture_output=True, text=True, timeout=180)
    assert done.returncode == 0, done.stderr[-2000:]
    assert png.exists()
    folder = session_dirs(tmp_path / "sessions")[-1]
    from gui_testdata import events_of

    assert events_of(folder, "armed") == []
    assert session_meta(folder)["summary"]["running_samples"] == 0


def test_sigterm_closes_the_app_like_the_window_close(tmp_path):
    """SIGTERM while the rig runs = closing the window: ramped stop, the engine ends the session,
    shared memory is freed (no resource-tracker warning), exit code 0."""
    out = open(tmp_path / "gui.log", "w")
    err_path = tmp_path / "gui.err"
    err = open(err_path, "w")
    proc = subprocess.Popen(_gui(tmp_path, "--connect-and-arm"), env=_env(), stdout=out, stderr=err)
    try:
        folder = _wait_for(lambda: (session_dirs(tmp_path / "sessions") or [None])[-1], 60, "a session folder", proc)
        _wait_for(lambda: _running_rows(folder) >= 20, 60, "rows recorded while running", proc)
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(10)
        out.close()
        err.close()
    stderr = err_path.read_text(encoding="utf-8")
    assert code == 0, stderr[-2000:]
    assert "SIGTERM received" in stderr
    for bad in ("leaked shared_memory", "resource_tracker", "Traceback"):
        assert bad not in stderr, stderr[-2000:]
    meta = session_meta(folder)
    assert meta["outcome"] not in (None, "running")
    assert (meta.get("trip") or {}).get("cause") != "front-end-lost"     # the app stopped it, not a timeout
    with open(folder / "samples.csv", newline="", encoding="utf-8") as fh:
        last = list(csv.DictReader(fh))[-1]
    assert float(last["u_cmd"]) == 0.0        # the ramped stop reached the safe duty


def test_demo_falls_back_to_headless_where_qt_cannot_open_a_window(tmp_path):
    """`DISPLAY=:93 make demo` with no X server on :93: the demo says why and runs headless."""
    env = {k: v for k, v in os.environ.items() if k not in ("QT_QPA_PLATFORM", "WAYLAND_DISPLAY")}
    env["DISPLAY"] = ":93"
    done = subprocess.run([sys.executable, "-m", "rigloop", "demo", "--duration", "1",
                           "--set", f"recording.dir={tmp_path / 'sessions'}",
                           "--set", "device.sim.clock=lockstep"],
                          env=env, capture_output=True, text=True, timeout=180, cwd=tmp_path)
    assert done.returncode == 0, done.stderr[-2000:]
    assert "Qt cannot open a window here" in done.stderr
    assert "libxcb-cursor0" in done.stderr and "QT_DEBUG_PLUGINS=1" in done.stderr
    assert "running the same session headless" in done.stdout
    assert "outcome: completed" in done.stdout
    assert "Traceback" not in done.stderr


def test_bad_config_is_reported_without_a_window(tmp_path):
    done = subprocess.run([sys.executable, "-m", "rigloop", "gui", str(DEMO_FAN), "--set", "control.kp=-3",
                           "--screenshot", str(tmp_path / "x.png")], env=_env(), capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 2
    assert "control.kp" in done.stderr and "Traceback" not in done.stderr
    assert not (tmp_path / "x.png").exists()
