"""The engine as a real process: Ctrl-C and SIGTERM are e-stops with a clean recording; a killed
engine leaves the rig to the device's watchdog and a readable partial recording."""

from __future__ import annotations

import csv
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
import yaml

from engine_helpers import DEMO_FAN

pytestmark = pytest.mark.slow

ENV = {**os.environ, "PYTHONUNBUFFERED": "1"}


def wait_until(predicate, timeout: float, what: str):
    """Poll a condition (files written by other processes); fail with ``what`` on timeout."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(0.05)
    raise AssertionError(f"timed out after {timeout} s waiting for {what}")


def rows_in(path: Path) -> int:
    try:
        with open(path, encoding="utf-8") as fh:
            return sum(1 for _ in fh) - 1
    except FileNotFoundError:
        return 0


def session_folder(out: Path) -> Path | None:
    folders = [p for p in out.glob("*") if p.is_dir()] if out.exists() else []
    return folders[0] if folders else None


def start_run(out: Path, *extra: str) -> subprocess.Popen:
    cmd = [sys.executable, "-m", "rigloop", "run", str(DEMO_FAN), "--record-dir", str(out), "--quiet",
           "--duration", "120", "--set", "device.sim.clock=realtime", "--set", "device.rate_hz=100", *extra]
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV)


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["ctrl-c", "sigterm"])
def test_signal_is_an_estop_with_clean_recording(tmp_path, signum):
    out = tmp_path / "sessions"
    proc = start_run(out)
    try:
        folder = wait_until(lambda: session_folder(out), 30, "the session folder")
        wait_until(lambda: rows_in(folder / "samples.csv") > 150, 30, "recorded rows")
        proc.send_signal(signum)
        stdout, stderr = proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 130, stderr
    assert "outcome: stopped" in stdout
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "stopped" and meta["ended_utc"]
    assert meta["trip"]["cause"] == "e-stop"
    df = pd.read_csv(folder / "samples.csv")
    assert len(df) == meta["summary"]["samples"]                    # complete: nothing lost
    after = df[df.t > meta["trip"]["t"] + 1e-9]
    assert len(after) and (after.u_cmd == 0.0).all()                 # immediate safe output
    events = pd.read_csv(folder / "events.csv")
    assert {"estop", "trip", "ended"} <= set(events.kind)


def test_killed_engine_leaves_the_rig_to_the_device_watchdog(tmp_path):
    rx_log, trace = tmp_path / "rx.jsonl", tmp_path / "trace.csv"
    sim = subprocess.Popen([sys.executable, "-m", "rigloop", "sim", "--udp", "127.0.0.1:0", "--plant", "fan",
                            "--clock", "realtime", "--rate", "100", "--rx-log", str(rx_log), "--trace", str(trace),
                            "--quit-after", "120"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV)
    out = tmp_path / "sessions"
    engine = None
    try:
        line = sim.stdout.readline()
        assert line.startswith("rigloop-sim listening udp://"), line + sim.stderr.read()
        port = int(line.strip().rsplit(":", 1)[1])
        engine = start_run(out, "--set", "device.link=udp", "--set", f"device.udp.port={port}",
                           "--set", "device.watchdog_ms=100")
        folder = wait_until(lambda: session_folder(out), 30, "the session folder")
        wait_until(lambda: rows_in(folder / "samples.csv") > 100, 30, "recorded rows")
        engine.send_signal(signal.SIGKILL)
        engine.wait(30)

        def watchdog_row():
            with open(trace, encoding="utf-8") as fh:
                for row in csv.DictReader(fh):
                    if int(row["status"]) & 4:      # WATCHDOG bit (docs/protocol.md §4.3)
                        return row
            return None

        row = wait_until(watchdog_row, 30, "the device watchdog in the sim's trace")
        # A new session on the same device: its latched WATCHDOG must not trip the fresh run
        # (samples already in flight when ARM goes out still carry the old latch).
        again = subprocess.run([sys.executable, "-m", "rigloop", "run", str(DEMO_FAN), "--record-dir", str(tmp_path / "again"),
                                "--quiet", "--duration", "1", "--set", "device.rate_hz=100", "--set", "device.link=udp",
                                "--set", f"device.udp.port={port}", "--set", "device.watchdog_ms=100"],
                               capture_output=True, text=True, env=ENV, timeout=60)
        assert again.returncode == 0, again.stdout + again.stderr
    finally:
        if engine is not None and engine.poll() is None:
            engine.kill()
        sim.send_signal(signal.SIGTERM)
        sim.communicate(timeout=30)
    records = [json.loads(x) for x in rx_log.read_text().splitlines() if x.strip()]
    last_cmd_us = max(r["t_us"] for r in records if r["type"] == "COMMAND" and r["result"] == "accepted"
                      and r["t_us"] <= int(row["t_us"]))          # the killed engine's last command
    period_us, watchdog_us = 10_000, 100_000
    assert float(row["applied"]) == 0.0                                        # safe output
    assert watchdog_us < int(row["t_us"]) - last_cmd_us <= watchdog_us + period_us   # within watchdog + 1 period
    # the partial recording is readable and says the session never ended cleanly
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "running" and meta["ended_utc"] is None
    df = pd.read_csv(folder / "samples.csv", on_bad_lines="skip")
    assert len(df) > 100 and "speed_rpm" in df.columns
