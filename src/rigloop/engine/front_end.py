"""Requests from a front end (CLI keys, signal handlers, the desktop app's pipe).

They arrive through :meth:`FrontEndRequests.request`, which queues them and wakes the loop at
once (also from a signal handler); the loop drains the queue between samples, so a request never
races the sample path. Part of :class:`rigloop.engine.loop.Engine`.
"""

from __future__ import annotations

import logging
import math
import queue
import time
from dataclasses import dataclass, field

from rigloop.engine.records import EventRecord, Trip, num_or_none
from rigloop.engine.states import State, TransitionRefused
from rigloop.engine.tunables import TUNABLE_KEYS, control_params_from_config
from rigloop.protocol.messages import StopReason

log = logging.getLogger("rigloop.engine")


@dataclass
class _Request:
    kind: str
    args: dict = field(default_factory=dict)


class FrontEndRequests:
    """The request half of the engine: queue, wake, handle, reply; notice a front end gone."""

    def request(self, kind: str, **args) -> None:
        """Queue a request and wake the loop at once (safe from signal handlers and threads)."""
        self._requests.put(_Request(kind, args))
        try:
            self._wake_w.send(b"\x01")
        except (BlockingIOError, OSError):
            pass

    def _drain_requests(self) -> None:
        while True:
            try:
                req = self._requests.get_nowait()
            except queue.Empty:
                return
            try:
                self._handle_request(req)
            except TransitionRefused as exc:
                self._reply(req, False, str(exc))

    def _reply(self, req: _Request, ok: bool, message: str) -> None:
        self.last_reply = {"id": req.args.get("id"), "kind": req.kind, "ok": ok, "message": message}
        self.replies.append(self.last_reply)
        if not ok:
            log.info("request %s refused: %s", req.kind, message)

    def _handle_request(self, req: _Request) -> None:
        k = req.kind
        a = req.args
        if k == "estop":
            src = a.get("source", self.front_end)
            self._signal_stop = self._signal_stop or bool(a.get("signal"))
            if self.state is State.TRIPPED:
                self._send_stop(StopReason.ESTOP)
                self._emit(EventRecord("estop", f"e-stop ({src}) while already tripped; STOP re-sent", t=self.t_last))
            else:
                self._trip(Trip("e-stop", f"operator e-stop ({src})", t=self.t_last))   # the wire first
                self._emit(EventRecord("estop", f"e-stop ({src})", t=self.t_last))
            self.stop_reason = self.stop_reason or f"operator e-stop ({src})"
            self._reply(req, True, "e-stop sent")
        elif k == "stop":
            self._transition("stop")
            self._send_stop(StopReason.OPERATOR)
            self.u_cmd = self.safe
            self.shaper.reset(self.safe)
            self._ramp_then = None
            self.pending_trip = None
            self._emit(EventRecord("stop", f"stop ({a.get('source', self.front_end)}): safe output at once", t=self.t_last))
            self._reply(req, True, "stopped")
        elif k == "ramp_down":
            self.stop_reason = a.get("reason", "operator ramp-down")
            self._ramp_down(then=a.get("then"))
            self._reply(req, True, "ramping down")
        elif k == "arm":
            if self.state is State.TRIPPED:
                raise TransitionRefused("the rig is tripped: reset first, then arm")
            self._arm(a.get("source", self.front_end))
            self._reply(req, True, "armed")
        elif k == "reset":
            self._transition("reset")
            self._emit(EventRecord("reset", "trip reset by the operator; output stays safe until armed", t=self.t_last))
            self._tail_until = None
            self._reply(req, True, "reset")
        elif k == "set":
            self._set_param(req)
        elif k == "setpoint":
            self._set_setpoint(req)
        elif k == "profile":
            self._start_profile(req)
        elif k == "quit":
            self.stop_reason = self.stop_reason or a.get("reason", "operator quit")
            if self.state is State.RUNNING:
                self._ramp_down(then="quit")
            elif self.state is State.STOPPING:
                self._ramp_then = "quit"
            else:
                self._done = True
            self._reply(req, True, "quitting")
        elif k == "ping":
            pass
        else:
            self._reply(req, False, f"unknown request {k!r}")

    def _set_param(self, req: _Request) -> None:
        from rigloop.config import ConfigError, apply_overrides, parse_config

        key = req.args["key"]
        value = req.args["value"]
        if key not in TUNABLE_KEYS:
            self._reply(req, False, f"{key} cannot be changed while running; tunable: {', '.join(TUNABLE_KEYS)}")
            return
        try:
            import yaml

            text = value if isinstance(value, str) else yaml.safe_dump(value).strip().removesuffix("...").strip()
            raw = apply_overrides(self.cfg.raw, [f"{key}={text}"])
            new_cfg = parse_config(raw, base_dir=self.cfg.base_dir, source="live change")
        except ConfigError as exc:
            self._reply(req, False, "; ".join(f"{p.key}: {p.message}" for p in exc.problems))
            return
        except ValueError as exc:
            self._reply(req, False, str(exc))
            return
        new_params = control_params_from_config(new_cfg)
        changes = {f: getattr(new_params, f) for f in TUNABLE_KEYS.values()
                   if getattr(new_params, f) != getattr(self.params, f)}
        old = {f: getattr(self.params, f) for f in changes}
        try:
            if changes:
                self.controller.update_params(**changes)
        except ValueError as exc:
            self._reply(req, False, str(exc))
            return
        self.cfg = new_cfg
        self.params = new_params
        detail = ", ".join(f"{f}={changes[f]!r} (was {old[f]!r})" for f in changes) or f"{key} unchanged"
        num = num_or_none(changes[TUNABLE_KEYS[key]]) if TUNABLE_KEYS[key] in changes else None
        self._emit(EventRecord("param", f"{key}: {detail}", t=self.t_last, value=num if isinstance(num, float) else None))
        self._reply(req, True, detail)

    def _set_setpoint(self, req: _Request) -> None:
        from rigloop.control.reference import with_setpoint

        level = float(req.args["level"])
        blend = float(req.args.get("blend_s", 1.0))
        lim = self.cfg.limits.channels.get(self.cfg.control.output)
        if lim is not None and ((lim.max is not None and level > lim.max) or (lim.min is not None and level < lim.min)):
            self._reply(req, False, f"setpoint {level:g} lies outside the limits of {self.cfg.control.output} "
                                    f"[{lim.min}, {lim.max}]")
            return
        if not (math.isfinite(level) and math.isfinite(blend) and blend > 0):
            self._reply(req, False, "setpoint and blend time must be finite numbers, blend_s > 0 "
                                    "(a raw step has an infinite derivative)")
            return
        t_now = self._t_rel_now() - self.ref_origin
        try:
            self.reference = with_setpoint(self.reference, t_now, level, blend)
        except ValueError as exc:
            self._reply(req, False, str(exc))
            return
        self._emit(EventRecord("setpoint", f"blend_s={blend:g}", t=self.t_last, value=level))
        self._reply(req, True, f"setpoint {level:g} over {blend:g} s")

    def _start_profile(self, req: _Request) -> None:
        from rigloop.control.reference import build_reference

        self.reference = build_reference(self.ref_spec, base_dir=self.cfg.base_dir)
        self.ref_origin = self._t_rel_now()
        self._emit(EventRecord("profile", f"reference profile '{self.ref_spec.get('kind')}' restarted",
                               t=self.t_last))
        self._reply(req, True, "profile started")

    def _read_front_end(self) -> None:
        conn = self.control_conn
        if conn is None:
            return
        try:
            while conn.poll():
                kind, args = conn.recv()
                self.last_front_end = time.perf_counter()
                self.request(kind, **args)
        except (EOFError, OSError):
            self.control_conn = None
            self._front_end_lost("the front end closed its connection")

    def _front_end_lost(self, why: str) -> None:
        self.front_end_timeout_s = None
        log.warning("front end lost: %s", why)
        self.stop_reason = "front end lost"
        if self.state in (State.RUNNING, State.STOPPING):
            self._trip(Trip("front-end-lost", f"front end lost ({why}); controlled stop", t=self.t_last, stop="ramped"))
            self.exit_after_trip = True
        else:
            if self.state is not State.TRIPPED:
                self._trip(Trip("front-end-lost", f"front end lost ({why})", t=self.t_last))
            self._done = True
        self._ramp_then = "quit"
