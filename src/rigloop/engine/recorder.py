"""The session recorder: a folder per run with session.yaml, samples.csv, events.csv (docs/recording.md).

Rows are buffered and flushed at least every ``recording.flush_ms`` (<= 100 ms) and fsynced at
the end, so a crash loses at most the last flush and leaves ``outcome: running`` behind. Nothing
is kept in memory beyond the write buffer, so hour-long sessions stay flat. The recorder is a
*critical* subscriber: if it cannot write, the engine trips the rig instead of running blind.
"""

from __future__ import annotations

import csv
import math
import os
import platform
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import yaml

from rigloop import __version__
from rigloop.engine.records import EventRecord, TickRecord

SAMPLE_COLUMNS_HEAD = ("t", "seq", "ref", "dref", "y", "e", "u_cmd", "u", "f_hat", "state")
SAMPLE_COLUMNS_TAIL = ("status", "latency_ms", "compute_us", "late")
EVENT_COLUMNS = ("t", "wall_utc", "kind", "detail", "value", "limit")


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


def write_yaml_atomic(path: Path, data: dict) -> None:
    tmp = path.with_suffix(".yaml.tmp")
    with open(tmp, "w", encoding="utf-8") as fh:
        yaml.safe_dump(_yaml_safe(data), fh, sort_keys=False, allow_unicode=True)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


class SessionRecorder:
    critical = True

    def __init__(self, folder: Path, cfg, *, device_url: str, flush_ms: float | None = None):
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
        write_yaml_atomic(self.folder / "session.yaml", self.meta)
        self._samples = open(self.folder / "samples.csv", "w", encoding="utf-8", newline="", buffering=1 << 16)
        self._events_fh = open(self.folder / "events.csv", "w", encoding="utf-8", newline="", buffering=1 << 14)
        self._events = csv.writer(self._events_fh, lineterminator="\n")
        header = list(SAMPLE_COLUMNS_HEAD) + self.channel_names + list(SAMPLE_COLUMNS_TAIL)
        self._samples.write(",".join(header) + "\n")
        self._events.writerow(EVENT_COLUMNS)
        n = len(self.channel_names)
        self._fmt = ("%.6f,%d,%.9g,%.9g,%.9g,%.9g,%.9g,%.9g,%.9g,%s," + "%.9g," * n + "%d,%.4f,%.1f,%d\n")
        self._last_flush = time.monotonic()
        self.rows = 0
        self.closed = False

    def set_device_hello(self, hello: dict) -> None:
        self.meta["device"]["hello"] = hello
        write_yaml_atomic(self.folder / "session.yaml", self.meta)

    def on_tick(self, r: TickRecord) -> None:
        self._samples.write(self._fmt % (
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
        self._samples.flush()
        self._events_fh.flush()
        self._last_flush = time.monotonic()

    def close(self, *, outcome: str, stop_reason: str | None, trip: dict | None, summary: dict,
              plan: dict | None = None) -> None:
        if self.closed:
            return
        self.closed = True
        for fh in (self._samples, self._events_fh):
            try:
                fh.flush()
                os.fsync(fh.fileno())
            finally:
                fh.close()
        self.meta.update(outcome=outcome, stop_reason=stop_reason, trip=trip, summary=summary,
                         ended_utc=utc_now_iso())
        if plan is not None:
            self.meta["plan"] = plan
        write_yaml_atomic(self.folder / "session.yaml", self.meta)

    def update_meta(self, **fields) -> None:
        self.meta.update(fields)
        write_yaml_atomic(self.folder / "session.yaml", self.meta)


def _num(x) -> str:
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return str(x)
    if math.isnan(xf):
        return "nan"
    return f"{xf:.9g}"


