"""A fixed-size history of telemetry rows for the live plots, without per-frame copying.

Rows arrive from the engine's telemetry ring in batches. They are appended to an array twice the
capacity; when it fills, the newest ``capacity`` rows move to the front once. So every read is a
contiguous view (no copy), appends cost O(batch), and memory stays flat however long the session
runs. Time (column ``t``) grows monotonically within a session, so a time window is found by
binary search.
"""

from __future__ import annotations

import numpy as np


class TraceBuffer:
    def __init__(self, fields: tuple[str, ...] | list[str], capacity: int):
        if capacity < 1:
            raise ValueError(f"capacity must be at least 1 row, not {capacity}")
        self.fields = tuple(fields)
        self.index = {name: i for i, name in enumerate(self.fields)}
        self.capacity = int(capacity)
        self._data = np.full((2 * self.capacity, len(self.fields)), np.nan)
        self._n = 0
        self.total = 0          # rows ever appended

    @classmethod
    def from_rows(cls, fields, rows: np.ndarray) -> "TraceBuffer":
        """A buffer holding exactly ``rows`` (read-only views of a recording): no second half
        reserved for appending, no copy when the array is already float64."""
        rows = np.ascontiguousarray(rows, dtype=np.float64)
        buf = cls(fields, 1)
        if rows.ndim == 2 and rows.shape[0]:
            buf.capacity = rows.shape[0]
            buf._data = rows
            buf._n = buf.total = rows.shape[0]
        return buf

    def __len__(self) -> int:
        return self._n

    def clear(self) -> None:
        self._n = 0
        self.total = 0

    def append(self, rows: np.ndarray) -> None:
        rows = np.asarray(rows, dtype=np.float64)
        if rows.ndim != 2 or rows.shape[0] == 0:
            return
        k = rows.shape[0]
        self.total += k
        if k >= self.capacity:
            self._data[: self.capacity, : rows.shape[1]] = rows[-self.capacity:]
            self._n = self.capacity
            return
        if self._n + k > self._data.shape[0]:
            keep = self.capacity - k
            self._data[:keep] = self._data[self._n - keep: self._n]
            self._n = keep
        self._data[self._n: self._n + k, : rows.shape[1]] = rows
        self._n += k

    @property
    def rows(self) -> np.ndarray:
        """All held rows (a view, oldest first)."""
        return self._data[: self._n]

    def column(self, name: str, start: int = 0) -> np.ndarray:
        return self._data[start: self._n, self.index[name]]

    @property
    def t_last(self) -> float | None:
        return float(self._data[self._n - 1, self.index["t"]]) if self._n else None

    def start_of(self, t_from: float) -> int:
        """Index of the first held row with ``t >= t_from``."""
        if not self._n:
            return 0
        return int(np.searchsorted(self._data[: self._n, self.index["t"]], t_from, side="left"))

    def value_at(self, t: float, name: str) -> float | None:
        """The value of ``name`` at the held sample nearest to time ``t`` (for a cross-hair)."""
        if not self._n or name not in self.index:
            return None
        ts = self._data[: self._n, self.index["t"]]
        i = int(np.searchsorted(ts, t))
        if i >= self._n:
            i = self._n - 1
        elif i > 0 and abs(ts[i - 1] - t) <= abs(ts[i] - t):
            i -= 1
        return float(self._data[i, self.index[name]])
