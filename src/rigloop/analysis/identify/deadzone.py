"""Where the output starts to move on the bump test's slow ramp: the actuator's dead zone.

Many drives do nothing below some input: a fan's motor does not turn below a few per cent of
duty, a geared motor needs a breakaway voltage against static friction, a tach reads nothing
below its lowest speed. The bump test ramps the actuator slowly from its safe value to the
operating level; the output leaves its resting value at the first sample where it differs from
it by more than :data:`MOVE_SIGMAS` times the noise floor (and :data:`MOVE_FRACTION` of the
change the ramp causes).

The output lags the input, so at that sample the ramp has already gone further than the dead
zone. With the first-order-plus-dead-time model fitted to the steps (K, τ, θ), the response to
a ramp of slope r that starts at time 0 is

    m = 1:  g(s) = K·r·(s' − τ(1 − e^(−s'/τ))),            s' = s − θ
    m = 2:  g(s) = K·r·(s'²/2 − τ·s' + τ²(1 − e^(−s'/τ)))   (its integral)

and the ramp started ``s*`` before the crossing, where ``g(s*)`` equals the crossing's height.
The model's K is the one measured around the operating level; on a rig whose gain changes
with the input the corrected edge is an estimate, the uncorrected one an upper bound.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

#: The output has moved when it leaves its resting value by this many noise standard deviations
#: (about 1e-9 of white-noise samples go that far by chance; common practice for a detector).
MOVE_SIGMAS = 6.0
#: ... and by this fraction of the change the ramp causes (keeps a very quiet sensor's detector
#: from firing on a plant's slowest creep).
MOVE_FRACTION = 0.01
#: A dead zone is reported when the output starts to move further than this fraction of the
#: actuator range from the safe value (smaller ones are within what a ramp can resolve).
REPORT_FRACTION = 0.02


@dataclass
class DeadZone:
    """What the ramp showed (``None`` values: not measured)."""

    u_start: float | None         # input where the output starts to move, lag-corrected
    u_start_raw: float | None     # input at the sample where the output was seen to move
    t_start: float | None         # run time of that sample
    threshold: float | None       # how far the output had to move (output unit)
    found: bool                   # u_start is beyond REPORT_FRACTION of the range from safe
    note: str = ""

    def as_dict(self) -> dict:
        return asdict(self)


def ramp_response(order: int, s: float, gain: float, rate: float, tau: float, theta: float) -> float:
    """g(s) of the module docstring: the model's response s seconds after a ramp began."""
    x = max(s - theta, 0.0)
    decay = -math.expm1(-x / tau)
    if order == 1:
        return gain * rate * (x - tau * decay)
    return gain * rate * (0.5 * x * x - tau * x + tau * tau * decay)


def lag_behind_ramp(order: int, height: float, gain: float, rate: float, tau: float,
                    theta: float) -> float:
    """s* with |g(s*)| = |height| (bisection; g grows monotonically after θ)."""
    target = abs(height)
    lo, hi = theta, theta + max(tau, 1e-9)
    while abs(ramp_response(order, hi, gain, rate, tau, theta)) < target:
        hi = theta + 2.0 * (hi - theta)
        if hi - theta > 1e9 * max(tau, 1e-9):
            return math.inf
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if abs(ramp_response(order, mid, gain, rate, tau, theta)) < target:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def find_dead_zone(t: np.ndarray, y: np.ndarray, u: np.ndarray, *, order: int, ramp_end: float,
                   safe: float, u0: float, span: float, sigma: float, ts: float,
                   model: tuple[float, float, float] | None) -> DeadZone:
    """Where the output starts to move on the ramp ``t < ramp_end`` (module docstring).

    ``model`` is (K, τ, θ) from the steps, or None (no lag correction). ``span`` is the actuator
    range, for :data:`REPORT_FRACTION`.
    """
    if ramp_end <= 0 or abs(u0 - safe) == 0:
        return DeadZone(None, None, None, None, False, "no ramp (the operating level is the safe value)")
    on_ramp = t < ramp_end
    n = int(np.sum(on_ramp))
    theta = model[2] if model is not None else 0.0
    rest_n = max(3, min(int(theta / ts) + 2, n // 10))
    if n < rest_n + 5:
        return DeadZone(None, None, None, None, False, "the ramp holds too few samples")
    y_rest = float(np.median(y[:rest_n]))
    reach = float(y[min(np.searchsorted(t, ramp_end), y.size - 1)]) - y_rest
    threshold = max(MOVE_SIGMAS * sigma, MOVE_FRACTION * abs(reach))
    if threshold <= 0:
        return DeadZone(None, None, None, None, False, "the output did not change on the ramp")
    away = np.abs(y[:n] - y_rest) > threshold
    # the first sample from which the output stays away from rest for the rest of the ramp
    stays = np.flatnonzero(~away)
    i = int(stays[-1] + 1) if stays.size else 0
    if i >= n:
        return DeadZone(None, None, None, threshold, False,
                        f"the output did not move on the ramp up to {u[n - 1]:.4g}")
    u_raw = float(u[i])
    u_start = u_raw
    note = ""
    if model is not None and all(math.isfinite(v) for v in model) and model[1] > 0:
        rate = float(np.sign(u0 - safe)) * abs(u0 - safe) / ramp_end
        lag = lag_behind_ramp(order, threshold, model[0], rate, model[1], model[2])
        if math.isfinite(lag):
            u_start = float(np.interp(t[i] - lag, t[:n], u[:n]))
        else:
            note = "no lag correction (the model does not reach the threshold)"
    else:
        note = "no lag correction (no model from the steps)"
    direction = 1.0 if u0 >= safe else -1.0
    if (u_start - safe) * direction < 0:
        u_start = safe
    found = (u_start - safe) * direction > REPORT_FRACTION * span
    return DeadZone(u_start, u_raw, float(t[i]), threshold, bool(found), note)
