"""Processor in the loop: rigloop sessions against the STM32F4 firmware running on an emulated
microcontroller (QEMU netduinoplus2), over its real USART interrupt path on a pseudo-terminal.

What this proves and what it does not: docs/bring-up.md, "What processor-in-the-loop proves".
Waits are conditions with generous timeouts; the only fixed durations are stimuli (how long the
host stays frozen, how garbage is spread), never synchronisation.
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from conftest import REPO, WATCHDOG_MS, pil_config
from pil_session import Session

from rigloop.engine.handshake import handshake
from rigloop.link.serial_link import SerialLink
from rigloop.protocol.messages import Hello, Query, Status

pytestmark = [pytest.mark.pil, pytest.mark.slow]

ARMED = int(Status.ARMED)
STOP_LATCHED = int(Status.STOP_LATCHED)
WATCHDOG = int(Status.WATCHDOG)
RX_ERROR = int(Status.RX_ERROR)
FAN_GAIN_RPM_PER_PCT = 30.0  # the on-chip plant (ports/stm32f4/rig_io_plant.c)
RUN_TIMEOUT_S = 120.0


def _run_in_process(cfg: Path, *extra: str) -> int:
    from rigloop.cli import main

    return main(["run", str(cfg), "--quiet", *extra])


def _start_engine_process(cfg: Path) -> subprocess.Popen:
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    return subprocess.Popen([sys.executable, "-m", "rigloop", "run", str(cfg), "--quiet"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=REPO)


def _wait_running_rows(folder: Path, rows: int, proc: subprocess.Popen, timeout_s: float = 60.0) -> None:
    """Wait until the session being recorded has `rows` rows in state running."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        assert proc.poll() is None, f"the engine ended early: {proc.communicate()}"
        for csv in folder.glob("*/samples.csv"):
            text = csv.read_text()
            if text.count(",running,") >= rows:
                return
        time.sleep(0.05)  # polling a file for a condition, not a timing assumption
    pytest.fail(f"no {rows} running rows in {folder} within {timeout_s:.0f} s")


def _settled(run, t0: float, t1: float):
    t = run.t - run.t.iloc[0]
    return run[(t >= t0) & (t < t1)]


def test_handshake_hello_and_configure(board, tmp_path):
    from rigloop.config import load_config

    # 250 Hz, not the firmware's default 200 Hz: only the CONFIGURE can produce this HELLO.
    cfg = load_config(pil_config(tmp_path, board.pty, device__rate_hz=250))
    link = SerialLink(board.pty, 460800)
    try:
        acked = handshake(link, cfg)
    finally:
        link.close()
    assert acked.name == "f4-pil-fan"
    assert (acked.proto_min, acked.proto_max, acked.n_channels) == (1, 1, 2)
    assert (acked.period_us, acked.watchdog_us) == (4000, WATCHDOG_MS * 1000)
    assert (acked.safe, acked.u_min, acked.u_max) == (0.0, 0.0, 100.0)
    assert acked.status & int(Status.CONFIGURED) and not acked.status & ARMED


def test_closed_loop_10s_at_200hz_tracks(board, tmp_path):
    code = _run_in_process(pil_config(tmp_path, board.pty, "loop"))
    s = Session.only_in(tmp_path / "loop")
    assert code == 0, s.meta.get("trip")
    assert s.meta["outcome"] == "completed"
    run = s.samples[s.samples.state == "running"]
    # Device time: 10 s of sampling on the device's 200 Hz clock - sample to sample one period
    # as a rule (whole periods: a tick runs late by less than one, or is skipped).
    dt = np.diff(run.t.to_numpy())
    assert np.median(np.rint(dt / 0.005)) == 1
    assert run.t.iloc[-1] - run.t.iloc[0] > 9.0
    # The device applies only what the host commanded (as float32), and changes its output only
    # when a COMMAND arrives (zero-order hold) - whatever the emulator's delays.
    sent = np.sort(s.samples.u_cmd.to_numpy())
    applied = run.u.to_numpy()
    nearest = np.clip(np.searchsorted(sent, applied), 1, len(sent) - 1)
    gap = np.minimum(np.abs(sent[nearest] - applied), np.abs(sent[nearest - 1] - applied))
    assert (gap < 1e-4 * np.maximum(1.0, np.abs(applied))).all()
    # Tracking, on each level once settled (blend 1 s + 4 closed-loop time constants).
    for t0, t1, level in ((2.3, 3.5, 600.0), (5.8, 7.0, 1500.0), (9.3, 9.9, 1000.0)):
        part = _settled(run, t0, t1)
        assert len(part) > 50
        assert np.abs(part.e).max() < 0.03 * level, (level, part.e.abs().max())
        # First-order lag tau*y' = -y + K*u at rest: y = K*u (closed form), so the duty that
        # holds the level is level / K - a check of the on-chip plant, not of the law.
        assert part.u.mean() == pytest.approx(level / FAN_GAIN_RPM_PER_PCT, rel=0.03)
    assert s.meta["summary"]["rejected_frames"]["total_rejected"] == 0


def test_limit_trip_latches_stop_on_the_device(board, tmp_path):
    cfg = pil_config(tmp_path, board.pty, "limit", limits__speed_rpm={"min": -100.0, "max": 1200.0})
    code = _run_in_process(cfg)
    s = Session.only_in(tmp_path / "limit")
    assert code == 3 and s.trip["cause"] == "limit", s.trip
    rows = s.samples
    i = int(rows.index[rows.state == "tripped"][0])
    assert rows.speed_rpm[i] > 1200.0 and (rows.speed_rpm[:i] <= 1200.0).all()
    after = rows.iloc[i + 1:]
    assert len(after) > 5
    # From the first sample after the STOP: the device holds the safe output and says it latched.
    latched = after[(after.status & STOP_LATCHED) != 0]
    assert len(latched) > 0
    first = latched.index[0]
    assert (rows.u[first:] == 0.0).all()
    assert ((rows.status[first:] & STOP_LATCHED) != 0).all()
    assert ((rows.status[first:] & ARMED) == 0).all()
    # Still latched on the device after the session: its HELLO says so.
    link = SerialLink(board.pty, 460800)
    try:
        link.send(Query())
        hello = _wait_for(link, lambda m: isinstance(m, Hello))
    finally:
        link.close()
    assert hello.status & STOP_LATCHED and not hello.status & ARMED


def _wait_for(link, predicate, timeout_s: float = 30.0):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        for m in link.recv(0.2):
            if predicate(m):
                return m
    pytest.fail(f"no matching message within {timeout_s:.0f} s")


def test_rearm_after_stop(board, tmp_path):
    tripped = pil_config(tmp_path, board.pty, "first", limits__speed_rpm={"min": -100.0, "max": 800.0},
                         reference__steps=[{"at": 1.5, "to": 1500.0}], duration_s=4.0)
    assert _run_in_process(tripped) == 3
    assert Session.only_in(tmp_path / "first").trip["cause"] == "limit"
    again = pil_config(tmp_path, board.pty, "again", reference__steps=[], duration_s=3.0)
    code = _run_in_process(again)
    s = Session.only_in(tmp_path / "again")
    assert code == 0, s.trip
    run = s.samples[s.samples.state == "running"]
    # ARM cleared the latch, and commands drive the fan again.
    assert ((run.status & STOP_LATCHED) == 0).iloc[5:].all()
    assert (run.status.iloc[5:] & ARMED).all()
    assert np.abs(_settled(run, 2.3, 2.9).e).max() < 0.03 * 600.0


def test_frozen_host_trips_the_device_watchdog(board, tmp_path):
    cfg = pil_config(tmp_path, board.pty, "frozen", duration_s=20.0)
    proc = _start_engine_process(cfg)
    try:
        _wait_running_rows(tmp_path / "frozen", 300, proc)
        os.kill(proc.pid, signal.SIGSTOP)
        time.sleep(3 * WATCHDOG_MS / 1000)  # the stimulus: the host stays frozen for 3 watchdog periods
        os.kill(proc.pid, signal.SIGCONT)
        out, err = proc.communicate(timeout=RUN_TIMEOUT_S)
    finally:
        if proc.poll() is None:
            os.kill(proc.pid, signal.SIGCONT)
            proc.kill()
            proc.communicate()
    s = Session.only_in(tmp_path / "frozen")
    assert proc.returncode == 3, (out, err, s.trip)
    assert s.meta["outcome"] == "tripped"
    rows = s.samples
    # The device noticed the silence on its own: WATCHDOG status, safe output from then on.
    hit = rows[(rows.status & WATCHDOG) != 0]
    assert len(hit) > 0, s.trip
    first = hit.index[0]
    assert (rows.u[first:] == 0.0).all()
    # ... watchdog_ms after the last sample the host answered before it froze (the device's
    # silence counts from that COMMAND's arrival), plus at most one period and the link latency
    # on a chip; under the emulator a tick can also come late while QEMU is descheduled (0.1 s
    # allowed for that).
    # (answered alone, late == 0: after the freeze the engine answers only the newest of each
    # backlog batch, and marks it late)
    answered = rows[(rows.index < first) & rows.latency_ms.notna() & (rows.late == 0)]
    gap = rows.t[first] - answered.t.iloc[-1]
    watchdog_s = WATCHDOG_MS / 1000
    assert watchdog_s <= gap <= watchdog_s + 0.005 + 0.1, gap
    # The engine learns it from the device's FAULT (code 1) queued while it was frozen (or, if
    # its own clock check runs first on waking, from the silence: either way the FAULT is logged).
    assert s.trip["cause"] in ("device-watchdog", "stale-data"), s.trip
    faults = s.events[s.events.kind == "device_fault"]
    assert faults.detail.str.contains("watchdog").any()


def test_garbage_on_the_uart_is_rejected_and_the_loop_holds(board, tmp_path):
    cfg = pil_config(tmp_path, board.pty, "garbage")
    proc = _start_engine_process(cfg)
    rng = random.Random(12)
    try:
        _wait_running_rows(tmp_path / "garbage", 200, proc)
        fd = os.open(board.pty, os.O_WRONLY | os.O_NOCTTY)
        try:
            for _ in range(25):
                os.write(fd, bytes(rng.randrange(256) for _ in range(40)))
                time.sleep(0.2)  # spread the stimulus over 5 s of the run
        finally:
            os.close(fd)
        out, err = proc.communicate(timeout=RUN_TIMEOUT_S)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    s = Session.only_in(tmp_path / "garbage")
    assert proc.returncode == 0, (out, err, s.trip)
    run = s.samples[s.samples.state == "running"]
    # The device rejected frames (its RX_ERROR status bit), and nothing tripped.
    assert ((run.status & RX_ERROR) != 0).sum() >= 5
    assert ((run.status & (WATCHDOG | STOP_LATCHED)) == 0).all()
    assert np.abs(_settled(run, 9.3, 9.9).e).max() < 0.03 * 1000.0


def test_open_loop_bump_test_recovers_the_on_chip_fan(board, tmp_path, capsys):
    """The bring-up guide's open-loop check (docs/bring-up.md, section 5) against the emulated
    board: `rigloop identify` steps the duty around 30 % and fits a first-order model."""
    import json

    from rigloop.cli import main

    code = main(["identify", str(pil_config(tmp_path, board.pty, "bump")), "--operating-level", "30", "--step", "10",
                 "--json", "--quiet"])
    assert code == 0
    est = json.loads(capsys.readouterr().out)["estimates"]
    # The on-chip fan is tau * w' = -w + K * u with K = 30 rpm/% and tau = 0.5 s
    # (ports/stm32f4/rig_io_plant.c); for a first-order lag the step response is
    # K * du * (1 - exp(-t / tau)) (closed form), so the fit must find K and tau, and the initial
    # slope per unit input alpha = K / tau = 60 rpm/s per %.
    assert est["order"] == 1
    assert est["gain"] == pytest.approx(FAN_GAIN_RPM_PER_PCT, rel=0.05)
    assert est["tau"] == pytest.approx(0.5, rel=0.10)
    assert est["alpha_fopdt"] == pytest.approx(FAN_GAIN_RPM_PER_PCT / 0.5, rel=0.10)
