"""The one-line live status for headless runs (a display subscriber: it never stops the rig)."""

from __future__ import annotations

import math
import sys

from rigloop.engine.records import EventRecord, TickRecord


class ConsoleStatus:
    critical = False

    def __init__(self, stream=None, interval_s: float | None = None, output: str = "y", actuator: str = "u"):
        self.stream = stream or sys.stdout
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.interval = interval_s if interval_s is not None else (0.2 if self.tty else 2.0)
        self.output = output
        self.actuator = actuator
        self._last_print = 0.0
        self._last: TickRecord | None = None
        self._dirty = False

    def on_tick(self, rec: TickRecord) -> None:
        self._last = rec

    def on_event(self, ev: EventRecord) -> None:
        if ev.kind in ("trip", "estop", "stop", "armed", "reset", "link_fault", "link_rejected", "device_fault",
                       "param", "warning", "scheduling"):
            self._clear()
            self.stream.write(f"[{ev.kind}] {ev.detail}\n")
            self.stream.flush()

    def poll(self, now: float) -> None:
        if self._last is None or now - self._last_print < self.interval:
            return
        self._last_print = now
        r = self._last
        line = (f"t={r.t:8.2f}s  ref={_f(r.ref)}  {self.output}={_f(r.y)}  {self.actuator}={_f(r.u)}  "
                f"state={r.state}")
        if self.tty:
            self.stream.write("\r" + line.ljust(90))
            self._dirty = True
        else:
            self.stream.write(line + "\n")
        self.stream.flush()

    def _clear(self) -> None:
        if self.tty and self._dirty:
            self.stream.write("\n")
            self._dirty = False

    def finish(self) -> None:
        self._clear()


def _f(x: float) -> str:
    return "     -   " if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:9.3f}"


