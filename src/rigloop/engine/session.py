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
from rigloop.engine.recorder import SessionRecorder, make_session_dir
from rigloop.engine.states import State
from rigloop.engine.supervisor import Supervisor
from rigloop.engine.timing import LogHistogram
from rigloop.engine.tunables import TUNABLE_KEYS, control_params_from_config
from rigloop.exit_codes import EXIT_INTERNAL, EXIT_OK, EXIT_PLAN_FAILED, EXIT_SIGNAL, EXIT_TRIPPED
from rigloop.plain_data import plain

log = logging.getLogger("rigloop.engine")

LOCKSTEP_STALE_FLOOR_S = 0.5   # wall seconds without a sample before a lockstep run trips stale


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

    def _setup_session(self) -> None:
        self.session_dir = make_session_dir(self.out_dir, self.cfg.rig)
        handler = logging.FileHandler(self.session_dir / "engine.log", encoding="utf-8")
        handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
        log.addHandler(handler)
        log.setLevel(logging.INFO)
        self._log_handler = handler

    def _open_link(self):
        cfg = self.cfg
        if self.link is not None:
            return getattr(self.link, "url", "custom link")
        if cfg.device.link == "sim":
            from rigloop.sim.launcher import start_sim

            self.sim = start_sim(cfg, **self.sim_extra)
            from rigloop.link.udp import UdpLink

            self.link = UdpLink(self.sim.host, self.sim.port)
            log.info("simulated device started: %s (plant %s, clock %s)", self.sim.url,
                     cfg.device.sim.plant, cfg.device.sim.clock)
            return f"sim://{cfg.device.sim.plant}"
        from rigloop.link import open_link

        self.link = open_link(cfg.device)
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
        from rigloop.control.controller import Controller
        from rigloop.control.reference import build_reference
        from rigloop.control.shaping import ActuatorShaper
        from rigloop.engine.priority import raise_priority

        cfg = self.cfg
        self._setup_session()
        url = "?"
        try:
            url = self._open_link()
            self.recorder = SessionRecorder(self.session_dir, cfg, device_url=url)
            self.subscribers.insert(0, self.recorder)
            realtime = not (cfg.device.link == "sim" and cfg.device.sim.clock == "lockstep")
            self.realtime = realtime
            log.info("rigloop engine for rig %r, link %s, %g Hz, pacing %s", cfg.rig, url,
                     cfg.device.rate_hz, cfg.device.pacing)
            log.info(raise_priority(realtime=realtime))
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
        if self.autostart:
            self._arm("autostart")
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
            "late_ticks": self.late_ticks,
            "latency_ms": self.lat_hist.summary(1e3),
            "lateness_ms": self.lateness_hist.summary(1e3),
            "compute_us": self.comp_hist.summary(1e6, 1),
        }

    def _finish_files(self, summary: dict) -> None:
        if self.outcome == "running":          # not completed: an operator e-stop is a stop, not a trip
            self.outcome = "tripped" if self.trip is not None and self.trip.cause != "e-stop" else "stopped"
        if self.trip is not None and not self.stop_reason:
            self.stop_reason = self.trip.message
        self._emit(EventRecord("ended", f"outcome {self.outcome}: {self.stop_reason}", t=self.t_last))
        if self.recorder is not None:
            self.recorder.close(outcome=self.outcome, stop_reason=self.stop_reason,
                                trip=self.trip.as_dict() if self.trip else None, summary=plain(summary))
            if self.plan:
                self.recorder.update_meta(plan=self._evaluate_plan())

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
