"""Run the engine in its own process and talk to it from a front end (the desktop app).

Why a process (design §2): a 1 kHz loop sharing a process with a redrawing plot window misses
its deadlines because of the interpreter lock. The front end and the engine share three things:

- a one-way pipe for requests (front end -> engine): e-stop, stop, arm, reset, set, setpoint …;
- a telemetry ring in shared memory (engine -> front end): one row per sample;
- a status block in shared memory (engine -> front end): state, trip, link and timing figures.

The engine never writes to the pipe, so a frozen front end can never block it. If the front end
dies, the pipe reports end-of-file and the engine makes a controlled stop ("front end lost"); if
it stops sending heartbeats for ``front_end_timeout_s``, the same happens.
"""

from __future__ import annotations

import multiprocessing as mp
import signal
import time
from pathlib import Path

from rigloop.engine.status_block import StatusBlock
from rigloop.engine.telemetry import TelemetryRing, ring_fields

DEFAULT_FRONT_END_TIMEOUT_S = 5.0


def _engine_main(cfg, conn, ring_name: str, status_name: str, out_dir, options: dict) -> None:
    """Entry point of the engine process."""
    from rigloop.engine.loop import Engine, EngineError
    from rigloop.engine.telemetry import TelemetryPublisher

    ring = TelemetryRing(0, 0, name=ring_name)
    status = StatusBlock(status_name)
    engine = Engine(cfg, out_dir=out_dir, autostart=options.get("autostart", False),
                    exit_after_trip=False, front_end=options.get("front_end", "gui"), control_conn=conn,
                    front_end_timeout_s=options.get("front_end_timeout_s", DEFAULT_FRONT_END_TIMEOUT_S),
                    status_sink=status.write, duration_s=options.get("duration_s"),
                    sim_extra=options.get("sim_extra"), end_when_done=options.get("end_when_done", False))
    engine.add_subscriber(TelemetryPublisher(ring))
    # A terminal's Ctrl-C reaches every process of the group: treat it as an e-stop, never a crash.
    signal.signal(signal.SIGINT, lambda *_: engine.request("estop", source="SIGINT"))
    signal.signal(signal.SIGTERM, lambda *_: engine.request("quit", reason="engine terminated (SIGTERM)"))
    final = {"done": True}
    try:
        result = engine.run()
        final.update(outcome=result.outcome, exit_code=result.exit_code,
                     session_dir=str(result.session_dir) if result.session_dir else None,
                     trip=result.trip.as_dict() if result.trip else None, stop_reason=result.stop_reason)
    except EngineError as exc:
        final.update(outcome="stopped", exit_code=1, error=str(exc),
                     session_dir=str(engine.session_dir) if engine.session_dir else None)
    except Exception as exc:  # noqa: BLE001 - report, the loop has already stopped the rig
        final.update(outcome="tripped", exit_code=1, error=f"{type(exc).__name__}: {exc}")
    try:
        st = engine.status() if engine.link is not None and hasattr(engine, "supervisor") else {}
    except Exception:  # noqa: BLE001
        st = {}
    st.update(final)
    status.write(st)
    status.close()
    ring.close()


class EngineClient:
    """Start an engine process for a config and drive it."""

    def __init__(self, cfg, *, out_dir: str | Path | None = None, ring_seconds: float = 130.0,
                 front_end: str = "gui", autostart: bool = False, duration_s: float | None = None,
                 front_end_timeout_s: float | None = DEFAULT_FRONT_END_TIMEOUT_S, sim_extra: dict | None = None):
        self.cfg = cfg
        self.fields = ring_fields([c.name for c in cfg.channels])
        capacity = max(1000, int(cfg.device.rate_hz * ring_seconds))
        self.ring = TelemetryRing(len(self.fields), capacity, create=True)
        self.status_block = StatusBlock(create=True)
        ctx = mp.get_context("spawn")
        self._r, self._w = ctx.Pipe(duplex=False)
        options = {"front_end": front_end, "autostart": autostart, "duration_s": duration_s,
                   "front_end_timeout_s": front_end_timeout_s, "sim_extra": sim_extra}
        self.process = ctx.Process(target=_engine_main, name="rigloop-engine",
                                   args=(cfg, self._r, self.ring.name, self.status_block.name,
                                         str(out_dir) if out_dir else None, options))
        self._next_id = 0
        self._closed = False

    def start(self) -> "EngineClient":
        self.process.start()
        self._r.close()   # only the child reads; our copy would hide the child's EOF
        return self

    # -- requests ---------------------------------------------------------------------------
    def send(self, kind: str, **args) -> int:
        self._next_id += 1
        args["id"] = self._next_id
        try:
            self._w.send((kind, args))
        except (BrokenPipeError, OSError):
            pass
        return self._next_id

    def estop(self, source: str = "gui") -> int:
        return self.send("estop", source=source)

    def stop(self, source: str = "gui") -> int:
        return self.send("stop", source=source)

    def ramp_down(self) -> int:
        return self.send("ramp_down", reason="operator ramp-down")

    def arm(self) -> int:
        return self.send("arm", source="gui")

    def reset(self) -> int:
        return self.send("reset")

    def set_param(self, key: str, value) -> int:
        return self.send("set", key=key, value=value)

    def set_setpoint(self, level: float, blend_s: float) -> int:
        return self.send("setpoint", level=float(level), blend_s=float(blend_s))

    def start_profile(self) -> int:
        return self.send("profile")

    def ping(self) -> None:
        self.send("ping")

    # -- reading ----------------------------------------------------------------------------
    def status(self) -> dict | None:
        return self.status_block.read()

    def read_since(self, cursor: int, max_rows: int | None = None):
        return self.ring.read_since(cursor, max_rows)

    def is_alive(self) -> bool:
        return self.process.is_alive()

    def wait_for(self, predicate, timeout: float = 10.0, interval: float = 0.01) -> dict | None:
        """Poll the status until ``predicate(status)`` holds; returns the status or None on timeout."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            st = self.status()
            if st is not None and predicate(st):
                return st
            if not self.process.is_alive():
                st = self.status()
                return st if st is not None and predicate(st) else None
            self.ping()
            time.sleep(interval)
        return None

    def close(self, timeout: float = 10.0) -> dict | None:
        """Ask for a clean end (ramped stop if running), wait, and free the shared memory."""
        if self._closed:
            return self.status()
        self._closed = True
        if self.process.is_alive():
            self.send("quit", reason="front end closed")
            self.process.join(timeout)
        if self.process.is_alive():
            self.process.terminate()
            self.process.join(5.0)
        final = self.status()
        try:
            self._w.close()
        except OSError:
            pass
        self.ring.close()
        self.status_block.close()
        return final
