"""Telemetry ring in shared memory: the engine writes one row per sample, a front end reads.

Layout: a 64-byte header (int64 write count, capacity, field count) then ``capacity x fields``
float64 rows. The writer fills row ``count % capacity`` and then bumps ``count``; a reader copies
the rows it wants and re-reads ``count`` to drop rows that were overwritten while it copied. No
locks: the engine never waits for a slow or frozen front end.
"""

from __future__ import annotations

import math
import sys
from multiprocessing import shared_memory

import numpy as np

from rigloop.engine.records import EventRecord, TickRecord
from rigloop.engine.states import STATE_CODES, State

BASE_FIELDS = ("t", "ref", "y", "e", "u_cmd", "u", "f_hat", "state", "latency_ms", "lateness_ms")
_HEADER = 64


def ring_fields(channel_names) -> tuple[str, ...]:
    return BASE_FIELDS + tuple(f"ch:{n}" for n in channel_names)


def _attach(name: str) -> shared_memory.SharedMemory:
    """Attach to a segment another process created (the creator unlinks it).

    The engine process is started with multiprocessing's spawn context and so shares the
    creator's resource tracker: registering the name again is harmless and must not be undone
    here, or the creator's own unlink would confuse the tracker.
    """
    if sys.version_info >= (3, 13):
        return shared_memory.SharedMemory(name=name, track=False)
    return shared_memory.SharedMemory(name=name)


class TelemetryRing:
    """Create (``create=True``, the front end) or attach to (the engine) a ring."""

    def __init__(self, n_fields: int, capacity: int, name: str | None = None, create: bool = False):
        size = _HEADER + 8 * n_fields * capacity
        if create:
            self.shm = shared_memory.SharedMemory(create=True, size=size, name=name)
        else:
            self.shm = _attach(name)
        self.owner = create
        self.name = self.shm.name
        self.header = np.ndarray((3,), dtype=np.int64, buffer=self.shm.buf[:24])
        if create:
            self.header[:] = (0, capacity, n_fields)
        self.capacity = int(self.header[1])
        self.n_fields = int(self.header[2])
        self.data = np.ndarray((self.capacity, self.n_fields), dtype=np.float64,
                               buffer=self.shm.buf[_HEADER:_HEADER + 8 * self.n_fields * self.capacity])

    # -- writer -------------------------------------------------------------------------------
    def write(self, row) -> None:
        n = int(self.header[0])
        self.data[n % self.capacity, :len(row)] = row
        self.header[0] = n + 1

    # -- reader -------------------------------------------------------------------------------
    @property
    def count(self) -> int:
        return int(self.header[0])

    def read_since(self, cursor: int, max_rows: int | None = None) -> tuple[int, np.ndarray]:
        """Rows written after ``cursor`` (oldest first) and the new cursor."""
        end = self.count
        start = max(cursor, end - self.capacity + 1)
        if max_rows is not None:
            start = max(start, end - max_rows)
        if start >= end:
            return end, np.empty((0, self.n_fields))
        idx = np.arange(start, end) % self.capacity
        rows = self.data[idx].copy()
        after = self.count
        overwritten = after - self.capacity + 1 - start  # rows lost while copying
        if overwritten > 0:
            rows = rows[overwritten:]
        return end, rows

    def close(self) -> None:
        self.header = None  # type: ignore[assignment]
        self.data = None  # type: ignore[assignment]
        try:
            self.shm.close()
        except BufferError:  # pragma: no cover - a view still alive; the OS frees it at exit
            return
        if self.owner:
            try:
                self.shm.unlink()
            except FileNotFoundError:
                pass


class TelemetryPublisher:
    """Subscriber that copies each tick into the ring (a display subscriber: never trips)."""

    critical = False

    def __init__(self, ring: TelemetryRing):
        self.ring = ring
        self._row = np.full(ring.n_fields, math.nan)

    def on_tick(self, r: TickRecord) -> None:
        row = self._row
        row[0] = r.t
        row[1] = r.ref
        row[2] = r.y
        row[3] = r.e
        row[4] = r.u_cmd
        row[5] = r.u
        row[6] = r.f_hat
        row[7] = STATE_CODES[State(r.state)]
        row[8] = r.latency_ms
        row[9] = r.lateness_ms
        n = min(len(r.channels), len(row) - 10)
        row[10:10 + n] = r.channels[:n]
        self.ring.write(row)

    def on_event(self, ev: EventRecord) -> None:
        pass

    def poll(self, now: float) -> None:
        pass
