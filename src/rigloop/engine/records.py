"""Typed records that leave the engine: one TickRecord per device sample, one EventRecord per
event. The recorder, the telemetry ring and the console status line subscribe to the same
stream, so a live plot and the file on disk can never disagree."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Protocol


class TickRecord:
    """One handled device sample. A plain slotted class: one is built per sample."""

    __slots__ = (
        "t", "seq", "ref", "dref", "y", "e", "u_cmd", "u", "f_hat", "state",
        "channels", "status", "latency_ms", "compute_us", "late", "lateness_ms",
    )

    def __init__(self, t, seq, ref, dref, y, e, u_cmd, u, f_hat, state, channels, status,
                 latency_ms=math.nan, compute_us=math.nan, late=0, lateness_ms=math.nan):
        self.t = t
        self.seq = seq
        self.ref = ref
        self.dref = dref
        self.y = y
        self.e = e
        self.u_cmd = u_cmd
        self.u = u
        self.f_hat = f_hat
        self.state = state
        self.channels = channels
        self.status = status
        self.latency_ms = latency_ms
        self.compute_us = compute_us
        self.late = late
        self.lateness_ms = lateness_ms


@dataclass
class EventRecord:
    kind: str
    detail: str = ""
    t: float | None = None          # device seconds since the session's first sample
    value: float | None = None
    limit: float | None = None
    wall_utc: str = ""


@dataclass
class Trip:
    """Why the rig was stopped: written to events.csv and session.yaml."""

    cause: str                       # one of TRIP_CAUSES
    message: str
    t: float | None = None
    channel: str | None = None
    value: float | None = None
    limit: float | None = None
    stop: str = "immediate"          # immediate | ramped

    def as_dict(self) -> dict:
        return {
            "cause": self.cause, "t": None if self.t is None else round(float(self.t), 6), "channel": self.channel,
            "value": _finite_or_none(self.value), "limit": _finite_or_none(self.limit),
            "stop": self.stop, "message": self.message,
        }


#: Every trip cause the supervisor can report (safety.md describes each).
TRIP_CAUSES = (
    "e-stop", "limit", "rate-limit", "frozen-sensor", "stale-data", "link-errors",
    "device-fault", "device-watchdog", "non-finite", "overrun", "max-duration",
    "front-end-lost", "link-lost", "recorder-failed", "internal-error",
)


def _finite_or_none(x):
    if x is None:
        return None
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return None
    return xf if math.isfinite(xf) else str(xf)


class Subscriber(Protocol):
    """Receives the engine's records. Display subscribers may swallow their own errors; the
    recorder must not (a failing recorder trips the rig)."""

    critical: bool

    def on_tick(self, rec: TickRecord) -> None: ...
    def on_event(self, ev: EventRecord) -> None: ...
    def poll(self, now: float) -> None: ...


def num_or_none(x) -> float | None:
    """A value as a float for an event record, or None when it is not a number."""
    if x is None:
        return None
    try:
        return float(x)
    except (TypeError, ValueError):
        return None
