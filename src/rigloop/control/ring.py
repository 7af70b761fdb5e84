"""Sliding windows of the newest samples, readable as one contiguous array.

Why: an estimator evaluates ``weights · window`` every sample. Keeping the values twice in a
buffer of twice the window length ("doubled ring") means the newest ``length`` samples are always
one contiguous slice, oldest first, so a single ``dot`` with precomputed weights does the work
and nothing is copied per sample (a slice is a view, freed at once, so memory stays flat).

:class:`SlidingWindow` keeps one value per sample. :class:`PairWindow` keeps the pair
``(y_k, u_k)`` of each sample interleaved (``y_0, u_0, y_1, u_1, ...``), so that an estimate that
weighs both the measurement and the applied input is *one* dot product.
"""

from __future__ import annotations

import numbers

import numpy as np

def _check_length(length: int) -> int:
    if isinstance(length, bool) or not isinstance(length, numbers.Integral) or length < 1:
        raise ValueError(f"window length must be an integer >= 1, got {length!r}")
    return int(length)


class _DoubledRing:
    """``width`` values per sample, the newest ``length`` samples contiguous, oldest first."""

    __slots__ = ("length", "width", "count", "_buf", "_pos", "_span", "_half")

    def __init__(self, length: int, width: int) -> None:
        self.length = _check_length(length)
        self.width = width
        self._span = self.length * width  # values in one window
        self._half = self._span  # offset of the second copy
        self._buf = np.zeros(2 * self._span)
        self._pos = 0  # index (in values) of the oldest sample of the window
        self.count = 0

    @property
    def full(self) -> bool:
        """True once ``length`` samples have been pushed."""
        return self.count >= self.length

    def view(self) -> np.ndarray:
        """The window, oldest first (samples not yet pushed read as 0). Do not modify."""
        return self._buf[self._pos : self._pos + self._span]

    def dot(self, weights: np.ndarray) -> float:
        """``Σ weights[i] · window[i]``."""
        return float(weights.dot(self.view()))

    def _advance(self) -> None:
        pos = self._pos + self.width
        self._pos = 0 if pos == self._span else pos
        if self.count < self.length:
            self.count += 1

    def clear(self) -> None:
        """Forget every sample."""
        self._buf[:] = 0.0
        self._pos = 0
        self.count = 0


class SlidingWindow(_DoubledRing):
    """The last ``length`` values of one signal."""

    __slots__ = ()

    def __init__(self, length: int) -> None:
        super().__init__(length, 1)

    def push(self, value: float) -> None:
        """Store ``value`` as the newest sample, dropping the oldest when full."""
        b, p = self._buf, self._pos
        b[p] = value
        b[p + self._half] = value
        self._advance()

    def newest(self, n: int) -> np.ndarray:
        """A copy of the newest ``min(n, count)`` values, oldest first (not for the hot path)."""
        n = min(int(n), self.count)
        return self.view()[self.length - n :].copy() if n > 0 else np.empty(0)


class PairWindow(_DoubledRing):
    """The last ``length`` samples of ``(y, u)``, interleaved: ``y_0, u_0, ..., y_n, u_n``."""

    __slots__ = ()

    def __init__(self, length: int) -> None:
        super().__init__(length, 2)

    def push(self, y: float, u: float) -> None:
        """Store the newest sample, dropping the oldest when full."""
        b, p, h = self._buf, self._pos, self._half
        b[p] = y
        b[p + 1] = u
        b[p + h] = y
        b[p + h + 1] = u
        self._advance()

    def newest(self, n: int) -> tuple[np.ndarray, np.ndarray]:
        """Copies of the newest ``min(n, count)`` y and u values, oldest first (not hot path)."""
        n = min(int(n), self.count)
        if n <= 0:
            return np.empty(0), np.empty(0)
        tail = self.view()[2 * (self.length - n) :]
        return tail[0::2].copy(), tail[1::2].copy()

    def resized(self, length: int) -> PairWindow:
        """A new window of ``length`` samples holding the newest samples of this one (two block
        copies: a live change of the estimator window must not stall the loop)."""
        out = PairWindow(length)
        n = min(out.length, self.count)
        if n:
            tail = self.view()[2 * (self.length - n):]
            out._buf[: 2 * n] = tail
            out._buf[out._half : out._half + 2 * n] = tail
            out._pos = (2 * n) % out._span
            out.count = n
        return out


def interleave(y_weights: np.ndarray | None, u_weights: np.ndarray | None, length: int, u_lag: int = 1) -> np.ndarray:
    """Weights for a :class:`PairWindow` of ``length`` samples, aligned to its newest end.

    ``y_weights[-1]`` falls on the newest y; ``u_weights[-1]`` on the u ``u_lag`` samples older
    (1 for the estimators: the newest sample's u acts only from its own tick on). Read-only.
    """
    length = _check_length(length)
    w = np.zeros(2 * length)
    if y_weights is not None:
        ny = len(y_weights)
        if ny > length:
            raise ValueError(f"{ny} y-weights do not fit a window of {length} samples")
        w[2 * (length - ny) :: 2] = y_weights
    if u_weights is not None:
        nu = len(u_weights)
        if nu + u_lag > length:
            raise ValueError(f"{nu} u-weights lagged by {u_lag} do not fit a window of {length} samples")
        start = 2 * (length - u_lag - nu) + 1
        w[start : start + 2 * nu : 2] = u_weights
    w.flags.writeable = False
    return w
