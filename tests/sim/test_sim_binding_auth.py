"""The simulated device obeys only its host (protocol 1.1 §6.7) and, with a key, only tagged
frames of the present session (§14): unit tests on SimDevice with a hand-stepped clock, and runs
of ``rigloop run`` against ``rigloop sim --udp`` with a foreign local process on the same port."""

from __future__ import annotations

import os
import socket
import struct
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
import yaml
from hypothesis import given, settings
from hypothesis import strategies as st

from rigloop.plants import make_plant
from rigloop.protocol import Arm, Command, Configure, Hello, ProtocolError, Query, Sample, Status, Stop, decode_frame
from rigloop.protocol.auth import HostAuth
from rigloop.protocol.framing import encode_frame
from rigloop.sim.device import RELEASE_US, SimDevice

REPO = Path(__file__).resolve().parents[2]
DEMO_FAN = REPO / "configs" / "demo_fan.yaml"
ENV = {**os.environ, "PYTHONPATH": str(REPO / "src")}
P, WD = 10_000, 30_000
KEY = bytes(range(32))
OTHER_KEY = bytes(range(1, 33))


def _device(key=None) -> SimDevice:
    dev = SimDevice(make_plant("fan"), period_us=P, key=key)
    dev.start(0)
    return dev


class Wire:
    """A host end and a device end joined by encode/decode, so tagged frames really travel."""

    def __init__(self, dev: SimDevice, key=None):
        self.dev = dev
        self.host = HostAuth(key)
        self.sent: list[bytes] = []          # every host frame, for replay tests

    def send(self, msg, now_us: int = 0) -> list:
        frame = encode_frame(msg, auth=self.host)
        self.sent.append(frame)
        return self.receive(self.dev.feed_datagram(frame, now_us))

    def receive(self, msgs) -> list:
        out = []
        for m in msgs:
            frame = self.dev.encode(m)
            if frame is not None:
                try:
                    out.append(decode_frame(frame, self.host))
                except ProtocolError:
                    pass                 # the host drops it (counted by a real link)
        return out

    def connect(self) -> Hello:
        (hello,) = self.send(Query(self.host.host_nonce))
        (ack,) = self.send(Configure(P, WD, 0.0, 0.0, 100.0))
        assert isinstance(ack, Hello) and ack.status & Status.CONFIGURED
        return hello


# --- binding ---------------------------------------------------------------------------------


def test_configure_binds_and_release_needs_disarm_and_silence():
    dev = _device()
    assert not dev.is_bound(0)
    dev.handle(Configure(P, WD, 0.0, 0.0, 100.0), 0)
    assert dev.is_bound(0) and dev.bind_count == 1
    dev.handle(Arm(), 0)
    assert dev.is_bound(5 * RELEASE_US)                  # armed: held whatever the silence
    dev.tick(5 * RELEASE_US)                             # the watchdog disarms the device: the host has
    assert not dev.armed                                 # been silent for longer than the release time,
    assert not dev.is_bound(5 * RELEASE_US) and dev.releases == 1    # so it is free at once


def test_after_stop_the_host_keeps_the_device_for_the_release_time():
    dev = _device()
    dev.feed_datagram(encode_frame(Configure(P, WD, 0.0, 0.0, 100.0)), 0)
    dev.feed_datagram(encode_frame(Arm()), 0)
    dev.feed_datagram(encode_frame(Stop(0)), 3 * RELEASE_US)
    assert dev.is_bound(4 * RELEASE_US)
    assert not dev.is_bound(4 * RELEASE_US + 1)


def test_a_frame_from_the_host_keeps_the_binding():
    dev = _device()
    dev.feed_datagram(encode_frame(Configure(P, WD, 0.0, 0.0, 100.0)), 0)
    dev.feed_datagram(encode_frame(Command(1, 0, 0.0)), RELEASE_US)      # disarmed, but the host speaks
    assert dev.is_bound(2 * RELEASE_US)
    assert not dev.is_bound(2 * RELEASE_US + 1)


class _Sock:
    """The transport's view of a datagram source, for UdpTransport.receive without sockets."""


def test_udp_transport_drops_foreign_datagrams_while_bound():
    from rigloop.sim.server import UdpTransport

    transport = UdpTransport("127.0.0.1", 0)
    dev = _device()
    host = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    foreign = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    host.bind(("127.0.0.1", 0))
    foreign.bind(("127.0.0.1", 0))
    try:
        def deliver(sock, msg, now):
            sock.sendto(encode_frame(msg), ("127.0.0.1", transport.port))
            deadline = time.monotonic() + 10
            before = dev.rejects.accepted + dev.foreign + dev.rejects.total_rejected
            out = []
            while dev.rejects.accepted + dev.foreign + dev.rejects.total_rejected == before:
                assert time.monotonic() < deadline, "datagram never arrived"
                out += transport.receive(dev, now)
            return out

        deliver(host, Configure(P, WD, 0.0, 0.0, 100.0), 0)
        deliver(host, Arm(), 0)
        assert transport.bound_to == host.getsockname() and transport.peer == host.getsockname()
        deliver(foreign, Command(7, 0, 100.0), 1)          # a foreign COMMAND 100 %
        deliver(foreign, Stop(0), 2)
        deliver(foreign, Configure(P, WD, 100.0, 100.0, 100.0), 3)
        assert dev.foreign == 3 and dev.armed and dev._pending is None
        assert transport.peer == host.getsockname()        # the reply address never moved
        deliver(host, Command(1, 0, 20.0), 4)
        assert dev.tick(P)[-1].applied == 20.0
    finally:
        host.close()
        foreign.close()
        transport.close()


# --- authentication ---------------------------------------------------------------------------


def test_keyed_session_runs_and_every_frame_is_tagged():
    dev = _device(KEY)
    wire = Wire(dev, KEY)
    hello = wire.connect()
    assert hello.auth == 1 and hello.extended and hello.nonce == dev.auth.device_nonce
    assert all(f[1] & 0x80 for f in wire.sent[1:]) and not wire.sent[0][1] & 0x80   # QUERY is plain
    wire.send(Arm())
    wire.send(Command(1, 0, 42.0))
    (sample,) = [m for m in wire.receive(dev.tick(P)) if isinstance(m, Sample)]
    assert sample.applied == 42.0 and sample.status & Status.ARMED


def test_unkeyed_or_wrongly_keyed_host_cannot_drive_a_keyed_device():
    dev = _device(KEY)
    for key in (None, OTHER_KEY):
        wire = Wire(dev, key)
        assert wire.send(Query(wire.host.host_nonce)) == []      # the HELLO does not open
        if key is None:
            assert wire.host.keyed_hello_seen          # the host can say: the device wants a key
        else:
            assert wire.host.bad_hello is not None     # the host can say: wrong key
        for msg in (Configure(P, WD, 0.0, 0.0, 100.0), Arm(), Command(1, 0, 100.0)):
            dev.feed_datagram(encode_frame(msg, auth=wire.host), 0)
    assert not dev.configured and not dev.armed and dev.rejects.auth == 6


def test_replayed_frames_of_an_earlier_session_are_rejected():
    dev = _device(KEY)
    first = Wire(dev, KEY)
    first.connect()
    first.send(Arm())
    first.send(Command(1, 0, 80.0))
    dev.tick(P)
    first.send(Stop(0))
    captured = list(first.sent)
    # the host leaves; once released, a new session starts with new nonces
    assert not dev.is_bound(P + RELEASE_US + 1)
    second = Wire(dev, KEY)
    second.connect()
    rejected = dev.rejects.auth
    for frame in captured[1:]:                           # everything but the plain QUERY
        assert dev.feed_datagram(frame, 2 * RELEASE_US) == []
    assert dev.rejects.auth - rejected == len(captured) - 1
    assert not dev.armed and dev.tick(2 * RELEASE_US + P)[-1].applied == 0.0
    # within the session, a frame played twice is rejected too (frame counter)
    second.send(Arm())
    assert dev.feed_datagram(second.sent[-1], 2 * RELEASE_US) == [] and dev.rejects.auth - rejected == len(captured)


def test_replayed_samples_of_an_earlier_session_are_rejected_by_the_host():
    dev = _device(KEY)
    first = Wire(dev, KEY)
    first.connect()
    old = [dev.encode(m) for m in dev.tick(P)]
    assert not dev.is_bound(P + RELEASE_US + 1)
    second = Wire(dev, KEY)
    second.connect()
    from rigloop.protocol.framing import DatagramDecoder

    decoder = DatagramDecoder(auth=second.host)
    assert [decoder.decode(f) for f in old] == [None]
    assert decoder.counters.auth == 1


def test_a_keyed_device_refuses_a_new_session_while_bound():
    dev = _device(KEY)
    Wire(dev, KEY).connect()
    intruder = Wire(dev, KEY)                           # even with the key: the rig is taken
    assert intruder.send(Query(intruder.host.host_nonce)) == []
    assert dev.rejects.auth == 1


def test_refused_queries_do_not_keep_the_binding_alive():
    # over serial every frame reaches the device: a new host asking for a session while the device
    # is bound is refused, and its asking must not hold the binding for ever (only frames acted on count)
    dev = _device(KEY)
    wire = Wire(dev, KEY)
    wire.connect()
    wire.send(Stop(0), 0)
    intruder = Wire(dev, KEY)
    assert intruder.send(Query(intruder.host.host_nonce), RELEASE_US // 2) == []
    assert not dev.is_bound(RELEASE_US + 1)
    assert intruder.send(Query(intruder.host.host_nonce), RELEASE_US + 1) != []


# --- processes: rigloop run against rigloop sim --udp ----------------------------------------

FOREIGN_VALUE = 99.25      # a duty the host never commands in the demo; the foreign process sends it

FOREIGN_SENDER = r"""
import socket, struct, sys, binascii, time
port = int(sys.argv[1])
s = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
def frame(payload):
    return payload + struct.pack("<H", binascii.crc_hqx(payload, 0xFFFF))
arm = frame(bytes([1, 0x11]))
seq = 1
print("sending", flush=True)
while True:
    for value in (100.0, float(sys.argv[2])):
        s.sendto(arm, ("127.0.0.1", port))
        s.sendto(frame(struct.pack("<BBIIf", 1, 0x13, seq, 0, value)), ("127.0.0.1", port))
        seq += 1
    s.sendto(frame(struct.pack("<BBIIfff", 1, 0x12, 10000, 100000, 0.0, 0.0, 100.0)), ("127.0.0.1", port))
    time.sleep(0.001)    # a pace, not a synchronisation: leave the 2 cores some room for the rig
"""


def start_sim(*args: str, clock: str = "lockstep") -> tuple[subprocess.Popen, int]:
    """A simulated fan. Lockstep for one session; several sessions one after the other need the
    realtime clock, since the release time (§6.7) is device time, which lockstep stops."""
    timing = ["--clock", "lockstep", "--lockstep-wait-ms", "20"] if clock == "lockstep" else ["--clock", "realtime"]
    proc = subprocess.Popen([sys.executable, "-m", "rigloop", "sim", "--udp", "127.0.0.1:0", "--plant", "fan",
                             *timing, "--quit-after", "600", *args],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV)
    line = proc.stdout.readline()
    assert line.startswith("rigloop-sim listening udp://"), line + proc.stderr.read()
    return proc, int(line.strip().rsplit(":", 1)[1])


def stop_sim(proc: subprocess.Popen) -> dict:
    import json

    proc.terminate()
    _, err = proc.communicate(timeout=30)
    line = next(ln for ln in err.splitlines() if ln.startswith("rigloop-sim summary "))
    return json.loads(line.split(" ", 2)[2])


def run_cli(*args: str, timeout: float = 240) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "rigloop", "run", str(DEMO_FAN), "--quiet", *args],
                          capture_output=True, text=True, env=ENV, timeout=timeout)


def wait_for(predicate, timeout: float, what: str):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(0.05)
    raise AssertionError(f"timed out after {timeout} s waiting for {what}")


@pytest.mark.slow
def test_a_foreign_process_cannot_drive_the_simulated_device(tmp_path):
    sim, port = start_sim()
    out = tmp_path / "sessions"
    run = subprocess.Popen([sys.executable, "-m", "rigloop", "run", str(DEMO_FAN), "--quiet", "--out", str(out),
                            "--duration", "6", "--set", "device.link=udp", "--set", f"device.udp.port={port}",
                            # the host is realtime, the sim lockstep: a wide stale limit so that a
                            # loaded machine cannot end the run early (the claim is about commands)
                            "--set", "limits.stale_periods=200"],
                           stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV)
    sender = None
    try:
        samples = wait_for(lambda: next(out.glob("*/samples.csv"), None) if out.exists() else None, 60, "the session")
        wait_for(lambda: samples.stat().st_size > 2000, 60, "recorded rows")
        sender = subprocess.Popen([sys.executable, "-c", FOREIGN_SENDER, str(port), repr(FOREIGN_VALUE)],
                                  stdout=subprocess.PIPE, text=True)
        assert sender.stdout.readline().strip() == "sending"
        stdout, stderr = run.communicate(timeout=240)
    finally:
        if sender is not None:
            sender.kill()
            sender.wait()
        if run.poll() is None:
            run.kill()
    summary = stop_sim(sim)
    assert run.returncode == 0, stdout + stderr
    assert summary["foreign"] > 100                      # the foreign frames did arrive, and were dropped
    df = pd.read_csv(next(out.glob("*/samples.csv")))
    assert (df.u <= df.u_cmd.max() + 1e-4).all()         # applied never exceeds what the host commanded (f32)
    assert not (abs(df.u - FOREIGN_VALUE) < 1e-3).any()
    import numpy as np

    cmds = np.unique(np.append(df.u_cmd.to_numpy(), 0.0))       # the host's commands and the safe value
    nearest = np.abs(df.u.to_numpy()[:, None] - cmds[None, :]).min(axis=1)
    assert nearest.max() < 1e-3                                    # every applied value is one of them


@pytest.fixture
def keys(tmp_path):
    out = []
    for name, key in (("rig.key", KEY), ("other.key", OTHER_KEY)):
        path = tmp_path / name
        path.write_text(key.hex() + "\n", encoding="ascii")
        path.chmod(0o600)
        out.append(path)
    return out


@pytest.mark.slow
def test_keyed_demo_runs_and_a_missing_or_wrong_key_is_named(tmp_path, keys):
    key, other = keys
    sim, port = start_sim("--key-file", str(key), clock="realtime")
    base = ["--out", str(tmp_path / "sessions"), "--set", "device.link=udp", "--set", f"device.udp.port={port}",
            "--set", "device.sim.clock=realtime", "--set", "limits.stale_periods=200",
            "--set", "device.watchdog_ms=2000"]   # realtime on a shared, loaded machine: wide margins
    try:
        ok = run_cli(*base, "--duration", "2", "--set", f"device.auth.key_file={key}")
        missing = run_cli(*base, "--duration", "2")
        wrong = run_cli(*base, "--duration", "2", "--set", f"device.auth.key_file={other}")
    finally:
        summary = stop_sim(sim)
    assert ok.returncode == 0, ok.stdout + ok.stderr
    assert missing.returncode == 1 and "key missing" in missing.stderr and "requires authenticated frames" in missing.stderr
    assert "device.auth.key_file" in missing.stderr and "Traceback" not in missing.stderr
    assert wrong.returncode == 1 and "key wrong" in wrong.stderr
    assert "Traceback" not in wrong.stderr
    assert summary["binds"] >= 1 and summary["rejected"]["value"] == 0
    folders = sorted((tmp_path / "sessions").iterdir())
    meta = yaml.safe_load((folders[0] / "session.yaml").read_text())
    assert meta["summary"]["authenticated"] is True and meta["outcome"] == "completed"


@pytest.mark.slow
def test_a_keyed_host_refuses_an_unkeyed_device(tmp_path, keys):
    sim, port = start_sim()
    try:
        res = run_cli("--out", str(tmp_path / "s"), "--duration", "1", "--set", "device.link=udp",
                      "--set", f"device.udp.port={port}", "--set", f"device.auth.key_file={keys[0]}")
    finally:
        stop_sim(sim)
    assert res.returncode == 1 and "does not authenticate" in res.stderr and "Traceback" not in res.stderr


def test_sim_refuses_a_key_file_others_can_read(tmp_path, keys):
    keys[0].chmod(0o644)
    res = subprocess.run([sys.executable, "-m", "rigloop", "sim", "--udp", "127.0.0.1:0", "--key-file", str(keys[0])],
                         capture_output=True, text=True, env=ENV, timeout=60)
    assert res.returncode == 2 and f"chmod 600 {keys[0]}" in res.stderr and "Traceback" not in res.stderr


@pytest.mark.slow
def test_the_demo_runs_keyed_with_the_simulated_device_started_by_the_engine(tmp_path, keys):
    # link: sim — the engine starts `rigloop sim --key-file` with the config's key itself
    res = subprocess.run([sys.executable, "-m", "rigloop", "demo", "--headless", "--duration", "1",
                          "--set", f"device.auth.key_file={keys[0]}", "--set", "device.sim.clock=lockstep",
                          "--set", f"recording.dir={tmp_path / 's'}"],
                         capture_output=True, text=True, env=ENV, timeout=240)
    assert res.returncode == 0, res.stdout + res.stderr
    assert "authenticated" in res.stdout
    meta = yaml.safe_load((next((tmp_path / "s").iterdir()) / "session.yaml").read_text())
    assert meta["summary"]["authenticated"] is True and meta["summary"]["rejected_frames"]["auth"] == 0


def test_the_host_refuses_a_rate_outside_the_periods_the_hello_announces():
    from rigloop.config import load_config
    from rigloop.engine.handshake import EngineError, handshake
    from rigloop.protocol.auth import HostAuth

    cfg = load_config(DEMO_FAN, [])

    class FakeLink:                       # a 1.1 device that can only sample every 50..1000 us
        url = "fake://device"
        auth = HostAuth(None)

        def __init__(self):
            self.out = []

        def send(self, msg):
            if isinstance(msg, Query) and msg.nonce is not None:
                self.out.append(Hello(1, 1, 1, len(cfg.channels), 0, 1000, 10000, 0.0, 0.0, 100.0, "fast",
                                      50, 1000, 0, bytes(8)))

        def recv(self, timeout):
            out, self.out = self.out, []
            return out

    assert cfg.device.period_us > 1000
    with pytest.raises(EngineError, match="periods of 50..1000 us"):
        handshake(FakeLink(), cfg)


@settings(max_examples=40, deadline=None)
@given(st.lists(st.binary(min_size=1, max_size=120).map(lambda b: b.replace(b"\x00", b"\x33")), max_size=8),
       st.lists(st.integers(1, 64), min_size=1, max_size=20))
def test_keyed_simulated_device_takes_every_good_command_between_garbage_over_serial(garbage, chunks):
    from rigloop.protocol.framing import encode_serial

    dev = _device(KEY)
    wire = Wire(dev, KEY)
    wire.connect()
    wire.send(Arm())
    stream = b"\x00"
    for i in range(len(garbage) + 1):
        if i < len(garbage):
            stream += garbage[i] + b"\x00"
        stream += encode_serial(Command(i + 1, 0, float(i)), auth=wire.host)
    accepted = dev.rejects.accepted
    pos, k = 0, 0
    while pos < len(stream):                       # arbitrary chunking of the byte stream
        step = chunks[k % len(chunks)]
        dev.feed_stream(stream[pos:pos + step], P)
        pos, k = pos + step, k + 1
    assert dev.rejects.accepted - accepted == len(garbage) + 1      # every good COMMAND, no garbage
    assert dev._pending == (len(garbage) + 1, float(len(garbage)))
