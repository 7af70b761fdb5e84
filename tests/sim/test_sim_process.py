"""`rigloop sim` as a real process, driven through the host links (UdpLink, SerialLink).

Every wait is on messages or files with a generous timeout; nothing sleeps and then asserts.
Lockstep runs use a long period (and, where every sample is answered, a long lockstep wait)
so that the wall-clock fallback of protocol §8 rarely matters on a busy machine; where it can,
the test tolerates one fallback tick. Device time advances by exactly one period per tick.
"""

from __future__ import annotations

import collections
import csv
import json
import math
import os
import socket
import struct
import subprocess
import sys
import time
import weakref
from types import SimpleNamespace

import pytest

from rigloop.link.udp import UdpLink
from rigloop.protocol import (
    Arm,
    Command,
    Configure,
    Fault,
    FaultCode,
    Hello,
    Query,
    Sample,
    Status,
    Stop,
    encode_frame,
)
from rigloop.sim.launcher import SimProcess, SimStartError, start_sim

pytestmark = pytest.mark.slow

WAIT = 15.0          # generous: the machine is shared
P = 50_000           # lockstep period, us (the wall fallback is one period)
WD = 200_000         # four periods

posix_only = pytest.mark.skipif(not hasattr(os, "openpty") or sys.platform == "win32",
                                reason="needs a POSIX pseudo-terminal")


def f32(x: float) -> float:
    return struct.unpack("<f", struct.pack("<f", x))[0]


_pending: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def next_of(link, kind, *, also: list | None = None, timeout: float = WAIT):
    """Receive until a message of ``kind`` arrives; others go to ``also``.

    ``recv`` may return several messages at once; those after the one returned wait in a
    per-link queue for the next call, so none is lost between calls.
    """
    queue = _pending.setdefault(link, collections.deque())
    deadline = time.monotonic() + timeout
    while True:
        while queue:
            m = queue.popleft()
            if isinstance(m, kind):
                return m
            if also is not None:
                also.append(m)
        if time.monotonic() >= deadline:
            raise AssertionError(f"no {kind.__name__} within {timeout} s")
        queue.extend(link.recv(min(0.5, max(deadline - time.monotonic(), 0.01))))


def poll_hello(link, timeout: float = 1.0) -> Hello | None:
    """A HELLO if one arrives within ``timeout`` (other messages are dropped: handshake only)."""
    try:
        return next_of(link, Hello, also=[], timeout=timeout)
    except AssertionError:
        return None


def connect(link, conf: Configure) -> Hello:
    """QUERY until HELLO, CONFIGURE until acknowledged (robust to lost frames), then ARM."""
    deadline = time.monotonic() + WAIT
    hello = None
    while hello is None:
        assert time.monotonic() < deadline, "no HELLO"
        link.send(Query())
        hello = poll_hello(link)
    ack = None
    while ack is None:
        assert time.monotonic() < deadline, "CONFIGURE never acknowledged"
        link.send(conf)
        got = poll_hello(link)
        if got is not None and (got.period_us, got.watchdog_us) == (conf.period_us, conf.watchdog_us):
            ack = got
    assert ack.status & Status.CONFIGURED
    return ack


class Host:
    """A minimal host: answers every SAMPLE with one COMMAND and remembers what it sent."""

    def __init__(self, link):
        self.link = link
        self.seq = 0
        self.sent: dict[int, float] = {}
        self.last: Command | None = None

    def answer(self, sample: Sample, value: float) -> None:
        self.seq += 1
        self.last = Command(self.seq, sample.seq, value)
        self.sent[self.seq] = value
        self.link.send(self.last)

    def arm(self) -> Sample:
        """ARM (again if lost) until a SAMPLE says ARMED; answers samples with the safe value."""
        deadline = time.monotonic() + WAIT
        self.link.send(Arm())
        while True:
            s = next_of(self.link, Sample)
            if s.status & Status.ARMED:
                return s
            assert time.monotonic() < deadline, "never armed"
            self.link.send(Arm())
            self.answer(s, 0.0)


def clamp(v: float, lo: float = 0.0, hi: float = 100.0) -> float:
    return min(max(v, lo), hi)


def exercise(link, exchanges: int) -> None:
    """HELLO, CONFIGURE, ARM, COMMAND/SAMPLE exchanges, STOP latch, re-ARM, watchdog."""
    ack = connect(link, Configure(P, WD, 0.0, 0.0, 100.0))
    assert (ack.safe, ack.u_min, ack.u_max) == (0.0, 0.0, 100.0)
    host = Host(link)
    s = host.arm()
    pattern = [10.0, 35.5, 120.0, 60.0, -15.0, 99.0, 0.0, 72.25]
    checked = clamped = 0
    for k in range(exchanges):
        if s.last_cmd_seq in host.sent:
            wanted = host.sent[s.last_cmd_seq]
            assert s.applied == f32(clamp(wanted))                  # applied == clamped command
            assert bool(s.status & Status.CLAMPED) == (clamp(wanted) != wanted)
            assert s.status & Status.ARMED
            checked += 1
            clamped += bool(s.status & Status.CLAMPED)
        host.answer(s, pattern[k % len(pattern)])
        s = next_of(link, Sample)
    assert checked >= exchanges - 2 and clamped > 0

    # STOP latches at once; COMMANDs are ignored until ARM.
    link.send(Stop(1))
    host.answer(s, 80.0)              # STOP was received first; the answer only moves the clock on
    s = next_of(link, Sample)
    assert s.status & Status.STOP_LATCHED and not s.status & Status.ARMED
    assert s.applied == 0.0
    for _ in range(5):
        host.answer(s, 80.0)
        s = next_of(link, Sample)
        assert s.applied == 0.0 and s.status & Status.STOP_LATCHED
    s = host.arm()
    assert not s.status & Status.STOP_LATCHED
    host.answer(s, 55.0)
    s = next_of(link, Sample)
    if s.last_cmd_seq != host.seq:    # the one-period wall fallback ticked before our answer landed
        s = next_of(link, Sample)
    assert s.applied == 55.0 and s.last_cmd_seq == host.seq

    # The watchdog drives the safe output when commands stop.
    last_answered_t = s.t_us          # lockstep: the COMMAND's device time is this tick's
    host.answer(s, 55.0)
    others: list = []
    fault = next_of(link, Fault, also=others)
    assert fault.code == FaultCode.WATCHDOG
    assert WD < fault.t_us - last_answered_t <= WD + P
    after = next_of(link, Sample)
    assert after.applied == 0.0
    assert after.status & Status.WATCHDOG and not after.status & Status.ARMED
    assert all(m.applied == 55.0 for m in others if isinstance(m, Sample))


def read_trace(path) -> list[dict]:
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def summary_of(sim: SimProcess) -> dict:
    lines = [ln for ln in sim.stderr_text().splitlines() if ln.startswith("rigloop-sim summary ")]
    assert len(lines) == 1, sim.stderr_text()
    return json.loads(lines[0][len("rigloop-sim summary "):])


# --- UDP and PTY sessions -----------------------------------------------------------------------


def test_udp_lockstep_session(tmp_path):
    rx_log, trace = tmp_path / "rx.jsonl", tmp_path / "trace.csv"
    with SimProcess(["--udp", "127.0.0.1:0", "--clock", "lockstep", "--noise", "0",
                     "--rx-log", str(rx_log), "--trace", str(trace)]) as sim:
        assert sim.url == f"udp://127.0.0.1:{sim.port}" and sim.port > 0
        with UdpLink(sim.host, sim.port) as link:
            exercise(link, 300)
            assert link.counters.rejected.total_rejected == 0
            assert link.counters.lost_samples == 0
        assert sim.stop() == 0                       # clean exit on SIGTERM
    summary = summary_of(sim)
    assert summary["stop"] == "SIGTERM"
    rows = read_trace(trace)
    assert len(rows) == summary["ticks"]             # logs flushed on exit
    records = [json.loads(line) for line in rx_log.read_text().splitlines()]
    kinds = {(r["type"], r["result"]) for r in records}
    assert {("QUERY", "accepted"), ("CONFIGURE", "accepted"), ("ARM", "accepted"),
            ("COMMAND", "accepted"), ("STOP", "accepted"), ("COMMAND", "ignored")} <= kinds
    assert any(r["result"] == "watchdog" for r in records)
    commands = [r for r in records if r["type"] == "COMMAND" and r["result"] == "accepted"]
    assert len(commands) >= 300 and all("answers" in r and "t_us" in r for r in commands)


@posix_only
def test_pty_lockstep_session():
    from rigloop.link.serial_link import SerialLink

    # The launcher serves the engine, which uses UDP; start the PTY device by hand.
    proc = subprocess.Popen([sys.executable, "-m", "rigloop", "sim", "--pty", "--clock",
                             "lockstep", "--noise", "0"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        line = proc.stdout.readline()
        assert line.startswith("rigloop-sim listening serial://"), proc.stderr.read()
        path = line.strip().split("serial://", 1)[1]
        with SerialLink(path, 921600) as link:
            exercise(link, 150)
            assert link.counters.rejected.total_rejected == 0
    finally:
        proc.terminate()
        assert proc.wait(timeout=WAIT) == 0
        proc.stdout.close()
        proc.stderr.close()


def test_realtime_samples_sit_on_the_period_grid():
    with SimProcess(["--udp", "127.0.0.1:0", "--rate", "200", "--noise", "0"]) as sim, \
            UdpLink(sim.host, sim.port) as link:
        connect(link, Configure(5_000, 50_000, 0.0, 0.0, 100.0))
        first = next_of(link, Sample)
        while not first.status & Status.CONFIGURED:      # the clock restarts at CONFIGURE
            first = next_of(link, Sample)
        samples = [first] + [next_of(link, Sample) for _ in range(40)]
    t = [s.t_us for s in samples]
    for a, b in zip(samples, samples[1:]):
        assert b.seq == a.seq + 1
        gap = b.t_us - a.t_us
        if b.status & Status.OVERRUN:
            assert gap % 5_000 == 0 and gap > 5_000    # whole ticks skipped, still on the grid
        else:
            assert gap == 5_000
    assert len(set(t)) == len(t)


def test_lockstep_runs_are_repeatable_with_noise_and_a_load_step():
    """Protocol §8: the same closed loop gives the same samples on every run."""
    def closed_loop() -> list[tuple]:
        # every sample is answered, so a long lockstep wait costs nothing and keeps a descheduled
        # test process from letting the device tick on its own (which would change the run)
        with SimProcess(["--udp", "127.0.0.1:0", "--clock", "lockstep", "--seed", "11",
                         "--lockstep-wait-ms", "2000", "--fault", "load:at=5,torque=0.004"]) as sim, \
                UdpLink(sim.host, sim.port) as link:
            connect(link, Configure(P, WD, 0.0, 0.0, 100.0))
            host = Host(link)
            s = host.arm()
            got = []
            for _ in range(200):
                got.append((s.seq, s.t_us, s.status, s.applied, s.channels))
                host.answer(s, 50.0 + 0.02 * (1500.0 - s.channels[0]))   # a plain P law
                s = next_of(link, Sample)
        return got
    first, second = closed_loop(), closed_loop()
    # The clock starts at CONFIGURE (device time 0); its first tick, one period later, is
    # the first SAMPLE the device ever sends and finds it armed.
    assert first[0][:3] == (0, P, Status.ARMED | Status.CONFIGURED)
    assert first == second
    speeds = [row[4][0] for row in first]
    assert max(speeds) > 1000.0 and len(set(speeds)) > 50    # it moved, with noise


# --- faults seen by the host --------------------------------------------------------------------


def test_dropped_and_corrupted_frames_show_in_the_host_counters(tmp_path):
    trace = tmp_path / "trace.csv"
    with SimProcess(["--udp", "127.0.0.1:0", "--clock", "lockstep", "--noise", "0",
                     "--seed", "3", "--fault", "drop:p=0.1", "--fault", "corrupt:p=0.1",
                     "--trace", str(trace)]) as sim:
        with UdpLink(sim.host, sim.port) as link:
            # a short period: each lost SAMPLE costs one period of wall time in lockstep
            connect(link, Configure(5_000, 1_000_000, 0.0, 0.0, 100.0))
            host = Host(link)
            received = []
            for _ in range(300):
                s = next_of(link, Sample)
                received.append(s.seq)
                host.answer(s, 30.0)
            counters = link.counters
        sim.stop()
    summary = summary_of(sim)
    rows = read_trace(trace)
    lo, hi = received[0], received[-1]
    lost_between = [r for r in rows if lo < int(r["seq"]) < hi and r["tx"] in ("dropped", "corrupted")]
    assert counters.lost_samples == len(lost_between) > 0
    assert counters.rejected.crc == summary["tx"]["corrupted"] > 0   # every corrupted frame
    assert counters.rejected.sequence == 0
    assert sorted(received) == received


def test_nan_fault_reaches_the_host_as_nan():
    with SimProcess(["--udp", "127.0.0.1:0", "--clock", "lockstep", "--noise", "0",
                     "--channels", "speed_rpm,temp_c", "--fault", "nan:channel=temp_c,at=0"]) as sim, \
            UdpLink(sim.host, sim.port) as link:
        connect(link, Configure(P, WD, 0.0, 0.0, 100.0))
        s = next_of(link, Sample)
    assert len(s.channels) == 2
    assert math.isnan(s.channels[1]) and s.channels[0] == 0.0


def test_rejected_frames_set_rx_error_and_are_logged(tmp_path):
    rx_log = tmp_path / "rx.jsonl"
    with SimProcess(["--udp", "127.0.0.1:0", "--clock", "lockstep", "--noise", "0",
                     "--rx-log", str(rx_log)]) as sim, UdpLink(sim.host, sim.port) as link:
        connect(link, Configure(P, WD, 0.0, 0.0, 100.0))
        # a bad CRC from the host's own address: the device counts it, sets RX_ERROR
        frame = bytearray(encode_frame(Command(1, 0, 1.0)))
        frame[-1] ^= 0xFF
        link._sock.sendto(bytes(frame), (sim.host, sim.port))
        s = next_of(link, Sample)
        while not s.status & Status.RX_ERROR:
            s = next_of(link, Sample)
        sim.stop()
    records = [json.loads(line) for line in rx_log.read_text().splitlines()]
    assert any(r["result"] == "rejected" and r["reason"] == "crc" for r in records)


# --- launcher -------------------------------------------------------------------------------------


def test_start_sim_from_a_config_applies_channels_scaling_and_rate():
    from rigloop.config import parse_config

    cfg = parse_config({
        "device": {"link": "sim", "rate_hz": 50,
                   "sim": {"plant": "fan", "clock": "lockstep", "noise": 0.0, "seed": 4}},
        "channels": [{"name": "temp_c", "unit": "degC", "scale": 0.5, "offset": 20.0},
                     {"name": "speed_rpm", "unit": "rpm"}],
        "actuator": {"name": "duty", "unit": "%", "min": 0.0, "max": 100.0, "safe": 0.0},
        "control": {"output": "speed_rpm", "alpha": 30.0},
    })
    with start_sim(cfg) as sim, UdpLink(sim.host, sim.port) as link:
        assert "--quit-with-parent" in sim.args
        link.send(Query())
        hello = next_of(link, Hello)
        assert hello.n_channels == 2 and hello.period_us == 20_000
        connect(link, Configure(20_000, 100_000, 0.0, 0.0, 100.0))
        s = next_of(link, Sample)
    # fan at rest: 25 degC ambient, sent as (25 - 20) / 0.5
    assert s.channels == (10.0, 0.0)
    assert sim.stop() == 0


def test_start_sim_failure_quotes_the_error():
    cfg = SimpleNamespace(
        base_dir=".",
        device=SimpleNamespace(rate_hz=100.0, sim=SimpleNamespace(
            plant="fan", clock="realtime", noise=1.0, seed=1, params={}, params_file=None,
            faults=())),
        channels=[SimpleNamespace(name="rotor_speed", scale=1.0, offset=0.0)])
    with pytest.raises(SimStartError) as info:
        start_sim(cfg)
    text = str(info.value)
    assert "'rotor_speed' is not a channel of the fan plant" in text
    assert "exit status 2" in text and "Traceback" not in text


def test_plant_params_reach_the_device(tmp_path):
    params = tmp_path / "fan.yaml"
    params.write_text("supply_v: 6.0\n")
    cfg = SimpleNamespace(
        base_dir=tmp_path,
        device=SimpleNamespace(rate_hz=100.0, sim=SimpleNamespace(
            plant="fan", clock="lockstep", noise=0.0, seed=1, params={"ambient_c": 30.0},
            params_file="fan.yaml", faults=())),
        channels=[SimpleNamespace(name="temp_c", scale=1.0, offset=0.0)])
    with start_sim(cfg) as sim, UdpLink(sim.host, sim.port) as link:
        assert "--params" in sim.args and str(params) in sim.args
        connect(link, Configure(P, WD, 0.0, 0.0, 100.0))
        s = next_of(link, Sample)
    assert s.channels == (30.0,)


# --- process life cycle -------------------------------------------------------------------------


def test_quit_after_ends_the_process_cleanly():
    proc = subprocess.run([sys.executable, "-m", "rigloop", "sim", "--udp", "127.0.0.1:0",
                           "--rate", "1000", "--quit-after", "0.05"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.startswith("rigloop-sim listening udp://127.0.0.1:")
    assert '"stop":"quit-after"' in proc.stderr


def test_exits_when_its_parent_dies(tmp_path):
    err = tmp_path / "sim.err"
    parent = ("import subprocess, sys\n"
              "p = subprocess.Popen([sys.executable, '-m', 'rigloop', 'sim', '--udp', '127.0.0.1:0',"
              " '--quit-with-parent'], stdout=subprocess.PIPE, stderr=open(sys.argv[1], 'w'),"
              " text=True)\n"
              "print(p.stdout.readline(), end='', flush=True)\n")
    out = subprocess.run([sys.executable, "-c", parent, str(err)], capture_output=True, text=True,
                         timeout=60)
    assert out.stdout.startswith("rigloop-sim listening"), out.stderr
    deadline = time.monotonic() + WAIT
    while '"stop":"parent gone"' not in err.read_text():
        assert time.monotonic() < deadline, f"the orphaned sim did not exit: {err.read_text()!r}"
        time.sleep(0.05)                                 # polling a condition, not a sync sleep
    assert "parent process gone" in err.read_text()


# --- command line ---------------------------------------------------------------------------------


@pytest.mark.parametrize("argv, words", [
    (["--fault", "wobble"], ["unknown kind 'wobble'"]),
    (["--channels", "speed_rpm,rotor"], ["'rotor' is not a channel of the fan plant"]),
    (["--param", "supply=12"], ["unknown fan parameter 'supply'", "supply_v"]),
    (["--params", "/nonexistent/fan.yaml"], ["--params /nonexistent/fan.yaml", "cannot read"]),
    (["--scale", "temp_c=0", "--channels", "temp_c"], ["--scale temp_c", "other than 0"]),
    (["--scale", "airflow_m3h=2", "--channels", "temp_c"], ["not a sent channel"]),
    (["--rx-log", "/nonexistent/dir/rx.jsonl"], ["does not exist"]),
    (["--plant", "motor", "--fault", "freeze:channel=speed_rpm,at=1"], ["not sent by the device"]),
    (["--rate", "50000"], ["outside what the simulated device can do"]),
])
def test_bad_arguments_exit_2_with_one_clear_line(capsys, argv, words):
    from rigloop.cli import main

    assert main(["sim", "--udp", "127.0.0.1:0", *argv]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    for word in words:
        assert word in err


@pytest.mark.parametrize("argv, words", [
    (["--udp", "localhost"], ["HOST:PORT"]),
    (["--udp", "127.0.0.1:70000"], ["0..65535"]),
    (["--noise", "-1"], ["--noise", ">= 0"]),
    (["--clock", "fast"], ["--clock", "lockstep"]),
    (["--udp", "127.0.0.1:0", "--pty"], ["not allowed with argument"]),
])
def test_argparse_errors_exit_2(capsys, argv, words):
    from rigloop.cli import main

    with pytest.raises(SystemExit) as info:
        main(["sim", *argv])
    assert info.value.code == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    for word in words:
        assert word in err


def test_bad_params_file_content(tmp_path, capsys):
    from rigloop.cli import main

    broken = tmp_path / "broken.yaml"
    broken.write_text("supply_v: [1,\n")
    assert main(["sim", "--udp", "127.0.0.1:0", "--params", str(broken)]) == 2
    assert "not valid YAML at line" in capsys.readouterr().err
    listed = tmp_path / "list.yaml"
    listed.write_text("- 1\n- 2\n")
    assert main(["sim", "--udp", "127.0.0.1:0", "--params", str(listed)]) == 2
    assert "not a mapping" in capsys.readouterr().err


def test_no_socket_is_left_bound_after_a_usage_error(capsys):
    """A usage error found after binding must release the port (checked by re-binding it)."""
    from rigloop.cli import main

    probe = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    probe.bind(("127.0.0.1", 0))
    port = probe.getsockname()[1]
    probe.close()
    assert main(["sim", "--udp", f"127.0.0.1:{port}", "--rx-log", "/nonexistent/x"]) == 2
    again = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    again.bind(("127.0.0.1", port))
    again.close()
