"""Load a recorded session folder (docs/recording.md) into arrays, tolerating a crashed writer.

A session that ended in a crash is still worth reading: the recorder flushes often, so all but
the last flush is on disk. The loader therefore accepts a half-written last line, a missing
``ended_utc`` and ``outcome: running``, and says so in :attr:`Session.truncated` instead of
failing. Only a folder that is not a session at all (no ``session.yaml``/``samples.csv``,
unreadable YAML, no header) raises :class:`SessionError`.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import NamedTuple

import numpy as np
import yaml

#: Columns of samples.csv that hold text; every other column is read as float (empty -> NaN).
TEXT_COLUMNS = ("state",)
#: The engine state whose rows the tracking metrics use.
ACTIVE_STATE = "running"
_CHUNK_BYTES = 4 << 20
_FIX = "point at a session folder written by rigloop (it holds session.yaml, samples.csv and events.csv)"


class SessionError(Exception):
    """The folder is not a readable session; the message names the file and the fix."""


class SessionEvent(NamedTuple):
    """One row of events.csv. ``value``/``limit`` are floats where numeric, else the raw text."""

    t: float | None
    wall_utc: str
    kind: str
    detail: str
    value: float | str | None
    limit: float | str | None


@dataclass
class Session:
    """A loaded session: ``meta`` is session.yaml, ``samples`` maps column name -> numpy array."""

    path: Path
    meta: dict
    samples: dict[str, np.ndarray]
    columns: list[str]
    events: list[SessionEvent]
    clean_end: bool
    truncated: str | None
    warnings: list[str] = field(default_factory=list)
    _active: np.ndarray | None = field(default=None, repr=False, compare=False)

    # --- session.yaml shortcuts -------------------------------------------------------------
    @property
    def name(self) -> str:
        return self.path.name

    @property
    def outcome(self) -> str:
        return str(self.meta.get("outcome") or "unknown")

    @property
    def rig(self) -> str:
        return str(self.meta.get("rig") or self.config.get("rig") or "?")

    @property
    def started_utc(self) -> str:
        return str(self.meta.get("started_utc") or "?")

    @property
    def config(self) -> dict:
        cfg = self.meta.get("config")
        return cfg if isinstance(cfg, dict) else {}

    @property
    def summary(self) -> dict:
        s = self.meta.get("summary")
        return s if isinstance(s, dict) else {}

    @property
    def lost_samples(self) -> float:
        """Samples the device sent that never arrived, from the summary (NaN when not recorded)."""
        return _float_or_nan(self.summary.get("lost_samples"))

    @property
    def rejected_frames_total(self) -> float:
        """Frames the host rejected, from the summary (NaN when not recorded). The per-reason
        counts are summed; bookkeeping entries (``accepted``, ``total_rejected``) are not."""
        rejected = self.summary.get("rejected_frames")
        if not isinstance(rejected, dict):
            return _float_or_nan(rejected)
        if "total_rejected" in rejected:
            return _float_or_nan(rejected["total_rejected"])
        counts = [_float_or_nan(v) for k, v in rejected.items() if k != "accepted"]
        return float(sum(counts)) if counts else math.nan

    @property
    def n_rows(self) -> int:
        return len(self.samples.get("t", ()))

    # --- config snapshot shortcuts ----------------------------------------------------------
    @property
    def output_name(self) -> str:
        control = self.config.get("control")
        return str(control.get("output", "y")) if isinstance(control, dict) else "y"

    @property
    def model_order(self) -> int:
        control = self.config.get("control")
        order = control.get("order", 1) if isinstance(control, dict) else 1
        return order if order in (1, 2) else 1

    def channel_unit(self, name: str) -> str:
        for ch in self.config.get("channels") or ():
            if isinstance(ch, dict) and ch.get("name") == name:
                return str(ch.get("unit") or "")
        return ""

    @property
    def output_unit(self) -> str:
        return self.channel_unit(self.output_name)

    @property
    def units(self) -> dict[str, str]:
        """Units for metric labels: ``y`` output, ``u`` actuator, ``f`` F̂ (output unit/s^m)."""
        y = self.output_unit
        f = (f"{y}/s²" if self.model_order == 2 else f"{y}/s") if y else ""
        return {"y": y, "u": self.actuator["unit"], "f": f}

    @property
    def actuator(self) -> dict:
        """name, unit, min, max of the actuator (floats, NaN where the snapshot lacks them)."""
        act = self.config.get("actuator")
        act = act if isinstance(act, dict) else {}
        return {
            "name": str(act.get("name") or "u"),
            "unit": str(act.get("unit") or ""),
            "min": _float_or_nan(act.get("min")),
            "max": _float_or_nan(act.get("max")),
        }

    def column(self, name: str, rows: np.ndarray | None = None) -> np.ndarray:
        """A numeric column (restricted to ``rows``); all-NaN when the recording lacks it."""
        col = self.samples.get(name)
        if col is None:
            col = np.full(self.n_rows, math.nan)
        return col if rows is None else col[rows]

    def active_mask(self) -> np.ndarray:
        """Rows recorded while the loop was running; all rows when there is no ``state`` column.

        Tracking metrics use these rows only: before arming the reference is not being followed,
        and after a stop or a trip the output is not the controller's.
        """
        if self._active is None:
            state = self.samples.get("state")
            self._active = (np.ones(self.n_rows, dtype=bool) if state is None
                            else state == ACTIVE_STATE)
        return self._active


def load_session(path: str | Path) -> Session:
    """Read a session folder (or its session.yaml) into a :class:`Session`."""
    folder = Path(path)
    if folder.is_file() and folder.name in ("session.yaml", "samples.csv", "events.csv"):
        folder = folder.parent
    if not folder.exists():
        raise SessionError(f"{folder}: no such session folder; {_FIX}")
    if not folder.is_dir():
        raise SessionError(f"{folder}: not a folder; {_FIX}")
    meta = _read_meta(folder / "session.yaml")
    warnings: list[str] = []
    columns, samples = _read_samples(folder / "samples.csv", warnings)
    events = _read_events(folder / "events.csv", warnings)

    outcome = meta.get("outcome")
    clean_end = isinstance(outcome, str) and outcome not in ("running", "")
    n = len(samples.get("t", ()))
    truncated = None
    if not clean_end:
        truncated = (f"session ended without a clean stop (outcome: {outcome or 'missing'}) "
                     f"— metrics from the {n} rows recorded")
    elif not meta.get("ended_utc"):
        truncated = (f"session.yaml has no ended_utc although the outcome is {outcome}: the end "
                     f"was not recorded cleanly — metrics from the {n} rows recorded")
    return Session(folder, meta, samples, columns, events, clean_end, truncated, warnings)


def _read_meta(path: Path) -> dict:
    if not path.is_file():
        raise SessionError(f"{path} not found; {_FIX}")
    try:
        with open(path, encoding="utf-8") as fh:
            meta = yaml.safe_load(fh)
    except yaml.YAMLError as exc:
        where = ""
        mark = getattr(exc, "problem_mark", None)
        if mark is not None:
            where = f" at line {mark.line + 1}, column {mark.column + 1}"
        raise SessionError(f"{path}: not valid YAML{where}; restore it from a backup or "
                           f"re-record the session") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise SessionError(f"{path}: cannot be read ({exc}); check the file's permissions") from None
    if not isinstance(meta, dict):
        raise SessionError(f"{path}: expected a mapping of session fields, found "
                           f"{type(meta).__name__}; {_FIX}")
    return meta


def _complete_lines(path: Path, warnings: list[str]):
    """Yield the lines of a text file, dropping a last line that lacks its newline.

    A writer always ends a row with a newline, so a last line without one was cut by a crash.
    """
    with open(path, encoding="utf-8", errors="replace", newline="") as fh:
        pending = None
        for line in fh:
            if pending is not None:
                yield pending
            pending = line
        if pending is not None:
            if pending.endswith("\n"):
                yield pending
            elif pending.strip():
                warnings.append(f"{path.name}: the last line was cut short by the writer and "
                                f"is ignored: {pending.strip()[:60]!r}")


def _read_samples(path: Path, warnings: list[str]) -> tuple[list[str], dict[str, np.ndarray]]:
    """Read samples.csv in chunks of whole lines.

    The recorder writes plain comma-separated numbers and state words, never quoted fields, so
    a chunk is split in bulk rather than row by row (an hour at 1 kHz is millions of rows).
    """
    if not path.is_file():
        raise SessionError(f"{path} not found; {_FIX}")
    with open(path, encoding="utf-8", errors="replace", newline="") as fh:
        header_line = fh.readline()
        header = [h.strip() for h in header_line.rstrip("\r\n").split(",")]
        if not header_line.strip():
            raise SessionError(f"{path}: empty file (no header row); {_FIX}")
        if "t" not in header:
            raise SessionError(f"{path}: the header has no 't' column (found "
                               f"{', '.join(header[:8])}); {_FIX}")
        width = len(header)
        chunks: dict[str, list[np.ndarray]] = {name: [] for name in header}
        bad_lines: list[int] = []
        bad_values: dict[str, int] = {}
        lineno = 1
        while True:
            lines = fh.readlines(_CHUNK_BYTES)
            if not lines:
                break
            first = lineno + 1
            lineno += len(lines)
            if not lines[-1].endswith("\n"):          # only the file's last line can lack it
                cut = lines.pop()
                if cut.strip():
                    warnings.append(f"{path.name}: the last line was cut short by the writer and "
                                    f"is ignored: {cut.strip()[:60]!r}")
            rows = "".join(lines).replace("\r", "").split("\n")[:-1]
            commas = [row.count(",") for row in rows]
            if commas.count(width - 1) != len(commas):
                bad_lines += [first + i for i, (row, c) in enumerate(zip(rows, commas))
                              if c != width - 1 and row.strip()]
                rows = [row for row, c in zip(rows, commas) if c == width - 1]
            if rows:
                for name, col in _split_columns(rows, header, bad_values).items():
                    chunks[name].append(col)
    if bad_lines:
        shown = ", ".join(str(n) for n in bad_lines[:5])
        warnings.append(f"{path.name}: {len(bad_lines)} line(s) with a wrong number of fields "
                        f"ignored (line {shown}{' …' if len(bad_lines) > 5 else ''})")
    for name, count in bad_values.items():
        warnings.append(f"{path.name}: {count} non-numeric value(s) in column '{name}' read as NaN")
    samples = {}
    for name in header:
        parts = chunks[name]
        if parts:
            samples[name] = np.concatenate(parts)
        else:
            samples[name] = np.array([], dtype=str if name in TEXT_COLUMNS else float)
    return header, samples


def _split_columns(rows: list[str], header: list[str], bad_values: dict[str, int]
                   ) -> dict[str, np.ndarray]:
    """Columns of a chunk of rows that all have the header's number of fields."""
    numeric = [j for j, name in enumerate(header) if name not in TEXT_COLUMNS]
    out: dict[str, np.ndarray] = {}
    try:    # fast path: numpy's own parser; refuses empty fields and garbage
        block = np.loadtxt(rows, delimiter=",", usecols=numeric, dtype=float, ndmin=2,
                           comments=None)
        for k, j in enumerate(numeric):
            out[header[j]] = block[:, k]
        for j, name in enumerate(header):
            if name in TEXT_COLUMNS:
                texts = [row.split(",", j + 1)[j] for row in rows]
                out[name] = np.char.strip(np.array(texts, dtype=str))
        return out
    except ValueError:
        pass
    fields = ",".join(rows).split(",")
    for j, name in enumerate(header):
        out[name] = _column_array(name, fields[j::len(header)], bad_values)
    return out


def _column_array(name: str, col: list[str], bad_values: dict[str, int]) -> np.ndarray:
    """One column from its text fields: empty -> NaN (as the format says); garbage -> NaN, counted."""
    if name in TEXT_COLUMNS:
        return np.char.strip(np.asarray(col, dtype=str))
    try:
        return np.fromiter(map(float, col), dtype=float, count=len(col))
    except ValueError:
        out = np.empty(len(col))
        for i, text in enumerate(col):
            try:
                out[i] = float(text)
            except ValueError:
                out[i] = math.nan
                if text.strip():
                    bad_values[name] = bad_values.get(name, 0) + 1
        return out


def _read_events(path: Path, warnings: list[str]) -> list[SessionEvent]:
    if not path.is_file():
        warnings.append(f"{path.name} not found: the session is read without its events")
        return []
    reader = csv.reader(_complete_lines(path, warnings))
    try:
        header = [h.strip() for h in next(reader)]
    except (StopIteration, csv.Error):
        warnings.append(f"{path.name}: no header row; events ignored")
        return []
    index = {name: i for i, name in enumerate(header)}
    if "kind" not in index:
        warnings.append(f"{path.name}: the header has no 'kind' column; events ignored")
        return []

    def get(row: list[str], name: str) -> str:
        i = index.get(name)
        return row[i].strip() if i is not None and i < len(row) else ""

    events = []
    try:
        for row in reader:
            if not row:
                continue
            t = _parse_number(get(row, "t"))
            events.append(SessionEvent(
                t=t if isinstance(t, float) else None,
                wall_utc=get(row, "wall_utc"),
                kind=get(row, "kind"),
                detail=get(row, "detail"),
                value=_parse_number(get(row, "value")),
                limit=_parse_number(get(row, "limit")),
            ))
    except csv.Error as exc:
        warnings.append(f"{path.name}: reading stopped ({exc}); events before it are used")
    return events


def _parse_number(text: str) -> float | str | None:
    if text == "":
        return None
    try:
        return float(text)
    except ValueError:
        return text


def _float_or_nan(x) -> float:
    if isinstance(x, bool):
        return math.nan
    try:
        return float(x)
    except (TypeError, ValueError):
        return math.nan
