"""What part of a recorded response is noise: its floor, and a zero-lag smoothing that removes it.

Step metrics read extremes and band crossings, and noise moves both: the largest sample of a
noisy response lies a few standard deviations above the response itself, and a ±2 % band a few
standard deviations wide is left again and again by noise alone. So the noise is measured from
the data, and the crossings are read on a smoothed response whose remaining noise is known.

**Noise floor.** For white noise of standard deviation σ on a smooth signal, the second
difference ``d_k = y_k+1 − 2y_k + y_k−1`` has variance ``6σ²`` while the signal adds only
``y''·Ts²``, which is tiny at the sample rate. A robust scale of ``d`` — the median absolute
deviation times 1.4826 (the factor that makes it the standard deviation of normal data) —
ignores the few samples where a blend bends the signal, so ``σ = 1.4826·MAD(d)/√6``. Where more
than half the second differences are exactly 0 (a coarse quantizer on a slowly moving signal),
the MAD is 0 and the mean absolute deviation times √(π/2) (the same correction for normal data)
is used instead.

**Smoothing.** A Savitzky–Golay filter (a least-squares polynomial fitted in a sliding window,
"Smoothing and differentiation of data by simplified least squares procedures", Analytical
Chemistry, 1964): cubic, centred, so it has no lag and keeps the height of a peak that is wide
compared with the window. At interior points it passes white noise with the gain
``√h0``, ``h0`` the centre coefficient, so the noise left is ``σ_s = σ·√h0``.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

#: Polynomial order of the Savitzky–Golay smoothing (cubic: keeps peaks and inflections).
SMOOTH_POLYORDER = 3
#: Shortest window that smooths at all (the cubic needs at least 5 points to leave noise out).
MIN_WINDOW = 5
#: Longest window: the filter costs one multiply-add per sample and window point, so this bounds
#: a report's time on hour-long recordings (about 0.5 s per million samples); a noise that would
#: need more smoothing widens the settling band instead (rigloop.analysis.transition).
MAX_WINDOW = 501
#: MAD -> standard deviation for normal data (common practice).
MAD_TO_STD = 1.4826
#: Mean absolute deviation -> standard deviation for normal data, √(π/2) (common practice).
MEAN_ABS_TO_STD = math.sqrt(math.pi / 2.0)


def noise_floor(y) -> float:
    """Standard deviation of the white noise on ``y`` (finite samples, evenly spaced), from the
    robust scale of the second differences (module docstring); 0 when fewer than 5 samples."""
    y = np.asarray(y, dtype=float)
    y = y[np.isfinite(y)]
    if y.size < 5:
        return 0.0
    d = np.diff(y, 2)
    dev = np.abs(d - np.median(d))
    scale = MAD_TO_STD * float(np.median(dev))
    if scale == 0.0:
        scale = MEAN_ABS_TO_STD * float(np.mean(dev))
    return scale / math.sqrt(6.0)


def centre_gain(window: int) -> float:
    """Noise gain ``√h0`` of the cubic Savitzky–Golay filter of ``window`` samples (1 -> 1)."""
    if window < MIN_WINDOW:
        return 1.0
    from scipy.signal import savgol_coeffs

    return math.sqrt(float(savgol_coeffs(window, SMOOTH_POLYORDER)[window // 2]))


def window_for_noise(sigma: float, target: float, most: int) -> int:
    """The shortest odd window (at most ``most`` and ``MAX_WINDOW``) whose remaining noise
    ``σ·√h0`` is at most ``target``; 1 (no smoothing) when the raw noise already is."""
    if not sigma > 0.0 or sigma <= target:
        return 1
    most = min(most, MAX_WINDOW)
    most = most if most % 2 else most - 1
    if most < MIN_WINDOW:
        return 1
    # √h0 ≈ 1.5/√W for long windows (h0 → 9/(4W)), a first guess refined by stepping
    guess = int(min(most, max(MIN_WINDOW, math.ceil((1.5 * sigma / target) ** 2))))
    w = guess if guess % 2 else guess + 1
    w = min(w, most)
    while w > MIN_WINDOW and sigma * centre_gain(w - 2) <= target:
        w -= 2
    while w < most and sigma * centre_gain(w) > target:
        w += 2
    return w


class Smoothed(NamedTuple):
    y: np.ndarray          # the smoothed response (the input itself when window == 1)
    window: int            # samples (odd); 1 means not smoothed
    noise_left: float      # standard deviation of the noise left in y


def smooth(y: np.ndarray, window: int, sigma: float) -> Smoothed:
    """Cubic Savitzky–Golay smoothing of the finite, evenly spaced samples ``y``.

    At the ends the data are mirrored about the end sample: a step segment starts and ends on a
    level, which a mirror image continues naturally, whereas a cubic fitted to the last window
    extrapolates to the end sample and passes several times the noise there — enough to make
    a peak of the noise alone at the segment's last sample."""
    y = np.asarray(y, dtype=float)
    if window < MIN_WINDOW or y.size < window:
        return Smoothed(y, 1, sigma)
    from scipy.signal import savgol_filter

    return Smoothed(savgol_filter(y, window, SMOOTH_POLYORDER, mode="mirror"), window,
                    sigma * centre_gain(window))
