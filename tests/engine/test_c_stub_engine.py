"""The engine against the C firmware stub built for the host (firmware_stub/ports/host): the
same protocol, a different implementation of the device side. Over UDP and over a real
pseudo-terminal (the serial path: COBS framing through pyserial)."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
import yaml

from engine_helpers import REPO, Session

pytestmark = [pytest.mark.slow, pytest.mark.firmware]

STUB = REPO / "firmware_stub" / "build" / "rl_host_device"


@pytest.fixture(scope="module")
def stub_binary():
    if shutil.which("make") is None or shutil.which("cc") is None and shutil.which("gcc") is None:
        pytest.skip("make and a C compiler are needed to build the host port of the firmware stub")
    subprocess.run(["make", "-C", str(REPO / "firmware_stub"), "host"], check=True, capture_output=True)
    return STUB


def start_stub(binary: Path, *args: str):
    proc = subprocess.Popen([str(binary), *args, "--gain", "1", "--tau", "0.2", "--quit-after", "120"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    line = proc.stdout.readline().strip()           # "UDP 127.0.0.1:PORT" or "PTY /dev/pts/N"
    assert line.startswith(("UDP ", "PTY ")), line + proc.stderr.read()
    return proc, line.split(" ", 1)[1]


def stub_config(tmp_path: Path, device: dict, limit_max: float = 120.0) -> Path:
    # The stub's plant: y' = (-y + gain*u)/tau, so alpha = gain/tau = 5 (units/s per unit of u)
    # and F = -y/tau: the iP must estimate and cancel that term.
    cfg = {
        "rig": "c-stub",
        "device": {**device, "rate_hz": 100, "watchdog_ms": 100},
        "channels": [{"name": "level", "unit": "V"}, {"name": "u_echo", "unit": "%"}, {"name": "ramp", "unit": "-"}],
        "actuator": {"name": "drive", "unit": "%", "min": 0, "max": 100, "safe": 0, "slew_per_s": 500},
        "control": {"output": "level", "law": "iP", "alpha": 5.0, "kp": 8.0,
                    "estimator": {"kind": "algebraic", "window_s": 0.05}},
        "reference": {"kind": "levels", "initial": 20.0, "blend_s": 0.5,
                      "steps": [{"at": 1.5, "to": 50.0}, {"at": 3.0, "to": 35.0}]},
        "limits": {"level": {"min": -5, "max": limit_max}, "stale_periods": 20},
        "recording": {"dir": str(tmp_path / "sessions")},
        "duration_s": 4.5,
    }
    path = tmp_path / "stub.yaml"
    path.write_text(yaml.safe_dump(cfg, sort_keys=False))
    return path


def _run(cfg_path: Path, *sets: str) -> tuple[int, Session]:
    from rigloop.cli import main

    code = main(["run", str(cfg_path), "--quiet", *[x for s in sets for x in ("--set", s)]])
    folder = next((cfg_path.parent / "sessions").iterdir())
    return code, Session(folder)


@pytest.mark.parametrize("transport", ["udp", "pty"])
def test_engine_closes_the_loop_through_the_c_stub(tmp_path, stub_binary, transport):
    if transport == "udp":
        proc, addr = start_stub(stub_binary, "--udp", "127.0.0.1:0")
        host, port = addr.rsplit(":", 1)
        block = {"link": "udp", "udp": {"host": host, "port": int(port)}}
    else:
        proc, path = start_stub(stub_binary, "--pty")
        block = {"link": "serial", "serial": {"port": path, "baud": 115200}}
    try:
        code, s = _run(stub_config(tmp_path, block))
    finally:
        proc.terminate()
        proc.communicate(timeout=10)
    assert code == 0, s.meta
    run = s.samples[s.samples.state == "running"]
    assert s.meta["device"]["hello"]["name"] == "host-stub"
    # the stub reports as applied exactly the clamped command of the previous sample
    assert np.allclose(run.u.to_numpy()[1:], run.u_cmd.to_numpy()[:-1], atol=1e-4)
    assert np.allclose(run.u_echo, run.u, atol=1e-4)
    # tracking: after each blend the iP holds the level (the stub has no noise)
    t = run.t - run.t.iloc[0]
    settled = run[(t > 2.6) & (t < 3.0)]
    assert np.abs(settled.e).max() < 0.5
    assert s.meta["summary"]["rejected_frames"]["total_rejected"] == 0


def test_limit_trip_stops_the_c_stub(tmp_path, stub_binary):
    proc, addr = start_stub(stub_binary, "--udp", "127.0.0.1:0")
    host, port = addr.rsplit(":", 1)
    try:
        code, s = _run(stub_config(tmp_path, {"link": "udp", "udp": {"host": host, "port": int(port)}}, limit_max=40))
    finally:
        proc.terminate()
        proc.communicate(timeout=10)
    assert code == 3 and s.trip["cause"] == "limit"
    i = int(s.samples.index[s.samples.state == "tripped"][0])
    assert s.samples.level[i] > 40 and (s.samples.level[:i] <= 40).all()
    assert (s.samples.u[i + 1:] == 0).all()                     # the stub went safe at once
    assert (s.samples.status[i + 1:] & 2).all()                 # and latched STOP (docs/protocol.md §4.3)


# --- protocol 1.1: binding and authenticated frames against the C host port --------------------

FOREIGN_SENDER = r"""
import socket, struct, sys, binascii, time
port = int(sys.argv[1])
s = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
def frame(payload):
    return payload + struct.pack("<H", binascii.crc_hqx(payload, 0xFFFF))
seq = 1
print("sending", flush=True)
while True:
    s.sendto(frame(bytes([1, 0x11])), ("127.0.0.1", port))                                  # ARM
    s.sendto(frame(struct.pack("<BBIIf", 1, 0x13, seq, 0, 100.0)), ("127.0.0.1", port))     # COMMAND 100 %
    s.sendto(frame(struct.pack("<BBIIfff", 1, 0x12, 10000, 100000, 100.0, 100.0, 100.0)), ("127.0.0.1", port))
    seq += 1
    time.sleep(0.001)    # a pace, not a synchronisation
"""


def _stub_summary(proc) -> dict:
    proc.terminate()
    _, err = proc.communicate(timeout=10)
    line = next(ln for ln in err.splitlines() if "stopped;" in ln)
    return {k: int(v) for k, v in __import__("re").findall(r"(foreign|binds|releases) (\d+)", line)}


def test_a_foreign_process_cannot_drive_the_c_stub(tmp_path, stub_binary):
    """The host configures first (it holds the rig), then a foreign local process floods the
    stub's port with ARM, COMMAND 100 % and CONFIGURE for the rest of the run."""
    import os
    import sys as _sys
    import time

    proc, addr = start_stub(stub_binary, "--udp", "127.0.0.1:0")
    host, port = addr.rsplit(":", 1)
    cfg = stub_config(tmp_path, {"link": "udp", "udp": {"host": host, "port": int(port)}})
    env = {**os.environ, "PYTHONPATH": str(REPO / "src")}
    # wide timing margins: the claim is about commands, and a shared machine may starve the stub
    run = subprocess.Popen([_sys.executable, "-m", "rigloop", "run", str(cfg), "--quiet", "--set",
                            "limits.stale_periods=200", "--set", "device.watchdog_ms=2000"],
                           stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    sender = None
    try:
        deadline = time.monotonic() + 60
        sessions = tmp_path / "sessions"
        while not (sessions.exists() and any(sessions.glob("*/samples.csv"))
                   and next(sessions.glob("*/samples.csv")).stat().st_size > 2000):
            assert time.monotonic() < deadline and run.poll() is None, "the run did not start"
            time.sleep(0.05)
        sender = subprocess.Popen([_sys.executable, "-c", FOREIGN_SENDER, port], stdout=subprocess.PIPE, text=True)
        assert sender.stdout.readline().strip() == "sending"
        out, err = run.communicate(timeout=240)
    finally:
        if sender is not None:
            sender.kill()
            sender.wait()
            sender.stdout.close()
        if run.poll() is None:
            run.kill()
        counts = _stub_summary(proc)
    assert run.returncode == 0, out + err
    assert counts["foreign"] > 100 and counts["binds"] == 1
    s = Session(next((tmp_path / "sessions").iterdir()))
    assert (s.samples.u <= s.samples.u_cmd.max() + 1e-4).all()      # applied never exceeds the host's command
    running = s.samples[s.samples.state == "running"]
    u, u_cmd = running.u.to_numpy(), running.u_cmd.to_numpy()
    # every applied value is one of the host's last few commands (one period of latency normally,
    # more when a busy machine delays a COMMAND), never a value of the foreign sender's
    lags = np.array([np.abs(u[3:] - u_cmd[3 - k:len(u_cmd) - k]) for k in (1, 2, 3)])
    assert (lags.min(axis=0) <= 1e-4).all()


def _key_files(tmp_path):
    out = []
    for name, key in (("rig.key", bytes(range(32))), ("other.key", bytes(range(5, 37)))):
        path = tmp_path / name
        path.write_text(key.hex() + "\n")
        path.chmod(0o600)
        out.append(path)
    return out


@pytest.mark.parametrize("transport", ["udp", "pty"])
def test_keyed_c_stub_runs_with_the_key_and_refuses_a_missing_or_wrong_one(tmp_path, stub_binary, transport):
    key, other = _key_files(tmp_path)
    if transport == "udp":
        proc, addr = start_stub(stub_binary, "--udp", "127.0.0.1:0", "--key-file", str(key))
        host, port = addr.rsplit(":", 1)
        block = {"link": "udp", "udp": {"host": host, "port": int(port)}}
    else:   # a serial line: one peer, and the stub's start-up HELLO went out before its key was set
        proc, path = start_stub(stub_binary, "--pty", "--key-file", str(key))
        block = {"link": "serial", "serial": {"port": path, "baud": 115200}}
    cfg = stub_config(tmp_path, block)
    from rigloop.cli import main

    try:
        code, s = _run(cfg, f"device.auth.key_file={key}", "limits.stale_periods=200", "device.watchdog_ms=2000")
        missing = main(["run", str(cfg), "--quiet", "--duration", "1"])
        wrong = main(["run", str(cfg), "--quiet", "--duration", "1", "--set", f"device.auth.key_file={other}"])
    finally:
        _stub_summary(proc)
    assert code == 0, s.meta
    assert s.meta["summary"]["authenticated"] is True
    assert missing == 1 and wrong == 1
    folders = sorted((tmp_path / "sessions").iterdir())
    reasons = [yaml.safe_load((f / "session.yaml").read_text())["stop_reason"] for f in folders[1:]]
    assert "requires authenticated frames" in reasons[0]
    assert "does not match this host's key" in reasons[1]


def test_c_stub_refuses_a_key_file_others_can_read(tmp_path, stub_binary):
    key, _ = _key_files(tmp_path)
    key.chmod(0o644)
    res = subprocess.run([str(stub_binary), "--udp", "127.0.0.1:0", "--key-file", str(key)],
                         capture_output=True, text=True, timeout=30)
    assert res.returncode == 2 and f"chmod 600 {key}" in res.stderr
