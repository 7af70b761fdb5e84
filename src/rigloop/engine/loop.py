"""The engine's sample path: read the link, supervise, estimate, command, record — at the device's pace.

Pacing (design §2): by default the device's sample clock sets the loop. Every SAMPLE is answered
with one COMMAND; if the host falls behind, every queued sample is still fed to the estimator and
recorded, and one COMMAND answers the newest (the others count as ``late``). With
``device.pacing: host`` a host timer sets the ticks and each tick uses the newest sample.

Safety (design §4, safety.md): a trip is acted on the moment it is decided — the STOP frame is
written to the link before anything else happens — and is latched until an explicit reset.
Front-end requests live in :mod:`.front_end`, the session's set-up and ending in :mod:`.session`;
this module is what runs once per sample.
"""

from __future__ import annotations

import logging
import math
import queue
import select
import socket
import sys
import time
from collections import deque
from pathlib import Path

from rigloop.engine.front_end import FrontEndRequests, _Request
from rigloop.engine.handshake import EngineError  # noqa: F401 - public name, imported from here
from rigloop.plain_data import plain
from rigloop.engine.records import EventRecord, TickRecord, Trip, num_or_none
from rigloop.engine.recorder import SessionRecorder, describe_os_error, utc_now_iso
from rigloop.engine.session import RunResult, SessionLifecycle  # noqa: F401 - RunResult is public here
from rigloop.engine.states import State, next_state
from rigloop.engine.tunables import control_params_from_config  # noqa: F401 - imported from here by bench/
from rigloop.link.base import LinkError
from rigloop.protocol.messages import Arm, Command, Fault, Hello, Sample, Status, Stop, StopReason

log = logging.getLogger("rigloop.engine")

ARMED = int(Status.ARMED)      # plain ints on the hot path (IntFlag arithmetic is slow)
STOP_LATCHED = int(Status.STOP_LATCHED)
TRIP_TAIL_S = 0.25          # headless runs keep recording this long after a trip (safe rows on record)


class Engine(SessionLifecycle, FrontEndRequests):
    """One session on one device. Build it, optionally add subscribers, call :meth:`run`."""

    def __init__(self, cfg, *, out_dir: Path | str | None = None, link=None, autostart: bool = True,
                 duration_s: float | None = None, exit_after_trip: bool = True,
                 front_end: str = "cli", control_conn=None, front_end_timeout_s: float | None = None,
                 status_sink=None, sim_extra: dict | None = None, end_when_done: bool = True,
                 open_loop=None):
        self.cfg = cfg
        self.out_dir = Path(out_dir) if out_dir is not None else Path(cfg.recording.dir)
        self.link = link
        self.autostart = autostart
        self._duration_given = duration_s is not None      # an explicit length beats a plan's own
        self.duration_s = duration_s if duration_s is not None else cfg.duration_s
        self.exit_after_trip = exit_after_trip
        self.front_end = front_end
        self.control_conn = control_conn
        self.front_end_timeout_s = front_end_timeout_s
        self.status_sink = status_sink
        self.sim_extra = sim_extra or {}
        self.end_when_done = end_when_done
        #: optional ``f(t_run) -> u``: drive the actuator open loop (bump tests); limits still apply
        self.open_loop = open_loop
        self.subscribers: list = []
        self.state = State.DISCONNECTED
        self._requests: queue.SimpleQueue[_Request] = queue.SimpleQueue()
        self._wake_r, self._wake_w = socket.socketpair()
        self._wake_r.setblocking(False)
        self._wake_w.setblocking(False)
        self._log_handler: logging.Handler | None = None
        self.trip: Trip | None = None           # the session's first trip (session.yaml)
        self.latched_trip: Trip | None = None   # the trip latched now, or last (the front end's banner)
        self.runs_completed = 0                 # runs that reached duration_s (front end: back to idle)
        self.pending_trip: Trip | None = None
        self.stop_reason = ""
        self.outcome = "running"
        self.session_dir: Path | None = None
        self.recorder: SessionRecorder | None = None
        self.sim = None
        self.hello = None
        self.last_reply: dict | None = None
        self.replies: deque = deque(maxlen=8)     # recent request replies, oldest first
        self._done = False
        self._signal_stop = False
        self._tail_until: float | None = None
        self._ramp_then: str | None = None
        self.plan = cfg.plan
        self.plan_result: dict | None = None
        self._stop_check: int | None = None   # newest sample seq on the host when STOP went out
        self._stop_dev_t: float | None = None  # device time STOP left the host (estimate), if known
        self._last_seq = 0
        self._rx_newest_seq = 0               # newest sample seq received (handled or not)
        self.t_last: float | None = None      # device time of the newest sample (s), None before any
        self._armed_seen = False
        self._arm_wait = 0
        self._autostart_pending = False       # arm once the noise floor is measured
        self._status_bits = 0                 # the device's status in its newest sample
        self._arm_after_command: str | None = None   # autostart: ARM right after the next COMMAND
        self._rejections = None               # link_events.RejectionReporter once connected
        self._wall_minus_perf = time.time() - time.perf_counter()
        self.realtime = True
        self.scheduling: dict | None = None
        #: opens the recorder's CSV files (tests inject failing files here); None = plain files
        self.recorder_opener = None

    def add_subscriber(self, sub) -> None:
        self.subscribers.append(sub)

    # ------------------------------------------------------------------ the loop
    def _loop(self) -> None:
        link = self.link
        link_fd = link.fileno() if hasattr(link, "fileno") else None
        wake_fd = self._wake_r.fileno()
        conn = self.control_conn
        # select() takes sockets everywhere but pipes and serial handles only on POSIX: on
        # Windows the front end's pipe is polled and the loop wakes at least every millisecond.
        poll_conn = conn is not None and sys.platform == "win32"
        conn_fd = conn.fileno() if conn is not None and not poll_conn else None
        host_pacing = self.cfg.device.pacing == "host"
        next_tick = time.perf_counter() + self.period
        pending: list = []
        rfds = [wake_fd] + ([link_fd] if link_fd is not None else []) + ([conn_fd] if conn_fd is not None else [])
        stale_s = self.supervisor.stale_s
        while not self._done:
            now = time.perf_counter()
            timeout = max(0.0, min(0.05, self.last_sample_host + stale_s - now + 1e-4))
            if host_pacing:
                timeout = max(0.0, min(timeout, next_tick - now))
            if link_fd is None or poll_conn:
                timeout = min(timeout, 0.001)
            try:
                ready, _, _ = select.select(rfds, [], [], timeout)
            except InterruptedError:  # pragma: no cover - PEP 475 retries; kept for old platforms
                ready = [wake_fd]
            if wake_fd in ready:
                try:
                    while self._wake_r.recv(4096):
                        pass
                except (BlockingIOError, InterruptedError):
                    pass
            if (conn_fd is not None and conn_fd in ready) or (poll_conn and self.control_conn is not None):
                self._read_front_end()
                if self.control_conn is None and conn_fd is not None:   # front end gone: stop watching
                    rfds.remove(conn_fd)
                    conn_fd = None
            self._drain_requests()
            msgs = link.recv(0.0)
            t_arrival = time.perf_counter()
            self._wall_minus_perf = time.time() - t_arrival
            samples = self._route(msgs)
            if samples:
                self.last_sample_host = t_arrival
                if host_pacing:
                    pending.extend(samples)
                else:
                    self._handle_batch(samples, t_arrival, rx_first=self._kernel_rx(msgs, samples, t_arrival))
            now = time.perf_counter()
            if host_pacing and now >= next_tick:
                if pending:
                    self._handle_batch(pending, now, deadline=next_tick)
                    pending = []
                next_tick += self.period
                if next_tick < now:
                    next_tick = now + self.period
            self._periodic(now)

    def _kernel_rx(self, msgs, samples, t_arrival: float) -> float | None:
        """When the oldest sample of this batch reached the host's socket (perf_counter clock),
        from the kernel's receive timestamp where the link offers one; else None."""
        times = getattr(self.link, "last_rx_times", None)
        if not times or len(times) != len(msgs):
            return None
        first = times[msgs.index(samples[0])]
        if first <= 0.0:
            return None
        t = first - self._wall_minus_perf           # wall clock -> perf_counter
        return t if t <= t_arrival else t_arrival

    def _route(self, msgs) -> list:
        for m in reversed(msgs):   # before any FAULT in this read trips: these samples predate STOP
            if isinstance(m, Sample):
                self._rx_newest_seq = m.seq
                break
        samples = []
        for m in msgs:
            if isinstance(m, Sample):
                samples.append(m)
            elif isinstance(m, Fault):
                self._on_fault(m)
            elif isinstance(m, Hello):
                self._emit(EventRecord("warning", f"unexpected HELLO from the device (name {m.name!r}, "
                                                  f"status 0x{m.status:02x}); it may have restarted"))
        return samples

    def _on_fault(self, m) -> None:
        code = int(m.code)
        t = self._dev_t(m.t_us) if self.t0_us is not None else None
        names = {1: "command watchdog expired", 2: "sensor fault", 3: "hardware fault",
                 4: "configuration rejected", 5: "receive buffer overflow"}
        text = names.get(code, f"vendor fault 0x{code:04x}")
        self._emit(EventRecord("device_fault", f"device reports FAULT {code}: {text}", t=t, value=m.value))
        if self.state in (State.RUNNING, State.STOPPING) or code != 1:
            cause = "device-watchdog" if code == 1 else "device-fault"
            self._trip(Trip(cause, f"the device reports: {text}", t=t, value=m.value))

    def _dev_t(self, t_us: int) -> float:
        return (t_us - self.t0_us) * 1e-6

    def _handle_batch(self, samples, t_arrival: float, deadline: float | None = None,
                      rx_first: float | None = None) -> None:
        """Feed every sample to supervisor/estimator/recorder; command once, for the newest.

        Timing, per COMMAND: ``latency`` runs from the moment the newest sample reached the host
        (the kernel's receive stamp where available) to the COMMAND leaving; ``lateness`` is how
        long the host took to wake for the batch — from the oldest sample's arrival to the loop
        reading it (or, with host pacing, from the tick's deadline to the COMMAND), the figure a
        bare sleep loop's wake-up lateness compares with.
        """

        n = len(samples)
        late = n - 1
        if late:
            self.late_ticks += late
        for i, s in enumerate(samples):
            t_start = time.perf_counter()
            newest = i == n - 1
            if self.t0_us is None:
                self.t0_us = s.t_us
            t = self._dev_t(s.t_us)
            dt = t - self.t_last if self.t_last is not None else self.period
            self.t_last = t
            raw = s.channels
            values = [raw[j] * sc + off for j, (sc, off) in enumerate(self.scales)] if len(raw) == len(self.scales) \
                else [math.nan] * len(self.scales)
            y = values[self.out_idx]
            self._status_bits = s.status
            self._last_seq = s.seq
            if self._stop_check is not None and self._sent_after_stop(s.seq, t):
                self._confirm_stop(t, s.status)
            running = self.state is State.RUNNING
            trip = self._check_arm_confirmed(t, s.status) \
                or self.supervisor.check_status(t, s.status, self._armed_seen and self.state in (State.RUNNING, State.STOPPING)) \
                or self.supervisor.check_sample(t, values, running)
            if trip is None and self._armed_seen and self.state in (State.RUNNING, State.STOPPING) \
                    and s.status & ARMED and not s.status & STOP_LATCHED:
                trip = self.supervisor.check_applied(t, s.last_cmd_seq, s.applied)
            if trip is not None:
                self._trip(trip)
            elif self.state is State.IDLE:
                if self.supervisor.idle_sample(values):      # the noise floor, before ARM
                    self._noise_floor_fixed(self.supervisor.fix_noise_floor())
            r = dr = e = f_hat = math.nan
            state = self.state
            if state is State.RUNNING:
                if self.run_t0 is None:
                    self.run_t0 = t
                    if self.open_loop is None:
                        self._start_blend(y)
                t_rel = t - self.run_t0
                if self.open_loop is not None:           # bump tests: u from a profile, no law
                    observe = getattr(self.open_loop, "observe", None)
                    if observe is not None:              # a profile that holds until settled
                        observe(t_rel, y)
                    u_req = self.open_loop(t_rel)
                else:
                    r, dr, ddr = self.reference.at(t_rel - self.ref_origin)
                    u_req = self.controller.step(y, s.applied, r, dr, ddr)
                    f_hat = self.controller.f_hat
                    e = y - r
                trip = self.supervisor.check_output(t, u_req) \
                    or self.supervisor.check_response(t, y, s.applied, r)
                if trip is not None:
                    self._trip(trip)
                    u_req = self.safe
                else:
                    self.n_running += 1
                    if e == e:
                        self.n_err += 1
                        self.sum_e2 += e * e
                        if abs(e) > self.max_abs_e:
                            self.max_abs_e = abs(e)
                    self._check_run_time(t, t_rel)
            else:
                u_req = self.safe
            latency_ms = math.nan
            lateness_ms = math.nan
            if newest:
                if self.state is State.STOPPING:
                    u_cmd = self._ramp_step(t)
                elif self.state is State.RUNNING:
                    cmd_dt = t - self.last_cmd_t if self.last_cmd_t is not None else self.period
                    u_cmd = self.shaper.shape(u_req, cmd_dt if cmd_dt > 0 else self.period)
                else:
                    u_cmd = self.safe
                    self.shaper.reset(self.safe)
                self.cmd_seq = (self.cmd_seq + 1) & 0xFFFFFFFF
                try:
                    self.link.send(Command(self.cmd_seq, s.seq, float(u_cmd)))
                except LinkError as exc:  # a link that cannot take a COMMAND is lost: trip, no traceback
                    self._trip(Trip("link-lost", f"could not send a COMMAND: {exc}", t=t))
                t_sent = time.perf_counter()
                self.supervisor.note_command(
                    u_cmd, self.cmd_seq if self.state in (State.RUNNING, State.STOPPING) else None)
                if self._arm_after_command is not None:
                    source, self._arm_after_command = self._arm_after_command, None
                    if self.state is State.IDLE:     # a first sample may already have tripped
                        self._arm(source)
                self.u_cmd = u_cmd
                self.last_cmd_t = t
                t_from = rx_first if (rx_first is not None and n == 1) else t_arrival
                latency_ms = (t_sent - t_from) * 1e3
                self.lat_hist.add(latency_ms * 1e-3)
                if deadline is not None:
                    lateness_ms = (t_sent - deadline) * 1e3
                elif not self.realtime:
                    lateness_ms = math.nan   # lockstep: device time is not wall time
                elif rx_first is not None:
                    lateness_ms = (t_arrival - rx_first) * 1e3
                else:
                    off = t_arrival - t
                    if self.min_offset is None or off < self.min_offset:
                        self.min_offset = off
                    else:
                        self.min_offset += 1e-4 * max(dt, 0.0)  # let the estimate follow clock drift
                    lateness_ms = (t_sent - (t + self.min_offset)) * 1e3
                if lateness_ms == lateness_ms:
                    self.lateness_hist.add(max(lateness_ms, 0.0) * 1e-3 + 1e-9)
                # lockstep: the simulated device waits for the host, so "falling behind" has no meaning
                if self.realtime and (late or lateness_ms > self.period * 1e3) and self.state is State.RUNNING:
                    trip = self.supervisor.check_overrun(t, t_sent)
                    if trip is not None:
                        self._trip(trip)
            self.n_samples += 1
            compute_us = (time.perf_counter() - t_start) * 1e6
            self.comp_hist.add(compute_us * 1e-6)
            rec = TickRecord(t, s.seq, r, dr, y, e, self.u_cmd, s.applied, f_hat, state.value, values,
                             s.status, latency_ms, compute_us, late if newest else 0, lateness_ms)
            self._publish(rec)
        if self._autostart_pending and self.state is State.IDLE and self.supervisor.noise_ready:
            self._autostart_pending = False      # the noise floor is measured: arm after the next COMMAND
            self._arm_after_command = "autostart"
        self._check_tail()

    def _start_blend(self, y: float) -> None:
        """Start the configured profile from its beginning, from where the rig is: blend from the
        measured y into r(0). Every arm does this (a re-arm after a trip or a completed run starts
        the profile afresh, not from the previous arm's blend or a manual setpoint)."""
        from rigloop.control.reference import StartFrom, build_reference

        base = build_reference(self.ref_spec, base_dir=self.cfg.base_dir)
        self.reference = base
        r0 = base.at(0.0)[0]
        if not math.isfinite(y) or y == r0:
            return
        blend = float(self.ref_spec.get("blend_s") or 1.0)
        self.reference = StartFrom(base, y, blend)
        out = self.cfg.control.output
        unit = next((f" {c.unit}" for c in self.cfg.channels if c.name == out and c.unit), "")
        self._emit(EventRecord("profile", f"armed with {out} at {y:.6g}{unit}: the reference starts there and "
                                          f"blends into the profile's first level {r0:.6g}{unit} over {blend:g} s",
                               t=self.t_last))

    def _send_stop(self, reason) -> None:
        """Write STOP to the wire now and remember to check that the device latched it."""

        self.link.send(Stop(reason))
        # Judge only samples the device sent after it could have seen this STOP: not those
        # already received (a frozen host reads a backlog of ARMED samples together with the
        # watchdog FAULT), nor - on a real-time clock - those the device sent while the host was
        # not reading: the device's clock ran on by the wall time since the newest sample came.
        self._stop_check = self._rx_newest_seq
        if self.realtime and self.t_last is not None:
            self._stop_dev_t = self.t_last + max(0.0, time.perf_counter() - self.last_sample_host)
        else:
            self._stop_dev_t = None

    def _sent_after_stop(self, seq: int, t: float) -> bool:
        """True when sample ``seq`` (device time ``t``) left the device after STOP reached it:
        two sequence numbers past the newest sample received when STOP went out (one may be in
        flight) and, on a real-time clock, a period past STOP's estimated device time."""
        ahead = (seq - self._stop_check) & 0xFFFFFFFF
        if ahead < 2 or ahead >= 1 << 31:
            return False
        return self._stop_dev_t is None or t >= self._stop_dev_t + self.period

    def _confirm_stop(self, t: float, status: int) -> None:
        self._stop_check = None
        self._stop_dev_t = None
        if status & ARMED and not status & STOP_LATCHED:
            self._emit(EventRecord(
                "warning", "the device did not latch STOP (still ARMED, no STOP_LATCHED); it may ignore STOP — "
                "the host keeps commanding the safe value; check the firmware", t=t, value=float(status)))

    def _check_arm_confirmed(self, t: float, status: int) -> Trip | None:
        """After ARM, samples already on their way still carry the old latched bits (a WATCHDOG
        from an earlier session, say): judge the device's status only once it shows ARMED, and
        trip if it never does."""
        if self._armed_seen or self.state is not State.RUNNING:
            return None
        if status & ARMED:
            self._armed_seen = True
            return None
        self._arm_wait += 1
        if self._arm_wait > max(self.cfg.limits.stale_periods, 10):
            return Trip("device-fault", f"the device did not confirm ARM within {self._arm_wait} samples "
                                        f"(status 0x{status:02x}); check its firmware and latches", t=t,
                        value=float(status))
        return None

    def _check_run_time(self, t: float, t_rel: float) -> None:
        trip = self.supervisor.check_duration(t, t_rel)
        if trip is not None:
            self._trip(trip)
            return
        finished = self.open_loop is not None and getattr(self.open_loop, "finished", False)
        if (finished or self.duration_s is not None and t_rel >= self.duration_s) and self._ramp_then is None:
            self.stop_reason = "profile finished" if finished else "duration reached"
            # headless: the session ends; with a front end: back to idle, ready to arm again
            self._ramp_down(then="complete" if self.end_when_done else "idle")

    def _ramp_step(self, t: float) -> float:
        """One step of a ramped stop: down at the actuator slew, then STOP when safe is reached."""

        dt = t - self.last_cmd_t if self.last_cmd_t is not None else self.period
        step = self.ramp_rate * max(dt, self.period)
        u = self.u_cmd
        u = max(u - step, self.safe) if u > self.safe else min(u + step, self.safe)
        if u == self.safe:
            reason = StopReason.TRIP if self.pending_trip is not None else StopReason.OPERATOR
            self._send_stop(reason)
            self._emit(EventRecord("stop", "ramped stop complete; STOP sent", t=t))
            if self.pending_trip is not None:
                self.state = next_state(self.state, "trip")
                self.pending_trip = None
                if self.exit_after_trip:
                    self._tail_until = t + TRIP_TAIL_S
            else:
                self._transition("ramped_out")
                if self._ramp_then in ("complete", "idle"):
                    self.runs_completed += 1
                if self._ramp_then == "complete":
                    self.outcome = "completed"
                    self._done = True
                elif self._ramp_then == "quit":
                    self._done = True
            self._ramp_then = None
        self.shaper.reset(u)
        return u

    def _check_tail(self) -> None:
        if self._tail_until is not None and self.t_last is not None and self.t_last >= self._tail_until:
            self._done = True

    # ------------------------------------------------------------------ actions
    def _transition(self, event: str) -> None:
        new = next_state(self.state, event)
        if new is not self.state:
            log.info("state %s -> %s (%s)", self.state.value, new.value, event)
        self.state = new

    def _trip(self, trip: Trip) -> None:
        """Latch a trip. Immediate: STOP goes out now. Ramped: ramp down first, then STOP."""

        if self.state is State.TRIPPED:
            return
        if self.trip is None:
            self.trip = trip
        if trip.stop == "ramped" and self.state is State.RUNNING:
            self.latched_trip = trip
            self.pending_trip = trip
            self.state = State.STOPPING
            log.warning("trip (ramped stop): %s", trip.message)
            self._emit(EventRecord("trip", f"{trip.cause}: {trip.message} (ramped stop)", t=trip.t,
                                   value=num_or_none(trip.value), limit=num_or_none(trip.limit)))
            return
        if self.state is State.STOPPING and self.pending_trip is not None and trip.stop == "ramped":
            return
        self.latched_trip = trip
        reason = StopReason.ESTOP if trip.cause == "e-stop" else StopReason.TRIP
        try:
            self._send_stop(reason)           # first: the wire
        except Exception as exc:  # noqa: BLE001 - a dead link is itself a reason, keep going
            log.error("could not send STOP: %s", exc)
        self.u_cmd = self.safe
        self.shaper.reset(self.safe)
        self.pending_trip = None
        self.state = next_state(self.state, "trip")
        log.warning("TRIP (%s stop): %s", trip.stop, trip.message)
        self._emit(EventRecord("trip", f"{trip.cause}: {trip.message}", t=trip.t,
                               value=num_or_none(trip.value), limit=num_or_none(trip.limit)))
        if self.exit_after_trip:
            base = self.t_last if self.t_last is not None else 0.0
            self._tail_until = base + TRIP_TAIL_S

    def _ramp_down(self, then: str | None = None) -> None:
        if self.state is State.RUNNING:
            self._transition("ramp_down")
            self._ramp_then = then
            self._emit(EventRecord("stop", f"ramped stop requested ({self.stop_reason or 'operator'})", t=self.t_last))
        elif then in ("complete", "quit"):
            self._done = True
            if then == "complete":
                self.outcome = "completed"

    def _arm(self, source: str) -> None:
        self._transition("arm")
        self.link.send(Arm())
        self._armed_seen = False
        self._arm_wait = 0
        self.controller.reset(self.safe)
        self.shaper.reset(self.safe)
        self.run_t0 = None
        self.ref_origin = 0.0
        self._emit(EventRecord("armed", f"armed ({source})", t=self.t_last))
        self._feedback_checks_armed()

    def _feedback_checks_armed(self) -> None:
        """Restart the plausibility checks (fixing the noise floor if the idle samples did not)."""
        first = self.supervisor.noise_floor is None
        warnings = self.supervisor.on_arm()
        if first:
            self._noise_floor_fixed(warnings)

    def _noise_floor_fixed(self, warnings: list[str]) -> None:
        """Keep the noise floor for session.yaml and say which rate limits it makes doubtful.

        Only the recorder's copy of the metadata changes here: rewriting session.yaml means an
        fsync, which on a busy disk takes longer than many sample periods; the file gets it with
        the outcome (or with the next rewrite of the metadata)."""
        for text in warnings:
            self._emit(EventRecord("warning", text, t=self.t_last))
        if self.recorder is not None:
            self.recorder.meta["noise_floor"] = plain(self.supervisor.noise_floor)

    def _t_rel_now(self) -> float:
        if self.run_t0 is None or self.t_last is None:
            return 0.0
        return self.t_last - self.run_t0

    # ------------------------------------------------------------------ periodic work
    def _periodic(self, now: float) -> None:
        if self.state is not State.DISCONNECTED and not self._done:
            trip = self.supervisor.check_stale(self.t_last, now - self.last_sample_host)
            if trip is not None and self.state is not State.TRIPPED:
                self._trip(trip)
                self._tail_until = None
                if self.exit_after_trip:
                    self._done = True
            elif trip is not None and self.exit_after_trip and self._tail_until is not None:
                self._done = True  # no more rows will come: finish now
        self._report_rejections(now)
        rejected = self.link.counters.rejected.total_rejected
        trip = self.supervisor.check_link(self.t_last, rejected, now)
        if trip is not None and self.state is not State.TRIPPED:
            self._emit(EventRecord("link_fault", trip.message, t=self.t_last, value=trip.value, limit=trip.limit))
            self._trip(trip)
        if self.front_end_timeout_s is not None and now - self.last_front_end > self.front_end_timeout_s:
            self._front_end_lost(f"no message for {now - self.last_front_end:.1f} s")
        for sub in self.subscribers:
            try:
                sub.poll(now)
            except Exception as exc:  # noqa: BLE001
                self._subscriber_failed(sub, exc)
        if self.status_sink is not None and now - self._last_status >= 0.1:
            self._last_status = now
            try:
                self.status_sink(self.status())
            except Exception:  # noqa: BLE001 - a display sink never stops the rig
                log.exception("status sink failed")

    def _report_rejections(self, now: float | None = None, final: bool = False) -> None:
        """Foreign, unauthenticated and implausible frames as rate-limited events (link_events)."""
        if self._rejections is None:
            return
        for kind, text, total in self._rejections.poll(time.perf_counter() if now is None else now, final):
            self._emit(EventRecord("link_rejected", f"{kind}: {text}", t=self.t_last, value=float(total)))

    def _publish(self, rec: TickRecord) -> None:
        for sub in self.subscribers:
            try:
                sub.on_tick(rec)
            except Exception as exc:  # noqa: BLE001
                self._subscriber_failed(sub, exc)

    def _emit(self, ev: EventRecord) -> None:
        if not ev.wall_utc:
            ev.wall_utc = utc_now_iso()
        log.info("event %s: %s", ev.kind, ev.detail)
        for sub in self.subscribers:
            try:
                sub.on_event(ev)
            except Exception as exc:  # noqa: BLE001
                if getattr(sub, "critical", False) and ev.kind != "trip":
                    self._subscriber_failed(sub, exc)

    def _subscriber_failed(self, sub, exc: Exception) -> None:
        if getattr(sub, "critical", False):
            self.subscribers.remove(sub)
            why = describe_os_error(exc) if isinstance(exc, OSError) else f"{type(exc).__name__}: {exc}"
            self._trip(Trip("recorder-failed", f"the recorder could not write ({why}); stopped rather "
                                               f"than running unrecorded", t=self.t_last))   # STOP first
            log.error("recorder failed: %s", why)
        else:
            log.warning("display subscriber %r failed: %s (removed)", sub, exc)
            self.subscribers.remove(sub)
