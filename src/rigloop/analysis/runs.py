"""The runs of a session: each ARM … stop is measured on its own.

One connection of the desktop app can arm the rig many times; between the runs the rig is idle
or tripped, and the output is not the controller's. A *run* is one unbroken stretch of
``running`` rows (the engine enters ``running`` only by an arm, so there is one stretch per arm
that reached it). It owns the rows from its first running row until the next run's first row —
its ramped stop, its trip and the idle time after it — so that the figure shows how it ended,
but its metrics use its running rows only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rigloop.analysis.session import Session

#: events that say how a run ended
_END_KINDS = ("trip", "estop", "stop")


@dataclass(frozen=True)
class Run:
    """One ARM … stop of a session, in session time (s)."""

    index: int             # 1-based, in time order
    first_row: int         # index of its first running row
    last_row: int          # index of its last running row
    t_start: float         # time of its first running row (the reference's time origin)
    t_end: float           # time of its last running row
    t_next: float          # first row of the next run, or +inf: the rows up to it belong to this run
    samples: int           # running rows
    ended: str             # how it ended, in words

    @property
    def duration_s(self) -> float:
        """Time from its first to its last running row."""
        return self.t_end - self.t_start

    def running_rows(self, session: Session) -> np.ndarray:
        """Mask of the run's running rows."""
        mask = np.zeros(session.n_rows, dtype=bool)
        mask[self.first_row:self.last_row + 1] = True
        return mask & session.active_mask()

    def as_dict(self) -> dict:
        return {"index": self.index, "t_start": self.t_start, "t_end": self.t_end,
                "duration_s": self.duration_s, "samples": self.samples, "ended": self.ended}


def session_runs(session: Session) -> list[Run]:
    """The runs of a session in time order (a recording without a ``state`` column is one run).
    Computed once per loaded session (a session is read-only)."""
    cached = session.__dict__.get("_runs_cache")
    if cached is None:
        cached = session.__dict__["_runs_cache"] = _find_runs(session)
    return list(cached)


def _find_runs(session: Session) -> list[Run]:
    t = session.samples["t"]
    active = session.active_mask()
    if not active.any():
        return []
    edges = np.diff(np.concatenate(([0], active.astype(np.int8), [0])))
    starts = np.flatnonzero(edges == 1)
    stops = np.flatnonzero(edges == -1) - 1
    runs = []
    for k, (a, b) in enumerate(zip(starts, stops)):
        t_next = float(t[starts[k + 1]]) if k + 1 < len(starts) else math.inf
        last = k + 1 == len(starts)
        runs.append(Run(k + 1, int(a), int(b), float(t[a]), float(t[b]), t_next, int(b - a + 1),
                        _how_it_ended(session, float(t[a]), t_next, last, b + 1 < t.size)))
    return runs


def run_labels(session: Session, runs: list[Run] | None = None) -> np.ndarray:
    """Per row: the number of the run whose running rows hold it, 0 elsewhere."""
    if runs is None and "_labels_cache" in session.__dict__:
        return session.__dict__["_labels_cache"]
    cache = runs is None
    runs = session_runs(session) if runs is None else runs
    label = np.zeros(session.n_rows, dtype=np.int32)
    for run in runs:
        label[run.first_row:run.last_row + 1] = run.index
    label[~session.active_mask()] = 0
    if cache:
        label.flags.writeable = False
        session.__dict__["_labels_cache"] = label
    return label


def _how_it_ended(session: Session, t_start: float, t_next: float, last: bool,
                  rows_after: bool) -> str:
    for ev in session.events:
        if ev.t is None or not t_start <= ev.t < t_next or ev.kind not in _END_KINDS:
            continue
        if ev.kind == "trip":
            cause, _, message = (ev.detail or "").partition(": ")
            if cause == "e-stop":           # the engine records an e-stop as a trip first
                return f"e-stop: {message}" if message else "e-stop"
            return f"tripped: {ev.detail}" if ev.detail else "tripped"
        if ev.kind == "estop":
            return f"e-stop: {ev.detail}" if ev.detail else "e-stop"
        return ev.detail or "stopped"
    if last:
        reason = session.meta.get("stop_reason")
        if not session.clean_end:
            return "the session ended while running (no clean stop recorded)"
        if not rows_after and session.outcome == "completed":
            return f"completed ({reason})" if reason else "completed"
        return f"session {session.outcome}" + (f" ({reason})" if reason else "")
    return "left the running state (no stop event recorded)"


def count_arms(folder: str | Path) -> int | None:
    """How many times a session was armed, read from its events.csv alone (cheap: for lists of
    sessions); None when the file cannot be read."""
    path = Path(folder) / "events.csv"
    try:
        with open(path, encoding="utf-8", errors="replace") as fh:
            header = fh.readline().rstrip("\r\n").split(",")
            if "kind" not in header:
                return None
            col = header.index("kind")
            n = 0
            for line in fh:
                fields = line.split(",")
                if len(fields) > col and fields[col].strip() == "armed":
                    n += 1
            return n
    except OSError:
        return None


def listing_words(folder: str | Path) -> str:
    """One line for a list of sessions: the outcome from session.yaml and the number of runs
    (arms) from events.csv, e.g. ``tripped · 2 runs``; reads nothing else."""
    import yaml

    outcome = "outcome unknown"
    try:
        with open(Path(folder) / "session.yaml", encoding="utf-8") as fh:
            meta = yaml.safe_load(fh)
        if isinstance(meta, dict) and meta.get("outcome"):
            outcome = str(meta["outcome"])
            if outcome == "running":
                outcome = "ended without a clean stop"
    except (OSError, yaml.YAMLError, UnicodeDecodeError):
        outcome = "unreadable session.yaml"
    arms = count_arms(folder)
    runs = "runs unknown" if arms is None else f"{arms} run" + ("" if arms == 1 else "s")
    return f"{outcome} · {runs}"
