"""The simulated device process: a transport, a clock and a :class:`SimDevice`.

Transports:

- UDP: bind HOST:PORT (port 0 picks a free one); one frame per datagram; replies go to the
  address that last sent a valid frame — once a CONFIGURE has bound the device (protocol §6.7),
  only the bound host's datagrams reach the device and the reply address stays the host's.
- PTY: a pseudo-terminal in raw mode; the host opens the printed slave path as a serial port;
  frames are COBS-encoded with 0x00 delimiters. The sim keeps its own slave descriptor open so
  the port survives host reconnects.

On both, nothing is sent until the first valid frame has arrived (a UDP device has no address
to answer before that; on a PTY, bytes written before a host opens the port would pile up in
the line buffer and reach the host stale). A host starts with QUERY anyway (protocol §7).

Clocks:

- ``realtime``: ticks on an absolute grid of ``time.perf_counter()`` that never drifts (tick k
  is due at ``t0 + k * period`` since the last CONFIGURE); between ticks the loop waits in
  ``select()`` on the transport with the tick deadline as timeout. When one or more whole ticks
  were missed the device skips to the newest grid point and flags OVERRUN.
- ``lockstep`` (protocol §8): the next tick comes as soon as the COMMAND answering the current
  SAMPLE has arrived, or after the lockstep wait (one period of wall time, or longer when
  ``--lockstep-wait-ms`` says so: the engine asks for a third of its stale-data limit, so a
  briefly descheduled host does not turn lockstep into a race). Device time advances by exactly one
  period per tick; messages arriving between ticks carry the time of the current tick. The
  clock stands still at 0 until the first CONFIGURE (the host always configures before it
  runs), so a session sees the same device times, noise and fault times on every run; the
  first tick after a CONFIGURE comes one wall period later (no SAMPLE awaits an answer).

The process prints one line, ``rigloop-sim listening <url>``, when it is ready, and exits
cleanly (logs flushed, exit status 0) on SIGTERM/SIGINT, after ``quit_after_s`` device seconds,
and when its parent process dies (asked with ``exit_with_parent``; always with the lockstep clock).
"""

from __future__ import annotations

import csv
import errno
import json
import os
import select
import signal
import socket
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any, Callable

from rigloop.protocol.cobs import cobs_encode
from rigloop.protocol.messages import Message, Sample
from rigloop.sim.device import SimDevice

LISTENING_PREFIX = "rigloop-sim listening "
#: Logs are flushed at least this often (wall seconds).
FLUSH_INTERVAL_S = 0.1
#: How often the parent process is checked (wall seconds).
PARENT_POLL_S = 0.25
#: Longest single wait in select(), so flags, logs and the parent check stay responsive.
MAX_WAIT_S = 0.1
_MAX_DATAGRAM = 2048
_READ_CHUNK = 4096


class UdpTransport:
    """Device end of the UDP link."""

    def __init__(self, host: str, port: int):
        try:
            infos = socket.getaddrinfo(host, port, 0, socket.SOCK_DGRAM)
        except socket.gaierror as exc:
            raise OSError(f"cannot resolve UDP host {host!r} ({exc})") from None
        family, _, _, _, addr = infos[0]
        sock = socket.socket(family, socket.SOCK_DGRAM)
        try:
            sock.bind(addr)
        except OSError as exc:
            sock.close()
            raise OSError(f"cannot bind UDP {host}:{port} ({exc.strerror or exc}); choose a free "
                          f"port (0 picks one)") from None
        sock.setblocking(False)
        self.sock = sock
        self.peer: tuple[Any, ...] | None = None
        self.bound_to: tuple[Any, ...] | None = None    # the host a CONFIGURE bound us to
        bound = sock.getsockname()
        shown = f"[{bound[0]}]" if family == socket.AF_INET6 else bound[0]
        self.url = f"udp://{shown}:{bound[1]}"
        self.port = bound[1]
        self.tx_errors = 0

    def fileno(self) -> int:
        return self.sock.fileno()

    def receive(self, device: SimDevice, now_us: int) -> list[Message]:
        out: list[Message] = []
        while True:
            try:
                data, addr = self.sock.recvfrom(_MAX_DATAGRAM)
            except (BlockingIOError, InterruptedError):
                return out
            except ConnectionError:
                continue       # an ICMP report about an earlier datagram to a vanished host
            if device.is_bound(now_us) and addr != self.bound_to:
                device.note_foreign(now_us)     # never acted on, never changes the reply address
                continue
            accepted = device.rejects.accepted
            rejected = device.rejects.total_rejected
            binds = device.bind_count
            out += device.feed_datagram(data, now_us)
            if device.rejects.accepted != accepted and device.rejects.total_rejected == rejected:
                self.peer = addr        # a frame rejected for any reason never moves the reply address
            if device.bind_count != binds:
                self.bound_to = addr

    @property
    def has_peer(self) -> bool:
        return self.peer is not None

    def send(self, frame: bytes) -> None:
        if self.peer is None:
            return
        try:
            self.sock.sendto(frame, self.peer)
        except (BlockingIOError, ConnectionError, OSError):
            self.tx_errors += 1   # a device does not wait for its host: the frame is lost

    def close(self) -> None:
        self.sock.close()


class PtyTransport:
    """Device end of a pseudo-terminal: the host opens :attr:`slave_path` as a serial port."""

    def __init__(self) -> None:
        import tty          # POSIX only

        master, slave = os.openpty()
        tty.setraw(slave)
        os.set_blocking(master, False)
        self.master = master
        self.slave = slave                  # kept open: the port survives host reconnects
        self.slave_path = os.ttyname(slave)
        self.url = f"serial://{self.slave_path}"
        self.has_peer = False
        self.tx_errors = 0
        self._cut = False          # the last write stopped inside a frame

    def fileno(self) -> int:
        return self.master

    def receive(self, device: SimDevice, now_us: int) -> list[Message]:
        out: list[Message] = []
        while True:
            try:
                data = os.read(self.master, _READ_CHUNK)
            except (BlockingIOError, InterruptedError):
                return out
            except OSError as exc:
                if exc.errno == errno.EIO:   # no slave open (cannot happen while we hold one)
                    return out
                raise
            if not data:
                return out
            accepted = device.rejects.accepted
            out += device.feed_stream(data, now_us)
            if device.rejects.accepted != accepted:
                self.has_peer = True

    def send(self, frame: bytes) -> None:
        if not self.has_peer:
            return
        data = cobs_encode(frame) + b"\x00"
        if self._cut:                  # the last frame went out cut short: end it first, so the
            data = b"\x00" + data      # host loses that frame only, not this one as well
        try:
            written = os.write(self.master, data)
        except (BlockingIOError, InterruptedError, OSError):
            written = 0
        # The host is not reading; a real UART would overrun too. The host's decoder drops the
        # cut frame and resynchronises at the next delimiter.
        self._cut = 0 < written < len(data)
        if written != len(data):
            self.tx_errors += 1

    def close(self) -> None:
        for fd in (self.master, self.slave):
            try:
                os.close(fd)
            except OSError:
                pass


@dataclass
class ServerOptions:
    clock: str = "realtime"                 # realtime | lockstep
    quit_after_s: float | None = None       # device seconds
    exit_with_parent: bool = False
    rx_log: Path | None = None
    trace: Path | None = None
    lockstep_wait_s: float | None = None    # lockstep: longest wait for an answer (>= one period)


class SimServer:
    """Runs a device on a transport until told to stop; see the module docstring."""

    def __init__(self, device: SimDevice, transport: UdpTransport | PtyTransport,
                 options: ServerOptions, *, stdout: IO[str] | None = None,
                 stderr: IO[str] | None = None, clock: Callable[[], float] = time.perf_counter):
        if options.clock not in ("realtime", "lockstep"):
            raise ValueError(f"clock {options.clock!r}: use realtime or lockstep")
        self.device = device
        self.transport = transport
        self._clock = clock             # wall clock in seconds (replaceable for tests)
        self.options = options
        self.stdout = stdout if stdout is not None else sys.stdout
        self.stderr = stderr if stderr is not None else sys.stderr
        self._stop_reason: str | None = None
        # A socket pair (not a pipe) so that select() can wait on it on every platform.
        self._wake_r, self._wake_w = socket.socketpair()
        self._wake_r.setblocking(False)
        self._wake_w.setblocking(False)
        self._rx_file: IO[str] | None = None
        self._trace_file: IO[str] | None = None
        self._trace: Any = None
        self._last_flush = 0.0
        self._lock_now = 0              # lockstep: device time of the latest tick
        self._last_parent_check = 0.0
        self._parent = os.getppid()
        self._quit_after_us = (None if options.quit_after_s is None
                               else int(round(options.quit_after_s * 1e6)))
        self.tx_results: dict[str, int] = {"sent": 0, "tx-error": 0, "no-peer": 0, "dropped": 0,
                                           "corrupted": 0, "silenced": 0, "no-session": 0}
        try:
            self._open_logs()
        except OSError:
            self._close_logs()
            self._wake_r.close()
            self._wake_w.close()
            raise

    # ------------------------------------------------------------------ control
    def request_stop(self, reason: str) -> None:
        """Ask the loop to end (safe from a signal handler)."""
        if self._stop_reason is None:
            self._stop_reason = reason
        try:
            self._wake_w.send(b"x")
        except OSError:
            pass      # already woken (buffer full) or closed

    def install_signal_handlers(self) -> None:
        def handler(signum, _frame):
            self.request_stop(signal.Signals(signum).name)

        signal.signal(signal.SIGTERM, handler)
        signal.signal(signal.SIGINT, handler)

    @property
    def stop_reason(self) -> str | None:
        return self._stop_reason

    # ------------------------------------------------------------------ main
    def run(self) -> int:
        try:
            if self.device.faults.ignore_stop:
                print("rigloop-sim: WARNING: fault 'ignore-stop' is active: this device ignores "
                      "STOP. Use it only to test the host's own stop path, never on a real rig.",
                      file=self.stderr, flush=True)
            print(LISTENING_PREFIX + self.transport.url, file=self.stdout, flush=True)
            if self.options.clock == "lockstep":
                self._run_lockstep()
            else:
                self._run_realtime()
        finally:
            self._close()
        return 0

    def _run_realtime(self) -> None:
        dev = self.device
        clock = self._clock
        t0 = clock()

        def now_us() -> int:
            return int((clock() - t0) * 1e6)

        self._send(dev.start(0), 0)
        while self._stop_reason is None:
            due = dev.next_tick_us
            now = now_us()
            if now >= due:
                missed = (now - due) // dev.period_us
                if missed:
                    dev.note_overrun(missed)
                    due += missed * dev.period_us
                self._tick(due)
                continue
            self._wait(min((due - now) * 1e-6, MAX_WAIT_S), lambda: min(now_us(), dev.next_tick_us))

    def _run_lockstep(self) -> None:
        dev = self.device
        self._send(dev.start(0), 0)
        self._lock_now = 0
        # The clock starts at the first CONFIGURE (device time 0): how long the host took to
        # connect then changes nothing, so device time, sensor noise and fault times line up
        # with the host's session identically on every run.
        while self._stop_reason is None and not dev.configured:
            self._wait(MAX_WAIT_S, lambda: self._lock_now)
        self._await_answer()
        while self._stop_reason is None:
            self._lock_now = dev.next_tick_us
            self._tick(self._lock_now)
            self._await_answer()

    def _lockstep_wait_s(self) -> float:
        period = self.device.period_us * 1e-6
        return max(period, self.options.lockstep_wait_s or 0.0)

    def _await_answer(self) -> None:
        """Lockstep: wait for the COMMAND answering the last SAMPLE, at most the lockstep wait
        (one wall period unless ``lockstep_wait_s`` is longer).

        A CONFIGURE restarts the wait (the device then has no SAMPLE awaiting an answer), so
        the first tick after it comes one wall period later: time for the host to finish its
        handshake before samples flow.
        """
        dev = self.device
        generation = dev.configure_count
        deadline = self._clock() + self._lockstep_wait_s()
        while self._stop_reason is None:
            if dev.configure_count != generation:
                generation = dev.configure_count
                deadline = self._clock() + self._lockstep_wait_s()
            if dev.answered:
                return
            remaining = deadline - self._clock()
            if remaining <= 0:
                return
            self._wait(min(remaining, MAX_WAIT_S), lambda: self._lock_now)

    def _tick(self, t_us: int) -> None:
        self._send(self.device.tick(t_us), t_us)
        if self._quit_after_us is not None and t_us >= self._quit_after_us:
            self.request_stop("quit-after")
        self._housekeeping()        # also when ticks leave no time to wait (overloaded)

    def _wait(self, timeout: float, rx_now) -> None:
        """Wait up to ``timeout`` s for input; handle it; do the housekeeping."""
        try:
            readable, _, _ = select.select([self.transport.fileno(), self._wake_r], [], [],
                                           max(timeout, 0.0))
        except InterruptedError:
            readable = []
        if self._wake_r in readable:
            try:
                self._wake_r.recv(64)
            except OSError:
                pass
        if self.transport.fileno() in readable:
            now = rx_now()
            self._send(self.transport.receive(self.device, now), now)
        self._housekeeping()

    def _housekeeping(self) -> None:
        wall = time.monotonic()
        if wall - self._last_flush >= FLUSH_INTERVAL_S:
            self._flush()
            self._last_flush = wall
        watch_parent = self.options.exit_with_parent or self.options.clock == "lockstep"
        if watch_parent and wall - self._last_parent_check >= PARENT_POLL_S:
            self._last_parent_check = wall
            if os.getppid() != self._parent:
                print("rigloop-sim: parent process gone; exiting", file=self.stderr, flush=True)
                self.request_stop("parent gone")

    def _send(self, msgs: list[Message], now_us: int) -> None:
        if not msgs:
            return
        faults = self.device.faults
        transport = self.transport
        for msg in msgs:
            frame: bytes | None = self.device.encode(msg) if transport.has_peer else None
            if not transport.has_peer:
                result = "no-peer"
            elif frame is None:
                result = "no-session"       # a keyed device before any QUERY: nothing goes out untagged
            else:
                frame = faults.outgoing(frame, now_us) if faults else frame
                if frame is None:
                    result = "silenced" if faults.is_silent(now_us) else "dropped"
                else:
                    result = "corrupted" if faults and faults.last_corrupted else "sent"
                    errors = transport.tx_errors
                    transport.send(frame)
                    if transport.tx_errors != errors:
                        result = "tx-error"     # the transport could not write it
            self.tx_results[result] += 1
            if self._trace is not None and type(msg) is Sample:
                self._trace_row(msg, result)

    # ------------------------------------------------------------------ logs
    def _open_logs(self) -> None:
        opts = self.options
        if opts.rx_log is not None:
            self._rx_file = open(opts.rx_log, "w", encoding="utf-8", buffering=1 << 16)
            self.device.rx_observer = self._log_rx
        if opts.trace is not None:
            self._trace_file = open(opts.trace, "w", encoding="utf-8", newline="",
                                    buffering=1 << 16)
            self._trace = csv.writer(self._trace_file)
            self._trace.writerow(["t_us", "seq", "applied", "status", "last_cmd_seq", "tx"]
                                 + [c.name for c in self.device.channels])

    def _log_rx(self, record: dict) -> None:
        assert self._rx_file is not None
        self._rx_file.write(json.dumps(record, separators=(",", ":")) + "\n")

    def _trace_row(self, s: Sample, result: str) -> None:
        self._trace.writerow([s.t_us, s.seq, repr(s.applied), s.status, s.last_cmd_seq, result]
                             + [repr(v) for v in s.channels])

    def _flush(self) -> None:
        for f in (self._rx_file, self._trace_file):
            if f is not None:
                f.flush()

    def _close_logs(self) -> None:
        self._flush()
        for f in (self._rx_file, self._trace_file):
            if f is not None:
                f.close()
        self._rx_file = self._trace_file = None
        self._trace = None

    def _close(self) -> None:
        self._close_logs()
        self.transport.close()
        self._wake_r.close()
        self._wake_w.close()
