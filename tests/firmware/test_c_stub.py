"""The C firmware stub: its own C test suite, and end-to-end runs of the host port over a real
pseudo-terminal and over UDP, driven by the Python codec and links.

The end-to-end runs close a loop through the same device code a microcontroller would run:
HELLO, CONFIGURE, ARM, a few hundred COMMAND/SAMPLE exchanges (applied value = clamped command),
STOP latching until ARM, and the device's own command watchdog driving the safe output when the
host falls silent. Every wait is a receive with a timeout; nothing sleeps and then asserts.
"""

from __future__ import annotations

import itertools
import math
import re
import selectors
import shutil
import signal
import subprocess
import time
from collections import deque
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from rigloop.link.serial_link import SerialLink
from rigloop.link.udp import UdpLink
from rigloop.protocol.messages import Arm, Command, Configure, Fault, FaultCode, Hello, Query, Sample, Status, Stop

pytestmark = pytest.mark.firmware

ROOT = Path(__file__).resolve().parents[2]
STUB = ROOT / "firmware_stub"
HOST_BINARY = STUB / "build" / "rl_host_device"

# The rig the host port simulates in these tests: a small fan whose speed (channel 0, in
# hundreds of rpm) follows the duty (percent) with one time constant.
PERIOD_US = 2000
WATCHDOG_US = 300_000  # generous: a busy shared machine must not trip it while we are talking
SAFE, U_MIN, U_MAX = 5.0, 0.0, 80.0
GAIN, TAU_S = 0.4, 0.1
PHASE_TIMEOUT_S = 30.0


def _missing_tools() -> list[str]:
    return [tool for tool in ("make", "cc", "python3") if shutil.which(tool) is None]


def _make(target: str, timeout: float = 600.0) -> subprocess.CompletedProcess:
    return subprocess.run(
        ["make", "--no-print-directory", "-C", str(STUB), target],
        capture_output=True,
        text=True,
        timeout=timeout,
        check=False,
    )


def test_make_test_runs_the_c_suite_green():
    missing = _missing_tools()
    if missing:
        pytest.skip(f"cannot build the C stub: {', '.join(missing)} not on PATH")
    result = _make("test")
    output = result.stdout + result.stderr
    assert result.returncode == 0, f"make -C firmware_stub test failed:\n{output[-6000:]}"
    summary = re.search(r"^C tests: (\d+) passed, (\d+) failed$", result.stdout, re.MULTILINE)
    assert summary, f"no C test summary line in:\n{output[-3000:]}"
    assert int(summary.group(2)) == 0
    assert int(summary.group(1)) >= 100
    # The cross-compile check either ran or said loudly why not.
    assert ("Cortex-M cross-compile check: OK" in result.stdout) or (
        "SKIP: arm-none-eabi-gcc not installed; Cortex-M cross-compile check not run" in result.stdout
    )


@pytest.fixture(scope="module")
def host_binary() -> Path:
    missing = _missing_tools()
    if missing:
        pytest.skip(f"cannot build the C stub's host port: {', '.join(missing)} not on PATH")
    result = _make("host")
    assert result.returncode == 0, f"make -C firmware_stub host failed:\n{(result.stdout + result.stderr)[-6000:]}"
    assert HOST_BINARY.exists()
    return HOST_BINARY


class HostDevice:
    """The host port as a child process; reads the line that says where to connect."""

    def __init__(self, binary: Path, transport: list[str]):
        args = [
            str(binary), *transport,
            "--channels", "3", "--period-us", "5000", "--watchdog-us", "100000",
            "--safe", "0", "--u-min", "0", "--u-max", "100",
            "--plant", "first-order", "--gain", str(GAIN), "--tau", str(TAU_S),
            "--name", "e2e-fan",
            "--quit-after", "300",  # a safety net if the test process dies
        ]
        self.proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        sel = selectors.DefaultSelector()
        sel.register(self.proc.stdout, selectors.EVENT_READ)
        ready = sel.select(timeout=30)
        sel.close()
        if not ready:
            self.stop()
            pytest.fail("the host port printed no address within 30 s")
        self.address_line = self.proc.stdout.readline().strip()

    def stop(self) -> tuple[int, str]:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
        try:
            _, err = self.proc.communicate(timeout=30)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            _, err = self.proc.communicate()
        return self.proc.returncode, err


def _clamp(value: float) -> float:
    return min(max(value, U_MIN), U_MAX)


class Host:
    """A minimal host: answers every SAMPLE with one COMMAND, records what came back."""

    def __init__(self, link):
        self.link = link
        self.cmd_seq = 0
        self.sent: dict[int, float] = {}
        self.last_answered: Sample | None = None
        self._queue: deque = deque()

    def next_message(self, timeout: float):
        """The next received message in arrival order, or None after timeout seconds."""
        if not self._queue:
            self._queue.extend(self.link.recv(timeout))
        return self._queue.popleft() if self._queue else None

    def answer(self, sample: Sample, value: float) -> None:
        self.cmd_seq += 1
        self.sent[self.cmd_seq] = value
        self.link.send(Command(seq=self.cmd_seq, answers=sample.seq, value=value))
        self.last_answered = sample

    def wait_for(self, what: str, predicate, *, answer=None, timeout: float = PHASE_TIMEOUT_S):
        """Take messages until predicate(msg) holds; answer each SAMPLE with answer(sample)."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            m = self.next_message(0.5)
            if m is None:
                continue
            if isinstance(m, Sample) and answer is not None:
                self.answer(m, answer(m))
            if predicate(m):
                return m
        pytest.fail(f"timed out after {timeout:.0f} s waiting for {what}; link counters {self.link.counters.as_dict()}")


def _command_schedule(i: int) -> float:
    """Duty requests stepping through the range, some outside it (to be clamped)."""
    steps = (20.0, 60.0, 120.0, 35.5, -10.0, 80.0, 0.0, 47.25)
    return steps[(i // 25) % len(steps)]


def _check_plant_against_scipy(samples: list[Sample]) -> None:
    """One-step predictions of the first-order plant y' = (-y + gain*u)/tau by scipy's RK45
    (scipy.integrate.solve_ivp), from each measured y_k with the applied u_k held, against the
    measured y_k+1 of the next consecutive sample.

    Times come from channel 2 (the plant's own read time in seconds), so host scheduling does not
    enter; the median error is the claim, the maximum only a sanity bound."""
    pairs = [(a, b) for a, b in zip(samples, samples[1:]) if b.seq == a.seq + 1]
    assert len(pairs) > 100
    t0 = np.array([a.channels[2] for a, _ in pairs])
    t1 = np.array([b.channels[2] for _, b in pairs])
    y0 = np.array([a.channels[0] for a, _ in pairs])
    y1 = np.array([b.channels[0] for _, b in pairs])
    u0 = np.array([a.applied for a, _ in pairs])
    dt = t1 - t0
    assert np.all(dt > 0)
    # All intervals at once, on a normalised time s in [0, 1]: dy_i/ds = dt_i * (-y_i + g u_i) / tau.
    sol = solve_ivp(lambda _s, z: dt * (-z + GAIN * u0) / TAU_S, (0.0, 1.0), y0, rtol=1e-10, atol=1e-12)
    assert sol.success
    error = np.abs(sol.y[:, -1] - y1)
    assert np.median(error) < 1e-3, f"median one-step error {np.median(error):.3g}"
    assert np.max(error) < 0.5, f"largest one-step error {np.max(error):.3g}"


def _scenario(link) -> None:
    host = Host(link)

    # 1. QUERY -> HELLO (one QUERY: the serial link opens with a delimiter, and a UDP device
    #    answers the sender of the datagram it is handling).
    link.send(Query())
    hello = host.wait_for("HELLO in answer to QUERY", lambda m: isinstance(m, Hello))
    assert hello.proto_min <= 1 <= hello.proto_max
    assert hello.n_channels == 3
    assert hello.name == "e2e-fan"

    # 2. CONFIGURE -> HELLO showing the new configuration.
    link.send(Configure(period_us=PERIOD_US, watchdog_us=WATCHDOG_US, safe=SAFE, u_min=U_MIN, u_max=U_MAX))
    ack = host.wait_for("HELLO acknowledging CONFIGURE", lambda m: isinstance(m, Hello) and m.period_us == PERIOD_US)
    assert ack.status & Status.CONFIGURED
    assert (ack.watchdog_us, ack.safe, ack.u_min, ack.u_max) == (WATCHDOG_US, SAFE, U_MIN, U_MAX)
    assert not ack.status & Status.ARMED

    # 3. ARM, then a few hundred exchanges; the applied value is the clamped command.
    link.send(Arm())
    checked: list[Sample] = []
    counter = itertools.count()

    def run_answer(_s: Sample) -> float:
        return _command_schedule(next(counter))

    def enough_checked(m) -> bool:
        if not isinstance(m, Sample):
            return False
        assert not m.status & Status.WATCHDOG, "device watchdog tripped while the host was answering"
        if m.status & Status.ARMED and m.last_cmd_seq in host.sent:
            requested = host.sent[m.last_cmd_seq]
            assert m.applied == _clamp(requested), (m, requested)
            assert bool(m.status & Status.CLAMPED) == (requested != _clamp(requested)), m
            checked.append(m)
        return len(checked) >= 300

    host.wait_for("300 applied commands", enough_checked, answer=run_answer)
    assert {s.applied for s in checked} >= {U_MIN, U_MAX, 20.0}  # clamped both ways, and in range
    _check_plant_against_scipy(checked)

    # 4. STOP: safe from the first SAMPLE that shows the latch on, and COMMANDs keep being
    #    ignored until ARM.
    link.send(Stop(reason=0))
    latched: list[Sample] = []

    def stays_stopped(m) -> bool:
        if isinstance(m, Sample) and (latched or m.status & Status.STOP_LATCHED):
            assert m.status & Status.STOP_LATCHED and not m.status & Status.ARMED, m
            assert m.applied == SAFE, m
            latched.append(m)
        return len(latched) >= 40

    host.wait_for("40 stopped samples while commands keep coming", stays_stopped, answer=lambda s: 50.0)

    # 5. ARM again: commands apply again.
    link.send(Arm())
    host.wait_for(
        "the first command applied after re-ARM",
        lambda m: isinstance(m, Sample) and m.status & Status.ARMED and not m.status & Status.STOP_LATCHED
        and m.applied == 33.0,
        answer=lambda s: 33.0,
    )

    # 6. The host falls silent: the device watchdog drives the safe output and latches.
    last_answered = host.last_answered
    assert last_answered is not None
    fault = host.wait_for("FAULT code 1 (command watchdog)",
                          lambda m: isinstance(m, Fault) and m.code == FaultCode.WATCHDOG)
    assert fault.t_us >= last_answered.t_us + WATCHDOG_US  # device time: no command came after
    assert fault.status & Status.WATCHDOG and not fault.status & Status.ARMED
    after = host.wait_for("a SAMPLE after the watchdog trip",
                          lambda m: isinstance(m, Sample) and m.t_us > fault.t_us)
    assert after.status & Status.WATCHDOG
    assert after.applied == SAFE
    assert not math.isnan(after.channels[0])

    link.send(Stop(reason=3))


def _check_clean_exit(code: int, err: str, link) -> None:
    """The host port stopped cleanly on SIGTERM, rejected nothing the Python codec sent, and the
    Python side rejected nothing unless the device had to drop bytes (a reader that stalled)."""
    assert code == 0, f"host port exit code {code}; stderr:\n{err[-3000:]}"
    summary = re.search(r"rl_host_device: stopped;.*", err)
    assert summary, err[-3000:]
    rejected = {name: int(n) for name, n in re.findall(r"rejected (\w+) (\d+)", summary.group(0))}
    assert set(rejected) == {"cobs", "short", "crc", "version", "type", "length", "sequence", "value", "auth"}
    assert sum(rejected.values()) == 0, summary.group(0)
    dropped = int(re.search(r"bytes dropped (\d+)", summary.group(0)).group(1))
    if dropped == 0 and link is not None:
        assert link.counters.rejected.total_rejected == 0, link.counters.as_dict()


def test_end_to_end_over_a_pseudo_terminal(host_binary):
    device = HostDevice(host_binary, ["--pty"])
    link = None
    try:
        match = re.fullmatch(r"PTY (/dev/\S+)", device.address_line)
        assert match, f"unexpected first line from the host port: {device.address_line!r}"
        link = SerialLink(match.group(1), 115200)
        _scenario(link)
    finally:
        if link is not None:
            link.close()
        code, err = device.stop()
    _check_clean_exit(code, err, link)


def test_end_to_end_over_udp(host_binary):
    device = HostDevice(host_binary, ["--udp", "127.0.0.1:0"])
    link = None
    try:
        match = re.fullmatch(r"UDP 127\.0\.0\.1:(\d+)", device.address_line)
        assert match, f"unexpected first line from the host port: {device.address_line!r}"
        port = int(match.group(1))
        assert port != 0
        link = UdpLink("127.0.0.1", port)
        _scenario(link)
    finally:
        if link is not None:
            link.close()
        code, err = device.stop()
    _check_clean_exit(code, err, link)


@pytest.mark.parametrize(
    ("args", "names"),
    [
        (["--pty", "--channels", "40"], ["--channels", "40", "1 to 32"]),
        (["--pty", "--tau", "0"], ["--tau", "0", "greater than 0"]),
        (["--udp", "nowhere"], ["--udp", "nowhere", "HOST:PORT"]),
        (["--udp", "127.0.0.1:99999"], ["--udp", "99999", "0 to 65535"]),
        (["--pty", "--plant", "second-order"], ["--plant", "second-order", "first-order"]),
        (["--channels", "3"], ["--pty or --udp"]),
        (["--pty", "--safe", "200"], ["--safe", "200", "--u-max"]),
    ],
)
def test_host_port_refuses_bad_options_with_a_clear_message(host_binary, args, names):
    result = subprocess.run([str(host_binary), *args], capture_output=True, text=True, timeout=30, check=False)
    assert result.returncode == 2, result
    assert result.stdout == ""
    for name in names:
        assert name in result.stderr, (name, result.stderr)
