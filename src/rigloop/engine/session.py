"""A session's life around the loop: folder and log, link, handshake, run, summary, files, exit code.

Part of :class:`rigloop.engine.loop.Engine`; the per-sample work is in :mod:`.loop`.
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass
from pathlib import Path

from rigloop.engine.handshake import EngineError, handshake
from rigloop.engine.records import EventRecord, Trip
from rigloop.engine.recorder import SessionRecorder, describe_os_error, make_session_dir
from rigloop.engine.states import State
from rigloop.engine.supervisor import Supervisor
from rigloop.engine.timing import LogHistogram
from rigloop.engine.tunables import TUNABLE_KEYS, control_params_from_config
from rigloop.exit_codes import EXIT_INTERNAL, EXIT_OK, EXIT_PLAN_FAILED, EXIT_SIGNAL, EXIT_TRIPPED
from rigloop.plain_data import plain

log = logging.getLogger("rigloop.engine")

LOCKSTEP_STALE_FLOOR_S = 0.5   # wall seconds without a sample before a lockstep run trips stale


class SessionRefused(EngineError):
    """The session cannot start for a reason the user fixes (recording folder, disk space):
    refused before anything is made or moves; ``rigloop run`` exits 2."""


class _QuietFileHandler(logging.FileHandler):
    """engine.log on a disk that fills up: stop logging there instead of printing tracebacks."""

    def handleError(self, record) -> None:  # noqa: N802 - logging's name
        self.failed = True


@dataclass
class RunResult:
    outcome: str                      # completed | tripped | stopped
    exit_code: int
    session_dir: Path | None
    trip: Trip | None
    summary: dict
    stop_reason: str
    plan: dict | None = None


class SessionLifecycle:
    """Set up, run and end one session; the loop's methods come from the engine class."""

    def _preflight(self) -> None:
        """Refuse (SessionRefused) before creating anything: unusable folder, too little space."""
        from rigloop.engine.disk_budget import recording_dir_problem, space_problem

        problem = recording_dir_problem(self.out_dir)
        if problem is not None:
            raise SessionRefused(f"recording folder {self.out_dir} {problem}")
        duration = self.duration_s if self._duration_given else None
        problem = space_problem(self.cfg, self.out_dir, duration)
        if problem is not None:
            raise SessionRefused(problem)

    def _setup_session(self) -> None:
        try:
            self.session_dir = make_session_dir(self.out_dir, self.cfg.rig)
        except OSError as exc:
            raise SessionRefused(f"cannot make a session folder in {self.out_dir}: "
                                 f"{describe_os_error(exc)}; choose another recording.dir (--out)") from None
        try:
            handler = _QuietFileHandler(self.session_dir / "engine.log", encoding="utf-8")
        except OSError as exc:
            self._remove_session_dir()
            raise SessionRefused(f"cannot write in {self.out_dir}: {describe_os_error(exc)}") from None
        handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
        log.addHandler(handler)
        log.setLevel(logging.INFO)
        self._log_handler = handler

    def _start_recording(self, url: str) -> None:
        """session.yaml, samples.csv and events.csv before the link opens, so that a failed
        start is recorded too. On a full disk: remove what was made and refuse."""
        try:
            self.recorder = SessionRecorder(self.session_dir, self.cfg, device_url=url,
                                            opener=self.recorder_opener)
        except OSError as exc:
            self._remove_session_dir()
            raise SessionRefused(f"cannot write the recording in {self.out_dir}: "
                                 f"{describe_os_error(exc)}; free some space or choose another "
                                 f"recording.dir (--out)") from None
        self.subscribers.insert(0, self.recorder)

    def _remove_session_dir(self) -> None:
        """Undo :meth:`_setup_session` (refused before anything ran: leave no empty folder)."""
        import shutil

        if self._log_handler is not None:
            log.removeHandler(self._log_handler)
            self._log_handler.close()
            self._log_handler = None
        if self.session_dir is not None:
            shutil.rmtree(self.session_dir, ignore_errors=True)
            self.session_dir = None

    def _take_scheduling(self) -> dict:
        """Ask for real-time scheduling when configured and meaningful; say what was obtained."""
        from rigloop.engine import priority

        asked = bool(self.cfg.engine.realtime) and self.realtime
        if not self.cfg.engine.realtime:
            obtained, text = "normal", "scheduling: not changed, normal priority (engine.realtime: false)"
        elif not self.realtime:
            obtained, text = "normal", "scheduling: not changed, normal priority"
        else:
            self._priority_before = priority.snapshot()
            obtained, text = priority.request_priority(realtime=asked)
        if self.cfg.engine.realtime and not self.realtime:
            text += " (lockstep simulation: device time is not wall time)"
        info = {"asked": "SCHED_FIFO" if asked else "none", "obtained": obtained,
                "result": text.removeprefix("scheduling: ")}
        log.info(text)
        self._emit(EventRecord("scheduling", text))
        if self.recorder is not None:
            self.recorder.update_meta(scheduling=info)
        return info

    def _open_link(self):
        cfg = self.cfg
        if self.link is not None:
            return getattr(self.link, "url", "custom link")
        key = None
        if getattr(cfg.device, "key_file", None) is not None:
            from rigloop.link.key_file import load_key

            key = load_key(cfg.device.key_file)     # checked at validation; re-read: it may have changed
            log.info("link authentication on: key from %s", cfg.device.key_file)
        if cfg.device.link == "sim":
            from rigloop.sim.launcher import start_sim

            self.sim = start_sim(cfg, **self.sim_extra)
            from rigloop.link.udp import UdpLink

            self.link = UdpLink(self.sim.host, self.sim.port, key=key)
            log.info("simulated device started: %s (plant %s, clock %s)", self.sim.url,
                     cfg.device.sim.plant, cfg.device.sim.clock)
            return f"sim://{cfg.device.sim.plant}"
        from rigloop.link import open_link

        self.link = open_link(cfg.device, key=key)
        return self.link.url

    def _handshake(self) -> None:
        self.hello = handshake(self.link, self.cfg)
        h = self.hello
        info = {"fw_version": h.fw_version, "n_channels": h.n_channels, "period_us": h.period_us,
                "watchdog_us": h.watchdog_us, "safe": h.safe, "u_min": h.u_min, "u_max": h.u_max, "name": h.name}
        if self.recorder:
            self.recorder.set_device_hello(info)
        log.info("device %r configured: %s", h.name, info)

    def run(self) -> RunResult:
        cfg = self.cfg
        url = cfg.device.url
        try:
            self._preflight()
            self._setup_session()
            self._start_recording(url)
        except SessionRefused:
            self._teardown()
            raise
        try:
            url = self._open_link()
            self.recorder.update_meta(device={"url": url, "hello": None})
            self.realtime = not (cfg.device.link == "sim" and cfg.device.sim.clock == "lockstep")
            log.info("rigloop engine for rig %r, link %s, %g Hz, pacing %s", cfg.rig, url,
                     cfg.device.rate_hz, cfg.device.pacing)
            self.scheduling = self._take_scheduling()
            self._handshake()
        except Exception as exc:
            msg = str(exc) if isinstance(exc, EngineError) else f"{type(exc).__name__}: {exc}"
            log.error("could not start: %s", msg)
            self._emit(EventRecord("link_fault", f"could not start: {msg}"))
            self.stop_reason = f"could not start: {msg}"
            self.outcome = "stopped"
            self._finish_files({})
            self._teardown()
            raise EngineError(msg) from exc
        self._prepare_run(url)
        try:
            self._loop()
        except Exception as exc:  # the safety path fails loudly: stop the rig, then report
            log.exception("internal error")
            self._trip(Trip("internal-error", f"{type(exc).__name__}: {exc}", t=self.t_last))
            self.outcome = "tripped"
            self.stop_reason = f"internal error: {exc}"
            self._finish_files(self._summary())
            self._teardown()
            raise
        summary = self._summary()
        self._finish_files(summary)
        self._teardown()
        return RunResult(self.outcome, self._exit_code(), self.session_dir, self.trip, summary,
                         self.stop_reason, self.plan_result)

    def _prepare_run(self, url: str) -> None:
        """Build the per-run state the loop works on (controller, reference, supervisor, counters)."""
        from rigloop.control.controller import Controller
        from rigloop.control.reference import build_reference
        from rigloop.control.shaping import ActuatorShaper

        cfg = self.cfg
        self.period = 1.0 / cfg.device.rate_hz
        self.scales = [(c.scale, c.offset) for c in cfg.channels]
        self.out_idx = cfg.channel_index(cfg.control.output)
        a = cfg.actuator
        self.safe = float(a.safe)
        self.shaper = ActuatorShaper(a.min, a.max, a.safe, a.slew_per_s)
        self.shaper.reset(self.safe)
        self.ramp_rate = a.slew_per_s if a.slew_per_s else (a.max - a.min)  # per second
        self.params = control_params_from_config(cfg)
        self.controller = Controller(self.params, ts=self.period, u_min=a.min, u_max=a.max, u_hold=self.safe)
        if self.plan:
            from rigloop.analysis.plan import plan_duration, plan_reference_spec

            self.ref_spec = plan_reference_spec(self.plan)
            if not self._duration_given:
                self.duration_s = plan_duration(self.plan)
        else:
            self.ref_spec = cfg.reference
        self.reference = build_reference(self.ref_spec, base_dir=cfg.base_dir)
        self.ref_origin = 0.0
        self.supervisor = Supervisor(cfg)
        if not self.realtime:
            # Lockstep: device time is not wall time, and a simulated device descheduled for a
            # moment on a busy machine is not a dead link. Keep at least LOCKSTEP_STALE_FLOOR_S.
            self.supervisor.stale_s = max(self.supervisor.stale_s, LOCKSTEP_STALE_FLOOR_S)
        self.lat_hist = LogHistogram()
        self.comp_hist = LogHistogram()
        self.lateness_hist = LogHistogram()
        self.n_samples = 0
        self.n_running = 0
        self.n_err = 0
        self.sum_e2 = 0.0
        self.max_abs_e = 0.0
        self.late_ticks = 0
        self.cmd_seq = 0
        self.u_cmd = self.safe
        self.t0_us = None
        self.run_t0 = None          # device time (s) of the first running sample
        self.t_last = None
        self.last_cmd_t = None
        self.min_offset = None
        self.last_sample_host = time.perf_counter()
        self.last_front_end = time.perf_counter()
        self._last_status = 0.0
        self._transition("connected")
        self._emit(EventRecord("connected", f"{url} device {self.hello.name!r}"))
        from rigloop.engine.link_events import RejectionReporter

        self._rejections = RejectionReporter(self.link.counters)
        if self.autostart:
            # ARM goes out right after the COMMAND answering the first SAMPLE (protocol §4.8, §11),
            # so the device ignores that COMMAND and takes the first one sent after ARM as its first.
            self._arm_after_command = "autostart"

    def _exit_code(self) -> int:
        if self.outcome == "completed":
            if self.plan_result is not None and not self.plan_result.get("passed", True):
                return EXIT_PLAN_FAILED
            return EXIT_OK
        if self.outcome == "tripped":
            return EXIT_TRIPPED
        if self._signal_stop:
            return EXIT_SIGNAL
        return EXIT_OK if self.outcome == "stopped" else EXIT_INTERNAL

    def status(self) -> dict:
        c = self.link.counters if self.link is not None else None
        # the banner shows the trip latched now, not the session's first one (session.yaml's)
        trip = self.latched_trip.as_dict() if self.latched_trip is not None else None
        return {
            "state": self.state.value,
            "t": self.t_last,
            "trip": trip if self.state in (State.TRIPPED, State.STOPPING) else None,
            "last_trip": trip,
            "session_dir": str(self.session_dir) if self.session_dir else None,
            "samples": self.n_samples,
            "lost_samples": c.lost_samples if c else 0,
            "rejected": c.rejected.as_dict() if c else {},
            "foreign_frames": c.foreign if c else 0,
            "latency_ms": self.lat_hist.summary(1e3),
            "lateness_ms": self.lateness_hist.summary(1e3),
            "compute_us": self.comp_hist.summary(1e6, 1),
            "late_ticks": self.late_ticks,
            "margins": self.supervisor.margins(),
            "device_status": self._status_bits,
            "params": {k: getattr(self.params, f) for k, f in TUNABLE_KEYS.items()},
            "reply": self.last_reply,
            "replies": list(self.replies),
            "rate_hz": self.cfg.device.rate_hz,
            "done": self._done,
            "runs_completed": self.runs_completed,
        }

    def _summary(self) -> dict:
        c = self.link.counters if self.link is not None else None
        n = self.n_running
        return {
            "samples": self.n_samples,
            "running_samples": n,
            "duration_s": round(self._t_rel_now(), 6),
            "rms_error": math.sqrt(self.sum_e2 / self.n_err) if self.n_err else None,
            "max_abs_error": self.max_abs_e if self.n_err else None,
            "lost_samples": c.lost_samples if c else 0,
            "rejected_frames": c.rejected.as_dict() if c else {},
            "foreign_frames": c.foreign if c else 0,
            "authenticated": bool(getattr(getattr(self.link, "auth", None), "keyed", False)),
            "late_ticks": self.late_ticks,
            "latency_ms": self.lat_hist.summary(1e3),
            "lateness_ms": self.lateness_hist.summary(1e3),
            "compute_us": self.comp_hist.summary(1e6, 1),
        }

    def _finish_files(self, summary: dict) -> None:
        self._report_rejections(final=True)
        if self.outcome == "running":          # not completed: an operator e-stop is a stop, not a trip
            self.outcome = "tripped" if self.trip is not None and self.trip.cause != "e-stop" else "stopped"
        if self.trip is not None and not self.stop_reason:
            self.stop_reason = self.trip.message
        self._emit(EventRecord("ended", f"outcome {self.outcome}: {self.stop_reason}", t=self.t_last))
        if self.recorder is not None:
            self.recorder.close(outcome=self.outcome, stop_reason=self.stop_reason,
                                trip=self.trip.as_dict() if self.trip else None, summary=plain(summary))
            if self.plan and self.recorder.failure is None:
                self.recorder.update_meta(plan=self._evaluate_plan())
            if self.recorder.meta_error is not None:
                log.error("session.yaml could not be written: %s", describe_os_error(self.recorder.meta_error))

    def _evaluate_plan(self) -> dict:
        try:
            from rigloop.analysis.plan import evaluate_plan
            from rigloop.analysis.session import load_session

            result = evaluate_plan(self.plan, load_session(self.session_dir))
            self.plan_result = result.as_dict()
            return self.plan_result
        except Exception as exc:  # noqa: BLE001 - a plan verdict never hides the recording
            log.exception("plan evaluation failed")
            self.plan_result = {"passed": False, "error": str(exc), "criteria": []}
            return self.plan_result

    def _teardown(self) -> None:
        if getattr(self, "_priority_before", None) is not None:
            from rigloop.engine import priority

            priority.restore(self._priority_before)
            self._priority_before = None
        if self.link is not None:
            try:
                self.link.close()
            except Exception:  # noqa: BLE001
                pass
        if self.sim is not None:
            self.sim.stop()
        for s in (self._wake_r, self._wake_w):
            s.close()
        if self._log_handler is not None:
            log.removeHandler(self._log_handler)
            self._log_handler.close()
