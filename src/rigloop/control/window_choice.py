"""How long an estimator window must be: the shortest a config may use, its noise, its lag.

One place for the numbers that ``rigloop check`` warns about and ``rigloop identify`` suggests,
so that the two never disagree on the shortest window.

Every estimator kind is linear, ``F̂ = Σc_i·y_i − alpha·Σw_j·u_j`` (:mod:`rigloop.control.kernels`),
so its noise and its lag follow from its weights, whatever the kind:

* **noise gain** — white noise of standard deviation σ on y gives F̂ a standard deviation
  ``σ·‖c‖ = σ·√(Σc_i²)`` (the variance of a weighted sum of independent samples, a standard
  result). This is what the kind costs in noise; no kind is assumed to be the algebraic one.
* **lag** — the u-weights sum to 1 (the kernels' construction), so ``Σ w_j·age_j`` is the mean
  age of the input the estimate pairs with y: about T/2 for the algebraic and averaging kinds,
  Ts/2 for one-step. A closed loop sees it as extra dead time.
"""

from __future__ import annotations

import math

import numpy as np

from rigloop.control.estimators import make_kernel

#: Fewest sample intervals a window should hold, by model order (our choice, checked on the
#: simulated rigs): a least-squares slope over fewer than 5 samples, or a second derivative over
#: fewer than 10, is dominated by the readings' rounding and quantization, and an iPD on a
#: 7-sample second-derivative window was seen to limit-cycle rail to rail on an encoder.
SHORTEST_WINDOW_SAMPLES = {1: 5, 2: 10}


def shortest_window(kind: str, order: int) -> int:
    """Shortest window (sample intervals) for ``kind``; one-step always uses its own fixed span."""
    if kind == "one-step":
        return int(order)
    return SHORTEST_WINDOW_SAMPLES[int(order)]


def noise_gain(kind: str, order: int, n: int, ts: float) -> float:
    """σ(F̂)/σ(y) of the estimator for white noise on y: ``‖y-weights‖``."""
    return float(np.linalg.norm(make_kernel(kind, order, int(n), ts).y_weights))


def input_lag(kind: str, order: int, n: int, ts: float) -> float:
    """Mean age (s) of the applied input in the estimate: ``Σ w_j·(span − j − 1/2)·Ts``."""
    w = make_kernel(kind, order, int(n), ts).u_weights
    ages = (w.size - np.arange(w.size) - 0.5) * ts
    return float(np.dot(w, ages) / np.sum(w))


def window_for_noise(kind: str, order: int, sigma_y: float, ts: float, target: float,
                     n_max: int) -> tuple[int, float]:
    """Shortest window n >= :func:`shortest_window` whose F̂ noise is at most ``target``.

    Returns ``(n, σ_F)``; ``n_max`` when even that is noisier than the target (the caller says
    so). For ``one-step`` the window is fixed: the answer is its span and its noise.
    """
    n_min = shortest_window(kind, order)
    if kind == "one-step":
        return n_min, sigma_y * noise_gain(kind, order, n_min, ts)
    n_max = max(int(n_max), n_min)
    if not (sigma_y > 0) or not (target > 0):
        return n_min, (0.0 if sigma_y == 0 else math.nan)

    def sigma_f(n: int) -> float:
        return sigma_y * noise_gain(kind, order, n, ts)

    if sigma_f(n_max) > target:
        return n_max, sigma_f(n_max)
    lo, hi = n_min, n_max
    while lo < hi:                       # σ_F falls monotonically with n for every kind
        mid = (lo + hi) // 2
        if sigma_f(mid) <= target:
            hi = mid
        else:
            lo = mid + 1
    return lo, sigma_f(lo)
