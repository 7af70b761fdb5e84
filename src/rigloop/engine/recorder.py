"""The session recorder: a folder per run with session.yaml, samples.csv, events.csv (docs/recording.md).

Rows are buffered and flushed at least every ``recording.flush_ms`` (<= 100 ms) and fsynced at
the end, so a crash loses at most the last flush and leaves ``outcome: running`` behind. Nothing
is kept in memory beyond the write buffer, so hour-long sessions stay flat. The recorder is a
*critical* subscriber: if it cannot write, the engine trips the rig instead of running blind.

A full disk, a permission change or a removed medium must not lose the record of how the session
ended (:mod:`.durable_files`): CSV files only ever hold whole rows, and ``session.yaml`` owns its
final size from the start, so the outcome and the trip can still be written.
"""

from __future__ import annotations

import csv
import errno
import math
import os
import platform
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import yaml

from rigloop import __version__
from rigloop.engine.durable_files import ReservedTextFile, RowFile
from rigloop.engine.records import EventRecord, TickRecord

SAMPLE_COLUMNS_HEAD = ("t", "seq", "ref", "dref", "y", "e", "u_cmd", "u", "f_hat", "state")
SAMPLE_COLUMNS_TAIL = ("status", "latency_ms", "compute_us", "late")
EVENT_COLUMNS = ("t", "wall_utc", "kind", "detail", "value", "limit")


def sample_row_format(n_channels: int) -> str:
    """The %-format of one samples.csv row with ``n_channels`` channel columns."""
    return "%.6f,%d,%.9g,%.9g,%.9g,%.9g,%.9g,%.9g,%.9g,%s," + "%.9g," * n_channels + "%d,%.4f,%.1f,%d\n"


def utc_now_iso() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"


def session_folder_name(rig: str, when: datetime | None = None) -> str:
    when = when or datetime.now(timezone.utc)
    return f"{when.strftime('%Y%m%d-%H%M%S')}_{rig}"


def make_session_dir(root: Path, rig: str) -> Path:
    """Create ``root/<UTC YYYYmmdd-HHMMSS>_<rig>``; a second session in the same second gets -2, -3 …"""
    root = Path(root)
    root.mkdir(parents=True, exist_ok=True)
    base = session_folder_name(rig)
    path = root / base
    n = 2
    while True:
        try:
            path.mkdir()
            return path
        except FileExistsError:
            path = root / f"{base}-{n}"
            n += 1


def _yaml_safe(obj):
    """Make a structure safe for yaml.safe_dump: Paths to str, tuples to lists, NaN kept as .nan."""
    if isinstance(obj, dict):
        return {str(k): _yaml_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_yaml_safe(v) for v in obj]
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, (np.floating,)):
        return float(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    return obj


def yaml_text(data: dict) -> str:
    return yaml.safe_dump(_yaml_safe(data), sort_keys=False, allow_unicode=True)


def write_yaml_atomic(path: Path, data: dict) -> None:
    tmp = path.with_suffix(".yaml.tmp")
    with open(tmp, "w", encoding="utf-8") as fh:
        yaml.safe_dump(_yaml_safe(data), fh, sort_keys=False, allow_unicode=True)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


class _RowSink:
    """What csv.writer writes to: whole rows into a RowFile."""

    def __init__(self, rows: RowFile):
        self.write = rows.add


class SessionRecorder:
    critical = True

    def __init__(self, folder: Path, cfg, *, device_url: str, flush_ms: float | None = None,
                 opener=None):
        self.folder = Path(folder)
        self.cfg = cfg
        self.channel_names = [c.name for c in cfg.channels]
        self.flush_s = (flush_ms if flush_ms is not None else cfg.recording.flush_ms) / 1000.0
        self.meta = {
            "format": "rigloop-session/1",
            "rigloop_version": __version__,
            "python_version": platform.python_version(),
            "numpy_version": np.__version__,
            "platform": platform.platform(),
            "started_utc": utc_now_iso(),
            "ended_utc": None,
            "rig": cfg.rig,
            "device": {"url": device_url, "hello": None},
            "outcome": "running",
            "stop_reason": None,
            "trip": None,
            "summary": None,
            "plan": None,
            "config": cfg.raw,
        }
        self._failure: OSError | None = None
        self.meta_error: OSError | None = None
        self._meta_file = ReservedTextFile(self.folder / "session.yaml", yaml_text(self.meta))
        self._samples = RowFile(self.folder / "samples.csv", opener)
        self._events_rows = RowFile(self.folder / "events.csv", opener)
        self._events = csv.writer(_RowSink(self._events_rows), lineterminator="\n")
        header = list(SAMPLE_COLUMNS_HEAD) + self.channel_names + list(SAMPLE_COLUMNS_TAIL)
        self._samples.add(",".join(header) + "\n")
        self._events.writerow(EVENT_COLUMNS)
        self._fmt = sample_row_format(len(self.channel_names))
        self._add_row = self._samples.add
        self.flush()                        # the headers are on disk before the first sample
        self._last_flush = time.monotonic()
        self.rows = 0
        self.closed = False

    @property
    def failure(self) -> OSError | None:
        """The first write error of either file (from a flush, or from a write a full buffer
        started inside on_tick), else None."""
        return self._failure or self._samples.failed or self._events_rows.failed

    def set_device_hello(self, hello: dict) -> None:
        self.update_meta(device={**self.meta["device"], "hello": hello})

    def on_tick(self, r: TickRecord) -> None:
        self._add_row(self._fmt % (
            r.t, r.seq, r.ref, r.dref, r.y, r.e, r.u_cmd, r.u, r.f_hat, r.state, *r.channels,
            r.status, r.latency_ms, r.compute_us, r.late))
        self.rows += 1

    def on_event(self, ev: EventRecord) -> None:
        self._events.writerow((
            "" if ev.t is None else f"{ev.t:.6f}", ev.wall_utc or utc_now_iso(), ev.kind, ev.detail,
            "" if ev.value is None else _num(ev.value), "" if ev.limit is None else _num(ev.limit)))
        self.flush()

    def poll(self, now: float) -> None:
        if now - self._last_flush >= self.flush_s:
            self.flush()

    def flush(self) -> None:
        """Write the collected rows; an OSError (disk full, medium gone …) is raised once, after
        both files are cut back to their last whole row."""
        self._last_flush = time.monotonic()
        if self.failure is not None:
            raise self.failure              # stays failed: the engine drops it on the first raise
        for rows in (self._samples, self._events_rows):
            try:
                rows.flush()
            except OSError as exc:
                self._failure = self._failure or exc
                raise                       # at once: the engine stops the rig before anything else

    def close(self, *, outcome: str, stop_reason: str | None, trip: dict | None, summary: dict,
              plan: dict | None = None) -> None:
        """Finish both CSV files and write the outcome. Never raises: a recording that cannot be
        finished is described in session.yaml (``recording_error``) when at all possible."""
        if self.closed:
            return
        self.closed = True
        for rows in (self._samples, self._events_rows):
            try:
                rows.close()
            except OSError as exc:
                self._failure = self._failure or exc
        self.meta.update(outcome=outcome, stop_reason=stop_reason, trip=trip, summary=summary,
                         ended_utc=utc_now_iso())
        if self.failure is not None:
            self.meta["recording_error"] = describe_os_error(self.failure)
        if plan is not None:
            self.meta["plan"] = plan
        self.update_meta()

    def update_meta(self, **fields) -> None:
        """Rewrite session.yaml (in place if need be); a failure is kept in ``meta_error``."""
        self.meta.update(fields)
        try:
            self._meta_file.update(yaml_text(self.meta))
        except OSError as exc:
            self.meta_error = exc


def describe_os_error(exc: OSError) -> str:
    """``No space left on device (ENOSPC)``: the OS's words and the error's name."""
    name = errno.errorcode.get(exc.errno or -1, "")
    text = exc.strerror or str(exc) or type(exc).__name__
    return f"{text} ({name})" if name else text


def _num(x) -> str:
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return str(x)
    if math.isnan(xf):
        return "nan"
    return f"{xf:.9g}"


