"""How much disk a session will need, and whether its recording folder can take it.

Checked before anything is created or moves: a session that cannot be recorded to the end is
refused (exit 2) instead of tripping half-way. The estimate is rows x bytes per row, rows from
the configured rate and the longest the run may last (``--duration``, ``duration_s``, a plan's
length, else ``limits.max_duration_s``), bytes per row from the recorder's own row format filled
with wide values, so it errs on the large side.
"""

from __future__ import annotations

import os
import shutil
from dataclasses import dataclass
from pathlib import Path

#: session.yaml (config snapshot + its reserve), events.csv and engine.log of an ordinary session.
OVERHEAD_BYTES = 512 * 1024


@dataclass(frozen=True)
class SessionBudget:
    rows: int
    row_bytes: int
    duration_s: float
    total_bytes: int


def row_bytes(n_channels: int) -> int:
    """Bytes of one samples.csv row with wide values (15-character floats, 10-digit sequence)."""
    from rigloop.engine.recorder import sample_row_format

    wide = -1.23456789e-05                       # '%.9g' -> '-1.23456789e-05', 15 characters
    row = sample_row_format(n_channels) % (
        99999.999999, 4294967295, wide, wide, wide, wide, wide, wide, wide, "stopping",
        *([wide] * n_channels), 65535, 99999.9999, 999999.9, 999)
    return len(row.encode("utf-8"))


def run_length_s(cfg, duration_s: float | None = None) -> float:
    """The longest a run of this config may record: the explicit length, else the plan's, else the cap."""
    if duration_s is not None:
        return float(duration_s)
    if cfg.plan:
        try:
            from rigloop.analysis.plan import plan_duration

            return min(float(plan_duration(cfg.plan)), cfg.limits.max_duration_s)
        except Exception:  # noqa: BLE001 - an unreadable plan is reported elsewhere
            pass
    if cfg.duration_s is not None:
        return float(cfg.duration_s)
    return float(cfg.limits.max_duration_s)


def session_budget(cfg, duration_s: float | None = None) -> SessionBudget:
    length = run_length_s(cfg, duration_s)
    rows = int(length * cfg.device.rate_hz) + 1
    per_row = row_bytes(len(cfg.channels))
    return SessionBudget(rows, per_row, length, rows * per_row + OVERHEAD_BYTES)


def existing_ancestor(path: Path) -> Path:
    path = Path(path).absolute()
    for candidate in (path, *path.parents):
        if candidate.exists():
            return candidate
    return Path(path.anchor or "/")


def free_bytes(folder: Path) -> int | None:
    """Free bytes for an unprivileged writer where ``folder`` (or its nearest existing parent) lives."""
    try:
        return shutil.disk_usage(existing_ancestor(folder)).free
    except OSError:
        return None


def recording_dir_problem(folder: Path) -> str | None:
    """Why sessions cannot be written under ``folder``, or None (checked without creating it).
    The message follows the folder's name: "<folder> is a file ..."."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        return "is a file, not a folder; name a folder (it is created if missing)"
    base = existing_ancestor(folder)
    if not base.is_dir():
        return f"cannot be made: {base} is a file; name another folder"
    if not os.access(base, os.W_OK | os.X_OK):
        return f"cannot be written: no permission to write in {base}; choose a folder you can write to"
    return None


def mb(n: int) -> str:
    """Bytes for people: ``2.91 MB``, ``77.9 GB``."""
    return f"{n / 1e9:.3g} GB" if n >= 1e9 else f"{n / 1e6:.3g} MB"


def space_problem(cfg, folder: Path, duration_s: float | None = None) -> str | None:
    """A message when the session's expected size does not fit the free space, else None."""
    budget = session_budget(cfg, duration_s)
    free = free_bytes(folder)
    if free is None or free >= budget.total_bytes:
        return None
    return (f"not enough disk space for the recording: the session needs about "
            f"{mb(budget.total_bytes)} ({budget.rows} rows x {budget.row_bytes} B at "
            f"{cfg.device.rate_hz:g} Hz for {budget.duration_s:g} s) but {existing_ancestor(folder)} "
            f"has {mb(free)} free; free some space, choose another recording.dir (--out) or "
            f"record a shorter run (--duration, duration_s, limits.max_duration_s)")
