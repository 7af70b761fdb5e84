"""Files that survive a full disk: a session.yaml rewritten in place, CSV files of whole rows.

A recording must say how the session ended even when the disk fills up (or the medium goes away)
in the middle of it. Two rules make that possible:

- ``session.yaml`` is written at the start in its final size — the document followed by a
  reserve of blank space — so every later update fits in blocks the file already owns. An update
  first tries a new file swapped in atomically (the normal case); if that cannot be written, it
  overwrites the reserved file in place, which needs no new space.
- CSV rows are collected in memory and written as one chunk of whole rows; the file's length
  after the last fully written chunk is remembered, and a failed write truncates back to it
  (truncating needs no space) plus the whole rows that made it, so no reader sees half a row.
"""

from __future__ import annotations

import errno
import os
from pathlib import Path

#: Room kept behind session.yaml for the outcome, trip, summary and plan verdicts written at the
#: end. A summary is ~1.5 KB and a plan verdict ~0.2 KB per criterion; 64 KiB holds hundreds.
META_RESERVE_BYTES = 64 * 1024
_PAD_HEAD = b"\n# reserved space: this file is rewritten in place, so a full disk cannot lose the outcome\n"
_PAD_LINE = b" " * 79 + b"\n"


def _padded(text: bytes, size: int) -> bytes:
    """``text`` followed by YAML-neutral padding (a comment, then blank lines) up to ``size``."""
    room = size - len(text)
    if room <= 0:
        return text
    pad = _PAD_HEAD[:room]
    room -= len(pad)
    pad += _PAD_LINE * (room // len(_PAD_LINE))
    return text + pad + b"\n" * (size - len(text) - len(pad))


class ReservedTextFile:
    """A small text file of fixed reserved size, updated atomically when possible, else in place."""

    def __init__(self, path: Path, text: str, reserve: int = META_RESERVE_BYTES):
        self.path = Path(path)
        data = text.encode("utf-8")
        self.size = len(data) + reserve
        self.in_place_updates = 0
        _write_new(self.path, _padded(data, self.size))

    def update(self, text: str) -> None:
        data = text.encode("utf-8")
        if len(data) > self.size:
            self.size = len(data)           # grows only when the reserve is outgrown (rare)
        body = _padded(data, self.size)
        tmp = self.path.with_name(self.path.name + ".tmp")
        try:
            _write_new(tmp, body)
            os.replace(tmp, self.path)
            return
        except OSError:
            _unlink_quietly(tmp)            # give back what the attempt took
        self.in_place_updates += 1
        with open(self.path, "r+b", buffering=0) as fh:   # same size: no new blocks needed
            view = memoryview(body)
            while view:
                view = view[fh.write(view):]
            os.fsync(fh.fileno())


def _write_new(path: Path, data: bytes) -> None:
    """Write ``path`` whole and fsync it; on failure remove it (no 0-byte leftovers)."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
    try:
        view = memoryview(data)
        while view:
            view = view[os.write(fd, view):]
        os.fsync(fd)
    except BaseException:
        os.close(fd)
        _unlink_quietly(path)
        raise
    os.close(fd)


def _unlink_quietly(path: Path) -> None:
    try:
        os.unlink(path)
    except OSError:
        pass


class RowFile:
    """An append-only text file that only ever holds whole rows.

    ``add`` collects text that ends at a row boundary; ``flush`` writes what was collected as one
    chunk. If the chunk cannot be written whole, the file is cut back to the end of the last row
    that was written whole and the error is raised; later calls do nothing (the file is ``failed``).
    """

    #: Rows collected before a write even if the flush timer has not come round: keeps memory
    #: flat (~64 KB) when rows come faster than the timer (a 20 kHz loop, a busy host).
    MAX_PENDING_ROWS = 400

    def __init__(self, path: Path, opener=None):
        self.path = Path(path)
        self._fh = (opener or _open_raw)(self.path)
        self._parts: list[str] = []
        self.good_size = 0                  # bytes on disk that end at a row boundary
        self.failed: OSError | None = None

    def add(self, text: str) -> None:
        """Collect whole rows; write them once MAX_PENDING_ROWS are waiting (errors raise)."""
        parts = self._parts
        parts.append(text)
        if len(parts) >= self.MAX_PENDING_ROWS:
            self.flush()

    def flush(self) -> None:
        if self.failed is not None or not self._parts:
            self._parts.clear()
            return
        data = "".join(self._parts).encode("utf-8")
        self._parts.clear()
        done = 0
        try:
            view = memoryview(data)
            while done < len(data):
                n = self._fh.write(view[done:])
                if not n:
                    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
                done += n
        except OSError as exc:
            self.failed = exc
            # keep the whole rows that did get written, cut the rest
            self.good_size += data.rfind(b"\n", 0, done) + 1
            self._cut_back()
            raise
        self.good_size += len(data)

    def _cut_back(self) -> None:
        try:
            self._fh.truncate(self.good_size)
            self._fh.seek(self.good_size)
        except (OSError, ValueError):
            pass

    def close(self) -> None:
        """Flush what is collected (errors raise), fsync, close; always closes the file."""
        try:
            self.flush()
            if self.failed is None:
                os.fsync(self._fh.fileno())
        finally:
            try:
                self._fh.close()
            except OSError:
                pass


def _open_raw(path: Path):
    return open(path, "wb", buffering=0)
