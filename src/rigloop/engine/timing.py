"""Flat-memory timing statistics: a log-spaced histogram gives percentiles over an hour-long
session without keeping every sample (memory must stay flat, design §6)."""

from __future__ import annotations

import math

import numpy as np


class LogHistogram:
    """Percentiles of positive values between ``lo`` and ``hi`` to about 1 % relative resolution."""

    def __init__(self, lo: float = 1e-7, hi: float = 100.0, bins_per_decade: int = 100):
        self.lo = lo
        self.log_lo = math.log10(lo)
        self.k = bins_per_decade
        self.n_bins = int(math.ceil((math.log10(hi) - self.log_lo) * bins_per_decade)) + 2
        self.counts = [0] * self.n_bins       # a list: += on one numpy item costs far more
        self.n = 0
        self.max = -math.inf

    def add(self, x: float) -> None:
        if not x == x:  # NaN
            return
        if x > self.max:
            self.max = x
        if x <= self.lo:
            i = 0
        else:
            i = int((math.log10(x) - self.log_lo) * self.k) + 1
            if i >= self.n_bins:
                i = self.n_bins - 1
        self.counts[i] += 1
        self.n += 1

    def percentile(self, p: float) -> float:
        if self.n == 0:
            return math.nan
        target = p / 100.0 * self.n
        cum = np.cumsum(np.asarray(self.counts, dtype=np.int64))
        i = int(np.searchsorted(cum, target, side="left"))
        if i == 0:
            return self.lo
        # upper edge of bin i, capped by the observed maximum
        edge = 10 ** (self.log_lo + i / self.k)
        return min(edge, self.max)

    def summary(self, scale: float = 1.0, digits: int = 4) -> dict:
        f = (lambda v: None if not math.isfinite(v) else round(v * scale, digits))
        return {"p50": f(self.percentile(50)), "p99": f(self.percentile(99)),
                "max": f(self.max if self.n else math.nan)}
