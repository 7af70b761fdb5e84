"""Engine benchmark against the performance targets (bench/README.md): every figure is a ratio
to a bare reference measured in the same run (absolute times on a shared machine are noise;
ratios travel better).

1. Loop ceiling: samples per wall second of the engine against the lockstep simulated device
   (demo fan, 2 kHz), over the rate of a bare UDP loopback echo between two processes.
   Also: the real simulated device against a minimal protocol host, which shows the device's
   share of each round trip and, by difference, the engine's.
2. Per-sample compute: the engine's own ``compute_us`` median plus the decode and record costs
   it does not include, over the bare round trip; and a stage-by-stage breakdown.
3. Lateness at 1 kHz (realtime simulated device): the engine's p99 lateness (its wake-up
   delay: sample arrival at its socket -> read) over a bare sleep loop's (same scheduling request
   as the engine), and p99 sample-to-command latency over one period. Also a bare UDP host at
   1 kHz, timed the same way as the engine. Three interleaved rounds; medians of the rounds' p99.
4. E-stop: front-end request -> STOP frame received by the device, p99 over many trials, with a
   bare pipe -> process -> UDP relay as reference; device watchdog: last command -> safe output.

Clocks: ``time.perf_counter()`` is CLOCK_MONOTONIC on Linux, one clock for every process on the
machine, so a time taken in one process can be subtracted from a time taken in another. The
e-stop timing uses CLOCK_REALTIME (``time.time_ns()``) instead, because that is the clock of the
kernel's receive stamp (SO_TIMESTAMPNS), which says when the STOP datagram reached the device's
socket whatever the device process was doing; it is system-wide too, and a 10 s run sees no
noticeable clock adjustment.

Run:  .venv/bin/python bench/engine_bench.py [--quick] [--json FILE]
Never run by the tests. Progress goes to stderr, the table to stdout.
"""

from __future__ import annotations

import argparse
import json
import math
import multiprocessing as mp
import os
import queue
import random
import select
import shutil
import socket
import statistics
import struct
import sys
import tempfile
import time
from dataclasses import asdict, dataclass
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "configs" / "demo_fan.yaml"
_CTX = mp.get_context("spawn")

#: Settings that keep a busy shared machine from tripping a run that is only being timed: they
#: change no per-sample work (limits are checked every sample whatever their values).
ROBUST_SETS = ["limits.stale_periods=500", "limits.overruns.max=1000000", "limits.max_duration_s=3600"]
CEILING_SETS = ["device.sim.clock=lockstep", "device.rate_hz=2000", *ROBUST_SETS]
REALTIME_SETS = ["device.sim.clock=realtime", "device.rate_hz=1000", "device.watchdog_ms=500", *ROBUST_SETS]
ESTOP_RATE_HZ = 1000.0


# ====================================================================== table
@dataclass
class Row:
    """One line of the results table. ``ratio`` is judged against ``target`` (op, limit)."""

    measure: str
    value: str
    reference: str
    ratio: float | None
    target: str            # e.g. ">= 0.5", "<= 2", "" for an information line

    @property
    def verdict(self) -> str:
        if not self.target:
            return "info"
        if self.ratio is None or not math.isfinite(self.ratio):
            return "n/a"
        op, limit = self.target.split()
        ok = {">=": self.ratio >= float(limit), "<=": self.ratio <= float(limit),
              "<": self.ratio < float(limit)}[op]
        return "PASS" if ok else "MISS"


def format_table(rows: list[Row]) -> str:
    head = ("measure", "measured", "bare reference (same run)", "ratio", "target", "")
    cells = [head] + [(r.measure, r.value, r.reference,
                       "-" if r.ratio is None else f"{r.ratio:.3g}", r.target or "-", r.verdict)
                      for r in rows]
    widths = [max(len(c[i]) for c in cells) for i in range(len(head))]
    lines = []
    for n, c in enumerate(cells):
        lines.append("  ".join(c[i].ljust(widths[i]) if i != 3 else c[i].rjust(widths[i])
                               for i in range(len(head))).rstrip())
        if n == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


def write_json(path: str | None, section: str, rows: list[Row], extra: dict | None = None) -> None:
    if not path:
        return
    data = {"section": section, "rows": [dict(asdict(r), verdict=r.verdict) for r in rows],
            "extra": extra or {}}
    Path(path).write_text(json.dumps(data, indent=1), encoding="utf-8")


def progress(text: str) -> None:
    print(f"[bench] {text}", file=sys.stderr, flush=True)


# ====================================================================== child processes
class BenchError(RuntimeError):
    pass


def _trampoline(target, q, args) -> None:
    import traceback

    try:
        target(q.put, *args)
    except BaseException as exc:  # noqa: BLE001 - reported to the parent, which stops the run
        q.put(("error", f"{target.__name__}: {type(exc).__name__}: {exc}\n{traceback.format_exc()}"))


class Child:
    """A spawned process running ``target(send, *args)``; ``send`` posts (kind, value) tuples."""

    def __init__(self, target, *args):
        self.name = target.__name__
        self.q = _CTX.Queue()
        self.proc = _CTX.Process(target=_trampoline, args=(target, self.q, args), daemon=True)
        self.proc.start()

    def get(self, kind: str, timeout: float):
        """The value of the next message of ``kind`` (others are skipped)."""
        deadline = time.monotonic() + timeout
        while True:
            left = deadline - time.monotonic()
            try:
                got, value = self.q.get(timeout=max(left, 0.001))
            except queue.Empty:
                self.stop()
                raise BenchError(f"{self.name}: no {kind!r} within {timeout:g} s") from None
            if got == "error":
                self.stop()
                raise BenchError(value)
            if got == kind:
                return value

    def drain(self) -> None:
        while True:
            try:
                self.q.get_nowait()
            except queue.Empty:
                return

    def stop(self, timeout: float = 5.0) -> None:
        if self.proc.is_alive():
            self.proc.terminate()
            self.proc.join(timeout)
        if self.proc.is_alive():
            self.proc.kill()
            self.proc.join()


def run_child(target, *args, timeout: float):
    child = Child(target, *args)
    try:
        return child.get("result", timeout)
    finally:
        child.proc.join(5.0)
        child.stop()


def _engine_priority(realtime: bool) -> str:
    """The scheduling request the engine makes for itself, made here too (fair references)."""
    from rigloop.engine.priority import raise_priority

    return raise_priority(realtime=realtime)


def _frame_sizes() -> tuple[int, int, int]:
    from rigloop.protocol.framing import encode_frame
    from rigloop.protocol.messages import Command, Sample, Stop

    sample = encode_frame(Sample(1, 1000, 0, 0.0, 0, (0.0, 0.0, 0.0, 0.0)))
    return len(sample), len(encode_frame(Command(1, 1, 0.0))), len(encode_frame(Stop(1)))


def _udp_socket() -> socket.socket:
    s = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    s.bind(("127.0.0.1", 0))
    return s


# ====================================================================== 1. loop ceiling
def _echo_host(send, reply_size: int, prio: bool) -> None:
    """Bare host: answer each datagram with a COMMAND-sized one; a 1-byte datagram ends it."""
    sched = _engine_priority(False) if prio else "normal priority"
    sock = _udp_socket()
    send(("port", sock.getsockname()[1]))
    reply = bytes(reply_size)
    recvfrom, sendto = sock.recvfrom, sock.sendto
    n = 0
    while True:
        data, addr = recvfrom(2048)
        if len(data) == 1:
            break
        sendto(reply, addr)
        n += 1
    send(("result", {"answered": n, "sched": sched}))


def _echo_device(send, port: int, n: int, warmup: int, size: int) -> None:
    """Bare device: send a SAMPLE-sized datagram, wait for the answer, ``n`` times."""
    sock = _udp_socket()
    sock.connect(("127.0.0.1", port))
    payload = bytes(size)
    s, r = sock.send, sock.recv
    for _ in range(warmup):
        s(payload)
        r(2048)
    t0 = time.perf_counter()
    for _ in range(n):
        s(payload)
        r(2048)
    dt = time.perf_counter() - t0
    s(b"x")
    send(("result", dt))


def bench_bare_echo(n: int) -> dict:
    sample_size, command_size, _ = _frame_sizes()
    host = Child(_echo_host, command_size, True)
    try:
        port = host.get("port", 30)
        dt = run_child(_echo_device, port, n, min(2000, n // 5), sample_size, timeout=60 + n * 1e-3)
        info = host.get("result", 10)
    finally:
        host.stop()
    return {"rate": n / dt, "rtt_us": dt / n * 1e6, "n": n, "sched": info["sched"],
            "sizes": (sample_size, command_size)}


def _protocol_host(send, addr: tuple, n: int, warmup: int, period_us: int) -> None:
    """Minimal valid host for the real simulated device: CONFIGURE, ARM, then one COMMAND per
    SAMPLE as fast as it can (a bare echo plus a struct pack and a CRC)."""
    from binascii import crc_hqx

    from rigloop.protocol.framing import decode_frame, encode_frame
    from rigloop.protocol.messages import Arm, Configure, Hello, ProtocolError

    sched = _engine_priority(False)
    sock = _udp_socket()
    sock.settimeout(5.0)
    sock.sendto(encode_frame(Configure(period_us, 100_000, 0.0, 0.0, 100.0)), addr)
    while True:
        data = sock.recv(2048)
        try:
            msg = decode_frame(data)
        except ProtocolError:
            continue
        if isinstance(msg, Hello) and msg.period_us == period_us:
            break
    sock.sendto(encode_frame(Arm()), addr)
    sock.settimeout(None)
    cmd = struct.Struct("<BBIIf")
    crc = struct.Struct("<H").pack
    seq_of = struct.Struct("<I").unpack_from
    recv, sendto = sock.recv, sock.sendto
    seq = 0
    t0 = 0.0
    counted = 0
    while counted < warmup + n:
        data = recv(2048)
        if data[1] != 0x02:            # SAMPLE only (HELLO / FAULT are not answered)
            continue
        seq += 1
        p = cmd.pack(1, 0x13, seq, seq_of(data, 2)[0], 30.0)
        sendto(p + crc(crc_hqx(p, 0xFFFF)), addr)
        counted += 1
        if counted == warmup:
            t0 = time.perf_counter()
    send(("result", {"dt": time.perf_counter() - t0, "sched": sched}))


def bench_sim_share(n: int) -> dict:
    """The real ``rigloop sim`` child, started exactly as the engine starts it, against a
    minimal protocol host."""
    from rigloop.config import load_config
    from rigloop.sim.launcher import start_sim

    cfg = load_config(DEMO, CEILING_SETS)
    period_us = int(round(1e6 / cfg.device.rate_hz))
    with start_sim(cfg) as sim:
        res = run_child(_protocol_host, (sim.host, sim.port), n, min(2000, n // 5), period_us,
                        timeout=60 + n * 2e-3)
    return {"rate": n / res["dt"], "rtt_us": res["dt"] / n * 1e6, "n": n}


class RateProbe:
    """Engine subscriber that timestamps the samples (two attribute stores per sample)."""

    critical = False

    def __init__(self, warmup: int):
        self.warmup = warmup
        self.n = 0
        self.t_first = None
        self.t_last = None
        self._clock = time.perf_counter

    def on_tick(self, rec) -> None:
        self.n += 1
        self.t_last = self._clock()
        if self.n == self.warmup:
            self.t_first = self.t_last

    def on_event(self, ev) -> None:
        pass

    def poll(self, now: float) -> None:
        pass


def _engine_run(send, sets: list, duration_s: float, out_dir: str) -> None:
    """One headless engine session in this process, as ``rigloop run --quiet`` does it."""
    from rigloop.config import load_config
    from rigloop.engine.loop import Engine

    cfg = load_config(DEMO, [*sets, f"recording.dir={out_dir}"])
    engine = Engine(cfg, duration_s=duration_s, autostart=True, front_end="cli")
    probe = RateProbe(warmup=200)
    engine.add_subscriber(probe)
    result = engine.run()
    timed = probe.n - probe.warmup
    rate = timed / (probe.t_last - probe.t_first) if probe.t_first and timed > 0 else math.nan
    send(("result", {"rate": rate, "samples": probe.n, "outcome": result.outcome,
                     "stop_reason": result.stop_reason, "summary": result.summary,
                     "session": str(result.session_dir)}))


def bench_engine(sets: list, duration_s: float, out_dir: Path) -> dict:
    for attempt in (1, 2):
        try:
            return run_child(_engine_run, sets, duration_s, str(out_dir), timeout=120 + 5 * duration_s)
        except BenchError as exc:
            # On a shared machine a start-up can fail for reasons outside the engine (the
            # simulated device killed or starved while it imports); one retry, said aloud.
            if attempt == 2 or "SimStartError" not in str(exc):
                raise
            progress(f"  engine did not start ({str(exc).splitlines()[0]}); retrying once")
    raise AssertionError("unreachable")


class InProcessDevice:
    """A lockstep device inside the engine's own process: the engine's CPU cost alone.

    It speaks the protocol through the engine's link interface — QUERY/CONFIGURE answered with
    HELLO, one prepared SAMPLE frame per COMMAND — and decodes its frames with the same decoder
    and sequence filter as the UDP link, so decode stays in the measured work. Its own cost is a
    list append; its ``fileno`` is always readable, so ``select()`` returns at once.
    """

    def __init__(self, rate_hz: float, n_frames: int, n_channels: int):
        from rigloop.link.base import LinkCounters, SampleFilter
        from rigloop.protocol.framing import DatagramDecoder, encode_frame
        from rigloop.protocol.messages import Sample

        self.url = "inproc://bench-device"
        self.counters = LinkCounters()
        self._decode = DatagramDecoder(self.counters.rejected).decode
        self._keep = SampleFilter(self.counters).keep
        self._encode = encode_frame
        self._ready_r, self._ready_w = socket.socketpair()
        self._ready_w.send(b"x")                  # never read: select() always finds it readable
        self.n_channels = n_channels
        period_us = int(round(1e6 / rate_hz))
        rng = random.Random(3)
        frames = []
        for k in range(1, n_frames + 1):          # a speed wandering around 1200-1800 rpm
            y = 1500.0 + 300.0 * math.sin(k * 2e-4) + rng.gauss(0.0, 3.0)
            frames.append(encode_frame(Sample(k, k * period_us, 0x21, 40.0, k, (y, 0.6, 0.2 * y, 31.0))))
        self._frames = iter(frames)
        self._out: list[bytes] = []
        self._started = False

    def _hello(self, period_us: int = 500, watchdog_us: int = 100_000):
        from rigloop.protocol.messages import PROTOCOL_VERSION, Hello

        return Hello(PROTOCOL_VERSION, PROTOCOL_VERSION, 0x0100, self.n_channels, 0x20, period_us,
                     watchdog_us, 0.0, 0.0, 100.0, "bench-inproc")

    def send(self, msg) -> None:
        kind = type(msg).__name__
        self.counters.tx_frames += 1
        if kind == "Command" or (kind == "Arm" and not self._started):
            self._started = True
            frame = next(self._frames, None)
            if frame is not None:
                self._out.append(frame)
        elif kind == "Query":
            self._out.append(self._encode(self._hello()))
        elif kind == "Configure":
            self._out.append(self._encode(self._hello(msg.period_us, msg.watchdog_us)))

    def recv(self, timeout) -> list:
        out = []
        for frame in self._out:
            msg = self._decode(frame)
            if msg is not None and self._keep(msg):
                self.counters.rx_frames += 1
                out.append(msg)
        self._out = []
        return out

    def fileno(self) -> int:
        return self._ready_r.fileno()

    def close(self) -> None:
        self._ready_r.close()
        self._ready_w.close()


def _engine_inproc(send, sets: list, duration_s: float, out_dir: str) -> None:
    from rigloop.config import load_config
    from rigloop.engine.loop import Engine

    cfg = load_config(DEMO, [*sets, f"recording.dir={out_dir}"])
    rate = cfg.device.rate_hz
    link = InProcessDevice(rate, int((duration_s + 3.0) * rate), len(cfg.channels))
    engine = Engine(cfg, duration_s=duration_s, autostart=True, front_end="cli", link=link)
    probe = RateProbe(warmup=200)
    engine.add_subscriber(probe)
    result = engine.run()
    timed = probe.n - probe.warmup
    rate = timed / (probe.t_last - probe.t_first) if probe.t_first and timed > 0 else math.nan
    send(("result", {"rate": rate, "samples": probe.n, "outcome": result.outcome,
                     "summary": result.summary}))


# ====================================================================== 2. per-sample compute
def _per_call_us(fn, n: int) -> float:
    """Best of three timed loops, microseconds per call."""
    best = math.inf
    for _ in range(3):
        t0 = time.perf_counter()
        fn(n)
        best = min(best, time.perf_counter() - t0)
    return best / n * 1e6


def stage_costs(out_dir: Path, n: int) -> dict[str, float]:
    """Microseconds per sample of each stage of the engine's tick, the real objects, no I/O wait.

    Mirrors :meth:`rigloop.engine.loop.Engine._handle_batch` for one sample answered at once.
    """
    from rigloop.config import load_config
    from rigloop.control.controller import Controller
    from rigloop.control.reference import build_reference
    from rigloop.control.shaping import ActuatorShaper
    from rigloop.engine.loop import control_params_from_config
    from rigloop.engine.recorder import SessionRecorder
    from rigloop.engine.records import TickRecord
    from rigloop.engine.supervisor import Supervisor
    from rigloop.engine.timing import LogHistogram
    from rigloop.link.base import LinkCounters, SampleFilter
    from rigloop.protocol.framing import DatagramDecoder, encode_frame
    from rigloop.protocol.messages import Command, Sample

    cfg = load_config(DEMO, [*CEILING_SETS, f"recording.dir={out_dir}"])
    ts = 1.0 / cfg.device.rate_hz
    a = cfg.actuator
    rng = random.Random(1)
    frames = [encode_frame(Sample(k, int(k * ts * 1e6), 0x21, 40.0 + rng.random(), k,
                                  (1500.0 + rng.random(), 0.5, 300.0, 30.0)))
              for k in range(1, 4 * n + 2)]
    costs: dict[str, float] = {}

    counters = LinkCounters()
    decoder, keep = DatagramDecoder(counters.rejected).decode, SampleFilter(counters).keep
    it = iter(frames)

    def decode(k):
        for _ in range(k):
            keep(decoder(next(it)))
    costs["decode SAMPLE (CRC, unpack, sequence)"] = _per_call_us(decode, n)
    msg = decoder(frames[0])
    scales = [(c.scale, c.offset) for c in cfg.channels]

    def scale(k):
        raw = msg.channels
        for _ in range(k):
            [raw[j] * sc + off for j, (sc, off) in enumerate(scales)]
    costs["scale channels"] = _per_call_us(scale, n)

    sup = Supervisor(cfg)
    values = [1500.0, 0.5, 300.0, 30.0]

    def supervise(k):
        for i in range(k):
            t = i * ts
            sup.check_status(t, 0x21, True) or sup.check_sample(t, values, True)
            sup.check_output(t, 40.0)
    costs["supervise (status, limits, output)"] = _per_call_us(supervise, n)

    ref = build_reference(cfg.reference, base_dir=cfg.base_dir)

    def reference(k):
        for i in range(k):
            ref.at(i * ts)
    costs["reference r, r', r''"] = _per_call_us(reference, n)

    ctl = Controller(control_params_from_config(cfg), ts=ts, u_min=a.min, u_max=a.max, u_hold=float(a.safe))
    for i in range(2000):                   # past the warm-up: the estimator runs in full
        ctl.step(1500.0 + (i % 7), 40.0, 1500.0, 0.0, 0.0)

    def control(k):
        for i in range(k):
            ctl.step(1500.0 + (i % 7), 40.0, 1500.0, 0.0, 0.0)
    costs["controller.step (estimate + law)"] = _per_call_us(control, n)

    shaper = ActuatorShaper(a.min, a.max, a.safe, a.slew_per_s)
    shaper.reset(40.0)

    def shape(k):
        for i in range(k):
            shaper.shape(40.0 + (i & 1), ts)
    costs["shape (guard, clamp, slew)"] = _per_call_us(shape, n)

    def encode(k):
        for i in range(k):
            encode_frame(Command(i + 1, i, 40.0))
    costs["encode COMMAND"] = _per_call_us(encode, n)

    sink, src = _udp_socket(), _udp_socket()
    sink.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 1 << 22)
    sink.setblocking(False)
    dest = sink.getsockname()
    cmd = encode_frame(Command(1, 1, 40.0))

    def sendto(k):
        for _ in range(k):
            src.sendto(cmd, dest)
        try:
            while sink.recv(64):
                pass
        except BlockingIOError:
            pass
    costs["sendto() syscall (loopback)"] = _per_call_us(sendto, min(n, 2000))
    sink.close()
    src.close()

    hists = [LogHistogram(), LogHistogram(), LogHistogram()]

    def timing(k):
        for i in range(k):
            for h in hists:
                h.add(3e-5 + i * 1e-9)
    costs["timing histograms (3 adds)"] = _per_call_us(timing, n)

    def record_build(k):
        for i in range(k):
            TickRecord(i * ts, i, 1500.0, 0.0, 1501.0, 1.0, 40.0, 40.0, -1200.0, "running", values,
                       0x21, 0.03, 30.0, 0, 0.05)
    costs["TickRecord"] = _per_call_us(record_build, n)

    folder = out_dir / "stage-recorder"
    folder.mkdir(parents=True, exist_ok=True)
    recorder = SessionRecorder(folder, cfg, device_url="bench://")
    recs = [TickRecord(i * ts, i, 1500.0 + i, 0.0, 1501.0 + i, 1.0, 40.0, 40.0, -1200.0 - i, "running",
                       [1500.0 + i, 0.5, 300.0, 30.0], 0x21, 0.03, 30.0, 0, 0.05) for i in range(n)]
    clock = time.perf_counter

    def record(k):
        for i in range(k):
            recorder.on_tick(recs[i])
            recorder.poll(clock())
    costs["record (CSV row + flush check)"] = _per_call_us(record, n)
    recorder.close(outcome="completed", stop_reason="bench", trip=None, summary={})
    return costs


# Stages inside the engine's compute_us (from the decoded sample to the COMMAND sent).
IN_COMPUTE_US = ("scale channels", "supervise (status, limits, output)", "reference r, r', r''",
                 "controller.step (estimate + law)", "shape (guard, clamp, slew)", "encode COMMAND",
                 "sendto() syscall (loopback)")


# ====================================================================== 3. lateness at 1 kHz
def _sleep_loop(send, seconds: float, rate: float, prio: bool) -> None:
    """Sleep to absolute deadlines; record wake-up minus deadline.

    Like the simulated device's realtime clock, a wake-up that missed whole periods skips to the
    next deadline ahead (one late value, then on time), so one stall of the machine counts once
    and not as a catch-up ramp of late wake-ups.
    """
    sched = _engine_priority(True) if prio else "normal priority"
    period = 1.0 / rate
    n = int(seconds * rate)
    late = []
    clock, sleep = time.perf_counter, time.sleep
    t0 = clock()
    k = 1
    while k <= n:
        due = t0 + k * period
        wait = due - clock()
        if wait > 0:
            sleep(wait)
        now = clock()
        late.append(now - due)
        k += 1 + int((now - due) // period)
    send(("result", {"p50_ms": _pct(late, 50) * 1e3, "p99_ms": _pct(late, 99) * 1e3, "sched": sched,
                     "skipped": n - len(late)}))


def _pct(values, p: float) -> float:
    v = sorted(values)
    if not v:
        return math.nan
    return v[min(len(v) - 1, max(0, math.ceil(p / 100 * len(v)) - 1))]


def _paced_host(send, reply_size: int) -> None:
    """Bare 1 kHz host at the engine's priority: answer each datagram at once. Timed as the
    engine times itself: wake-up = read minus the kernel's arrival stamp (its lateness),
    arrival stamp to answer sent (its latency)."""
    sched = _engine_priority(True)
    sock = _udp_socket()
    stamped = _enable_stamps(sock)
    send(("port", sock.getsockname()[1]))
    reply = bytes(reply_size)
    wake, answer = [], []
    now_ns = time.time_ns
    while True:
        data, addr, arrival = _recv_stamped(sock)
        t_read = now_ns()
        if len(data) == 1:
            break
        sock.sendto(reply, addr)
        t_sent = now_ns()
        wake.append((t_read - arrival) / 1e6)
        answer.append((t_sent - arrival) / 1e6)
    send(("result", {"wake_p99_ms": _pct(wake[50:], 99), "answer_p99_ms": _pct(answer[50:], 99),
                     "sched": sched, "stamped": stamped, "n": len(wake)}))


def _paced_device(send, port: int, seconds: float, rate: float, size: int) -> None:
    """Bare 1 kHz device: sleep to each deadline, send it in a SAMPLE-sized datagram (missed
    deadlines are skipped, as the simulated device's realtime clock does)."""
    sock = _udp_socket()
    sock.setblocking(False)
    dest = ("127.0.0.1", port)
    period = 1.0 / rate
    pad = bytes(size - 8)
    pack = struct.Struct("<d").pack
    clock = time.perf_counter
    t0 = clock()
    k = 1
    while k <= int(seconds * rate):
        due = t0 + k * period
        wait = due - clock()
        if wait > 0:
            time.sleep(wait)
        sock.sendto(pack(due) + pad, dest)
        k += 1 + int((clock() - due) // period)          # missed periods: skip, as the sim does
        try:
            while sock.recv(64):
                pass
        except BlockingIOError:
            pass
    sock.sendto(b"x", dest)
    send(("result", None))


def bench_paced_udp(seconds: float) -> dict:
    sample_size, command_size, _ = _frame_sizes()
    host = Child(_paced_host, command_size)
    try:
        port = host.get("port", 30)
        run_child(_paced_device, port, seconds, ESTOP_RATE_HZ, sample_size, timeout=60 + 2 * seconds)
        return host.get("result", 10)
    finally:
        host.stop()


# ====================================================================== 4. e-stop and watchdog
#: Linux: ask the kernel to stamp each received datagram (CLOCK_REALTIME, ns) — the moment the
#: frame reached the device's socket, whatever the receiving process was doing then.
SO_TIMESTAMPNS = getattr(socket, "SO_TIMESTAMPNS", 35 if sys.platform.startswith("linux") else None)
_TIMESPEC = struct.Struct("@ll")


def _enable_stamps(sock: socket.socket) -> bool:
    if SO_TIMESTAMPNS is None:
        return False
    try:
        sock.setsockopt(socket.SOL_SOCKET, SO_TIMESTAMPNS, 1)
        return True
    except OSError:
        return False


def _recv_stamped(sock: socket.socket) -> tuple[bytes, tuple, int]:
    """(data, address, arrival in ns: the kernel's stamp, or time.time_ns() without one)."""
    data, anc, _flags, addr = sock.recvmsg(2048, 64)
    for level, kind, raw in anc:
        if level == socket.SOL_SOCKET and kind == SO_TIMESTAMPNS and len(raw) >= _TIMESPEC.size:
            sec, nsec = _TIMESPEC.unpack_from(raw)
            return data, addr, sec * 1_000_000_000 + nsec
    return data, addr, time.time_ns()


def _observed_sim(send, rate_hz: float, channels: list) -> None:
    """The real simulated device (realtime clock) on a socket that stamps arrivals, whose
    receive log reports STOP and ARM (arrival and handling, CLOCK_REALTIME ns) and watchdog
    expiries (device time since the last accepted COMMAND)."""
    import io

    from rigloop.sim.device import build_device
    from rigloop.sim.server import ServerOptions, SimServer, UdpTransport

    class StampedTransport(UdpTransport):
        """UdpTransport.receive with recvmsg, keeping the kernel's arrival stamp."""

        arrival_ns = 0

        def receive(self, device, now_us):
            out = []
            while True:
                try:
                    data, addr, self.arrival_ns = _recv_stamped(self.sock)
                except (BlockingIOError, InterruptedError):
                    return out
                except ConnectionError:
                    continue
                accepted = device.rejects.accepted
                out += device.feed_datagram(data, now_us)
                if device.rejects.accepted != accepted:
                    self.peer = addr

    device = build_device("fan", channels=channels, rate_hz=rate_hz, noise=1.0, seed=1)
    transport = StampedTransport("127.0.0.1", 0)
    stamped = _enable_stamps(transport.sock)
    last_cmd_us = [0]

    def observe(rec: dict) -> None:
        kind, result = rec.get("type"), rec.get("result")
        if kind == "COMMAND":
            if result == "accepted":
                last_cmd_us[0] = rec["t_us"]
        elif kind in ("STOP", "ARM"):
            send((kind.lower(), (transport.arrival_ns, time.time_ns())))
        elif result == "watchdog":
            send(("watchdog", (rec["t_us"] - last_cmd_us[0], device.period_us, device.watchdog_us)))

    device.rx_observer = observe
    server = SimServer(device, transport, ServerOptions(clock="realtime", exit_with_parent=True),
                       stdout=io.StringIO())
    server.install_signal_handlers()
    send(("port", (transport.port, stamped)))
    server.run()
    send(("result", None))


def _relay(send, conn, port: int, size: int) -> None:
    """Bare e-stop path: wait on a pipe; on a message, send one datagram."""
    sched = _engine_priority(True)
    sock = _udp_socket()
    dest = ("127.0.0.1", port)
    frame = bytes(size)
    send(("ready", sched))
    while True:
        select.select([conn], [], [])
        msg = conn.recv()
        if msg is None:
            break
        sock.sendto(frame, dest)
    send(("result", None))


def _receiver(send) -> None:
    sock = _udp_socket()
    _enable_stamps(sock)
    send(("port", sock.getsockname()[1]))
    while True:
        data, _addr, arrival = _recv_stamped(sock)
        if len(data) == 1:
            break
        send(("got", arrival))
    send(("result", None))


def bench_relay(trials: int) -> list[float]:
    """Bare reference of the e-stop path: front end -> pipe -> a process (the engine's
    scheduling) -> one STOP-sized datagram -> arrival stamp at the receiving socket."""
    _, _, stop_size = _frame_sizes()
    rx = Child(_receiver)
    r, w = _CTX.Pipe(duplex=False)
    relay = None
    try:
        port = rx.get("port", 30)
        relay = Child(_relay, r, port, stop_size)
        relay.get("ready", 30)
        out = []
        for _ in range(trials):
            time.sleep(random.uniform(0.02, 0.05))
            t_req = time.time_ns()
            w.send(("estop", {"source": "bench"}))
            out.append((rx.get("got", 5) - t_req) / 1e6)
        w.send(None)
        with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
            s.sendto(b"x", ("127.0.0.1", port))
        return out
    finally:
        for c in (relay, rx):
            if c is not None:
                c.proc.join(2.0)
                c.stop()


def event_cost(out_dir: Path, n: int) -> list[float]:
    """Milliseconds per engine event as ``Engine._emit`` does it (a timestamp, a log line to the
    session's engine.log, an events.csv row and a flush). The e-stop request emits one *before*
    the STOP frame leaves (``Engine._handle_request``), so this is on the e-stop path."""
    import logging

    from rigloop.config import load_config
    from rigloop.engine.recorder import SessionRecorder, utc_now_iso
    from rigloop.engine.records import EventRecord

    cfg = load_config(DEMO, [f"recording.dir={out_dir}"])
    folder = out_dir / "event-cost"
    folder.mkdir(parents=True, exist_ok=True)
    recorder = SessionRecorder(folder, cfg, device_url="bench://")
    log = logging.getLogger("rigloop.bench.events")
    log.propagate = False
    handler = logging.FileHandler(folder / "engine.log", encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    log.addHandler(handler)
    log.setLevel(logging.INFO)
    out = []
    clock = time.perf_counter
    for i in range(n):
        t0 = clock()
        ev = EventRecord("estop", "e-stop (gui)", t=i * 1e-3)
        ev.wall_utc = utc_now_iso()
        log.info("event %s: %s", ev.kind, ev.detail)
        recorder.on_event(ev)
        out.append((clock() - t0) * 1e3)
        time.sleep(0.002)                   # events are rare: measure them cold, one at a time
    log.removeHandler(handler)
    handler.close()
    recorder.close(outcome="completed", stop_reason="bench", trip=None, summary={})
    return out


def _ensure_running(client, sim: Child) -> None:
    """Make sure the engine is running before it is killed.

    A device whose watchdog fired under the previous engine still reports WATCHDOG in the
    samples it sent before the new ARM arrived, and the engine trips on the first of them
    (see the report: the supervisor could ignore samples that predate its ARM). Then: reset, arm
    again.
    """
    for _ in range(3):
        time.sleep(0.15)
        st = client.wait_for(lambda s: s.get("state") in ("running", "tripped"), 5) or {}
        if st.get("state") == "running":
            return
        client.reset()
        client.arm()
        sim.get("arm", 10)
    raise BenchError(f"the engine would not stay running: {client.status()}")


def bench_estop(trials: int, watchdog_trials: int, out_dir: Path) -> dict:
    """E-stop through the desktop app's own path (EngineClient: pipe -> engine process -> UDP)."""
    from rigloop.config import load_config
    from rigloop.engine.process import EngineClient

    names = ["speed_rpm", "current_a", "airflow_m3h", "temp_c"]
    sim = Child(_observed_sim, ESTOP_RATE_HZ, names)
    estops: list[float] = []
    handled: list[float] = []
    watchdog: list[tuple] = []
    try:
        port, stamped = sim.get("port", 60)
        cfg = load_config(DEMO, [f"device.url=udp://127.0.0.1:{port}", f"device.rate_hz={ESTOP_RATE_HZ:g}",
                                 *ROBUST_SETS, f"recording.dir={out_dir}"])
        for w in range(max(1, watchdog_trials)):
            client = EngineClient(cfg, out_dir=out_dir, autostart=False, front_end_timeout_s=None).start()
            try:
                if client.wait_for(lambda s: s.get("state") == "idle", 60) is None:
                    raise BenchError(f"the engine did not connect: {client.status()}")
                n = trials if w == 0 else 0
                for i in range(n + 1):
                    if i:
                        client.reset()
                    client.arm()
                    sim.get("arm", 10)
                    time.sleep(random.uniform(0.02, 0.05))      # running: commands flow
                    if i == n:
                        break
                    sim.drain()
                    t_req = time.time_ns()
                    client.estop("bench")
                    arrival, done = sim.get("stop", 5)
                    estops.append((arrival - t_req) / 1e6)
                    handled.append((done - t_req) / 1e6)
                    if n >= 10 and (i + 1) % 10 == 0:
                        progress(f"  e-stop trial {i + 1}/{n}")
                if watchdog_trials:
                    _ensure_running(client, sim)
                    client.process.kill()                       # the engine dies mid-run
                    watchdog.append(sim.get("watchdog", 10))
            finally:
                client.close()
    finally:
        sim.stop()
    return {"estop_ms": estops, "handled_ms": handled, "watchdog": watchdog, "stamped": stamped}


# ====================================================================== main
def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="rigloop engine benchmark: ratios to bare references measured in the same run")
    parser.add_argument("--quick", action="store_true", help="a short run that checks the script works")
    parser.add_argument("--json", metavar="FILE", help="also write the rows as JSON (for run_all.py)")
    parser.add_argument("--keep", action="store_true", help="keep the recorded sessions")
    args = parser.parse_args(argv)
    q = args.quick
    n_echo = 3000 if q else 30000
    ceiling_s = 1.0 if q else 8.0            # device seconds at 2 kHz
    rounds, rt_s = (1, 1.5) if q else (3, 4.0)   # 1 kHz: rounds x wall seconds for each part
    trials = 10 if q else 100
    wd_trials = 1 if q else 3
    out = Path(tempfile.mkdtemp(prefix="rigloop-engine-bench-"))
    t_start = time.perf_counter()
    try:
        progress(f"1/4 loop ceiling: bare UDP echo, {n_echo} round trips")
        bare1 = bench_bare_echo(n_echo)
        progress(f"1/4 loop ceiling: simulated device vs minimal host, {n_echo} round trips")
        simr = bench_sim_share(n_echo)
        progress(f"1/4 loop ceiling: engine vs lockstep simulated device, {ceiling_s:g} device s at 2 kHz")
        eng = bench_engine(CEILING_SETS, ceiling_s, out)
        progress("1/4 loop ceiling: engine vs a device inside its own process (no I/O)")
        inproc = run_child(_engine_inproc, CEILING_SETS, ceiling_s, str(out), timeout=120 + 5 * ceiling_s)
        bare2 = bench_bare_echo(n_echo)
        bare = bare1 if bare1["rate"] >= bare2["rate"] else bare2
        progress("2/4 per-sample compute: stage costs")
        stages = stage_costs(out, 2000 if q else 20000)
        timing = []
        for k in range(rounds):
            # interleaved, so that the engine and its references share the machine's moods
            progress(f"3/4 lateness at 1 kHz, round {k + 1}/{rounds}: sleep loops, bare UDP host, "
                     f"engine vs realtime simulated device, {rt_s:g} s each")
            timing.append({
                "sleep_prio": run_child(_sleep_loop, rt_s, ESTOP_RATE_HZ, True, timeout=60 + 2 * rt_s),
                "sleep_norm": run_child(_sleep_loop, rt_s, ESTOP_RATE_HZ, False, timeout=60 + 2 * rt_s),
                "paced": bench_paced_udp(rt_s),
                "engine": bench_engine(REALTIME_SETS, rt_s, out)})
        progress(f"4/4 e-stop: {trials} trials through the engine process, bare relay reference; "
                 f"{wd_trials} device-watchdog trial(s)")
        relay = bench_relay(trials)
        events = event_cost(out, 50 if q else 300)
        est = bench_estop(trials, wd_trials, out)
    finally:
        if args.keep:
            progress(f"sessions kept in {out}")
        else:
            shutil.rmtree(out, ignore_errors=True)

    rows: list[Row] = []
    # 1. ceiling
    rows.append(Row("1 loop ceiling: engine vs lockstep sim, 2 kHz config", f"{eng['rate']:.0f} samples/s",
                    f"bare UDP echo {bare['rate']:.0f} round trips/s", eng["rate"] / bare["rate"], ">= 0.5"))
    t_bare, t_sim, t_eng = 1e6 / bare["rate"], 1e6 / simr["rate"], 1e6 / eng["rate"]
    rows.append(Row("  where a round trip goes: bare UDP loop", f"{t_bare:.1f} us", "", 1.0, ""))
    rows.append(Row("  + simulated device (vs minimal host)", f"+{t_sim - t_bare:.1f} us",
                    f"sim + minimal host {simr['rate']:.0f}/s", (t_sim - t_bare) / t_eng, ""))
    rows.append(Row("  + engine (vs minimal host)", f"+{t_eng - t_sim:.1f} us",
                    f"engine round trip {t_eng:.1f} us", (t_eng - t_sim) / t_eng, ""))
    free = 1e6 / (t_eng - (t_sim - t_bare))
    rows.append(Row("  engine vs a device that costs nothing (derived)", f"{free:.0f} samples/s",
                    f"bare {bare['rate']:.0f}/s", free / bare["rate"], ""))
    t_cpu = 1e6 / inproc["rate"]
    rows.append(Row("  engine CPU alone (device in-process, no I/O)", f"{inproc['rate']:.0f} samples/s",
                    f"= {t_cpu:.1f} us per sample", inproc["rate"] / bare["rate"], ""))
    # 2. compute
    comp = eng["summary"].get("compute_us") or {}
    c50 = float(comp.get("p50") or math.nan)
    dec = stages["decode SAMPLE (CRC, unpack, sequence)"]
    rec = stages["record (CSV row + flush check)"] + stages["TickRecord"]
    full = c50 + dec + rec
    rows.append(Row("2 per-sample compute p50 (decode..encode+record)", f"{full:.1f} us",
                    f"bare round trip {t_bare:.1f} us", full / t_bare, "< 0.1"))
    rows.append(Row("  engine compute_us p50 / p99 (supervise..send)", f"{c50:.1f} / {comp.get('p99')} us",
                    "", c50 / t_bare, ""))
    rows.append(Row("  + decode + TickRecord + record (stage costs)", f"+{dec:.1f} +{rec:.1f} us", "", None, ""))
    ic = (inproc["summary"].get("compute_us") or {}).get("p50")
    rows.append(Row("  compute_us p50, device in-process (warm caches)", f"{ic} us", "", None, ""))
    rows.append(Row("  per-sample compute vs the 1 kHz period", f"{full:.1f} us", "period 1000 us",
                    full / 1000.0, ""))
    # 3. lateness (each figure: the median over the rounds of that round's p99)
    def med(values):
        v = [x for x in values if x is not None and math.isfinite(x)]
        return statistics.median(v) if v else math.nan

    def spread(values):
        return "" if len(values) < 2 else f" ({min(values):.3f}-{max(values):.3f})"

    eng_late = [float((r["engine"]["summary"].get("lateness_ms") or {}).get("p99") or math.nan) for r in timing]
    eng_lat = [float((r["engine"]["summary"].get("latency_ms") or {}).get("p99") or math.nan) for r in timing]
    sp = [r["sleep_prio"]["p99_ms"] for r in timing]
    sn = [r["sleep_norm"]["p99_ms"] for r in timing]
    pw = [r["paced"]["wake_p99_ms"] for r in timing]
    pa = [r["paced"]["answer_p99_ms"] for r in timing]
    missed_p = sum(r["sleep_prio"]["skipped"] for r in timing)
    missed_n = sum(r["sleep_norm"]["skipped"] for r in timing)
    l99, lc99 = med(eng_late), med(eng_lat)
    how = f"median of {rounds} rounds" if rounds > 1 else "one round"
    rows.append(Row(f"3 p99 lateness @1 kHz, engine vs realtime sim ({how})", f"{l99:.3f} ms{spread(eng_late)}",
                    f"sleep loop {med(sp):.3f} ms{spread(sp)} (engine's priority)"
                    + (f", {missed_p} missed" if missed_p else ""), l99 / med(sp), "<= 2"))
    rows.append(Row("  same, vs sleep loop at normal priority", f"{l99:.3f} ms",
                    f"sleep loop {med(sn):.3f} ms{spread(sn)}" + (f", {missed_n} missed" if missed_n else ""),
                    l99 / med(sn), ""))
    rows.append(Row("  same, vs a bare UDP host's wake-up @1 kHz", f"{l99:.3f} ms",
                    f"bare host {med(pw):.3f} ms{spread(pw)}", l99 / med(pw), ""))
    rows.append(Row(f"3 p99 sample-to-command latency @1 kHz ({how})", f"{lc99:.3f} ms{spread(eng_lat)}",
                    "one period 1 ms", lc99 / 1.0, "<= 1"))
    rows.append(Row("  same, vs a bare UDP host's arrival-to-answer", f"{lc99:.3f} ms",
                    f"bare host {med(pa):.3f} ms{spread(pa)}", lc99 / med(pa), ""))
    # 4. e-stop
    e = est["estop_ms"]
    e99 = _pct(e, 99)
    r99 = _pct(relay, 99)
    where = "on the wire" if est["stamped"] else "handled by device"
    rows.append(Row(f"4 e-stop request -> STOP {where}, p99 of {len(e)}", f"{e99:.2f} ms",
                    "target 5 ms", e99 / 5.0, "<= 1"))
    rows.append(Row("  e-stop p50 / max", f"{statistics.median(e):.2f} / {max(e):.2f} ms",
                    f"bare relay p50 {statistics.median(relay):.2f} / max {max(relay):.2f} ms", None, ""))
    rows.append(Row("  e-stop p99 vs bare pipe->process->UDP relay", f"{e99:.2f} ms", f"relay p99 {r99:.2f} ms",
                    e99 / r99 if r99 > 0 else None, ""))
    h = est["handled_ms"]
    rows.append(Row("  same, until the device process handled it, p99", f"{_pct(h, 99):.2f} ms",
                    f"max {max(h):.2f} ms", None, ""))
    rows.append(Row("  work before STOP leaves: estop event p50 / p99", f"{statistics.median(events):.3f} / "
                    f"{_pct(events, 99):.3f} ms", "log line + events.csv row + flush", None, ""))
    if est["watchdog"]:
        worst = max(w[0] for w in est["watchdog"]) / 1e3
        _, period_us, wd_us = est["watchdog"][0]
        limit = (wd_us + period_us) / 1e3
        rows.append(Row(f"4 device watchdog: last COMMAND -> safe, worst of {len(est['watchdog'])}",
                        f"{worst:.1f} ms", f"watchdog {wd_us / 1e3:g} ms + 1 period {period_us / 1e3:g} ms",
                        worst / limit, "<= 1"))
    print(f"rigloop engine benchmark ({'quick' if q else 'full'} run, {time.perf_counter() - t_start:.0f} s; "
          f"{os.cpu_count()} cores; {time.strftime('%Y-%m-%d %H:%M')})")
    print(format_table(rows))
    print()
    print("per-sample stage costs (us, best of 3 loops, in one process, no I/O wait):")
    for name, us in stages.items():
        mark = "*" if name in IN_COMPUTE_US else " "
        print(f"  {mark} {name:40s} {us:7.2f}")
    inside = sum(stages[k] for k in IN_COMPUTE_US)
    print(f"    (* = inside the engine's compute_us: {inside:.1f} us summed, engine median {c50:.1f} us)")
    rt = [r["engine"] for r in timing]
    print(f"sessions: ceiling {eng['samples']} samples ({eng['outcome']}); 1 kHz "
          + "; ".join(f"{r['summary'].get('samples')} samples ({r['outcome']}), lost {r['summary'].get('lost_samples')}, "
                      f"late ticks {r['summary'].get('late_ticks')}" for r in rt))
    print(f"scheduling: bare hosts {bare['sched']!r}; sleep loop {timing[0]['sleep_prio']['sched']!r}; "
          f"frames: SAMPLE {bare['sizes'][0]} B, COMMAND {bare['sizes'][1]} B")
    write_json(args.json, "engine", rows, {"stages_us": stages, "estop_ms": e, "relay_ms": relay})
    return 0


if __name__ == "__main__":
    sys.exit(main())
