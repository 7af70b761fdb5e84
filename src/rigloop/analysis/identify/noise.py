"""The output's noise floor, from the readings themselves.

Why not the deviation about a fitted curve (what this tool did first): along a move, anything
the curve does not follow counts as noise — a load ripple that repeats with the position of a
geared rig, a drift, the tail of a step. Those are slow against the sample period, noise is not.
So the noise is read from the **second differences** ``Δ²y_k = y_{k+1} − 2y_k + y_{k−1}``: a
high-pass filter that removes a level, a ramp and (to ``Ts²·y''``) any smooth motion, and
passes white noise with variance ``6σ²`` (1 + 4 + 1, a standard result for a weighted sum of
independent samples). The estimate is an RMS that leaves out the largest 1 % of the differences
(spikes, a load step), taken over the steady stretches of every hold.

A reading that is a **quantized** value (an encoder's counts, an ADC's steps, a pulse tach)
does not change at all when its true value moves by less than one step q, so at rest the
differences can be all zero. A uniform quantizer adds noise of standard deviation
``q/√12`` (the standard result for a uniform quantizer's rounding error), so the floor is never
taken below that. q is the smallest step between distinct readings (:func:`reading_quantum`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

#: Largest fraction of the second differences left out as outliers.
TRIM_FRACTION = 0.01
#: Readings whose steps are all whole multiples of a q within this many q count as quantized
#: (float32 on the wire rounds a value in its 7th digit, a few thousandths of an encoder count
#: at a hundred turns).
QUANTUM_TOLERANCE = 0.05


@dataclass(frozen=True)
class NoiseFloor:
    """Standard deviation of the output's noise, and where it came from."""

    sigma: float             # the floor used: max(sigma_diff, quantum/√12)
    sigma_diff: float        # from the second differences
    quantum: float           # smallest step between readings (0: not quantized)
    samples: int             # number of second differences used

    @property
    def sigma_quantum(self) -> float:
        return self.quantum / math.sqrt(12.0)

    @property
    def source(self) -> str:
        if self.quantum > 0 and self.sigma_quantum >= self.sigma_diff:
            return f"quantization: step {self.quantum:.3g}, q/sqrt(12)"
        return "second differences at the holds"


def second_difference_sigma(pieces: Sequence[np.ndarray]) -> tuple[float, int]:
    """σ of white noise from the second differences of each piece (module docstring)."""
    d2 = [np.diff(np.asarray(p, dtype=float), 2) for p in pieces if len(p) >= 3]
    if not d2:
        return math.nan, 0
    d = np.abs(np.concatenate(d2))
    keep = max(1, int(math.floor(d.size * (1.0 - TRIM_FRACTION))))
    d = np.partition(d, keep - 1)[:keep] if keep < d.size else d
    return float(math.sqrt(float(np.mean(d * d)) / 6.0)), int(d.size)


def reading_quantum(y: np.ndarray) -> float:
    """The step q of quantized readings, 0 when they are not quantized.

    q is the smallest non-zero difference between sorted distinct readings; the readings count
    as quantized when every difference is a whole multiple of it (within
    :data:`QUANTUM_TOLERANCE` of q) and at least one reading repeats.
    """
    y = np.asarray(y, dtype=float)
    y = y[np.isfinite(y)]
    levels = np.unique(y)
    if levels.size < 2 or levels.size == y.size:
        return 0.0
    steps = np.diff(levels)
    scale = max(float(np.max(np.abs(levels))), 1e-300)
    steps = steps[steps > 1e-9 * scale]
    if steps.size == 0:
        return 0.0
    q = float(np.min(steps))
    ratio = steps / q
    if np.max(np.abs(ratio - np.round(ratio))) > QUANTUM_TOLERANCE:
        return 0.0
    return q


def noise_floor(pieces: Sequence[np.ndarray]) -> NoiseFloor:
    """The noise floor of the readings in ``pieces`` (steady stretches of the holds)."""
    sigma_diff, count = second_difference_sigma(pieces)
    allv = np.concatenate([np.asarray(p, dtype=float) for p in pieces]) if pieces else np.empty(0)
    q = reading_quantum(allv)
    sigma = max(sigma_diff if math.isfinite(sigma_diff) else 0.0, q / math.sqrt(12.0))
    return NoiseFloor(sigma, sigma_diff, q, count)
