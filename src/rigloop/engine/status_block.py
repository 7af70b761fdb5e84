"""A small shared-memory block holding the engine's latest status as JSON.

The engine must never wait for a front end, so status does not travel through a pipe that a
frozen GUI could fill: the engine overwrites this block (sequence-locked) ten times a second and
the front end reads it when it likes.
"""

from __future__ import annotations

import json
import struct

from rigloop.engine.telemetry import _attach
from rigloop.plain_data import plain

_HDR = struct.Struct("<qq")   # sequence (odd while writing), payload length


class StatusBlock:
    def __init__(self, name: str | None = None, create: bool = False, size: int = 1 << 16):
        from multiprocessing import shared_memory

        self.shm = shared_memory.SharedMemory(create=True, size=size, name=name) if create else _attach(name)
        self.owner = create
        self.name = self.shm.name
        self.size = self.shm.size
        self._seq = 0
        if create:
            _HDR.pack_into(self.shm.buf, 0, 0, 0)

    def write(self, status: dict) -> None:
        data = json.dumps(plain(status), default=_default).encode()
        if len(data) > self.size - _HDR.size:
            data = json.dumps({"state": status.get("state"), "error": "status too large"}).encode()
        self._seq += 1
        _HDR.pack_into(self.shm.buf, 0, 2 * self._seq - 1, 0)
        self.shm.buf[_HDR.size:_HDR.size + len(data)] = data
        _HDR.pack_into(self.shm.buf, 0, 2 * self._seq, len(data))

    def read(self) -> dict | None:
        for _ in range(20):
            seq1, n = _HDR.unpack_from(self.shm.buf, 0)
            if seq1 == 0:
                return None
            if seq1 % 2:
                continue
            data = bytes(self.shm.buf[_HDR.size:_HDR.size + n])
            seq2, _ = _HDR.unpack_from(self.shm.buf, 0)
            if seq1 == seq2:
                return json.loads(data)
        return None

    def close(self) -> None:
        try:
            self.shm.close()
        except BufferError:  # pragma: no cover
            return
        if self.owner:
            try:
                self.shm.unlink()
            except FileNotFoundError:
                pass


def _default(o):
    try:
        return float(o)
    except (TypeError, ValueError):
        return str(o)

