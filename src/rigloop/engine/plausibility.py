"""Plausibility of the feedback: does the controlled output answer the actuator?

A limit sees a value; it cannot see a reading that stopped meaning anything. A frozen or
disconnected sensor, a stalled rotor, a slipping coupling or a sensor counting the wrong way
all leave the reading inside its limits while the law drives the actuator to a limit. The
ultra-local model ``y^(m) = F + alpha·u`` says what an answer looks like: while the actuator
sits at a limit that pushes the output towards the reference, the output's (m−1)-th derivative
must move in the direction ``sign(alpha)·sign(Δu)`` by more than its noise band within a
response time. Three checks follow from it (safety.md, "Feedback plausibility"):

* **no answer at a limit** — the actuator at a limit other than the safe value, the reference
  beyond the output in the pushed direction by more than the noise band, for a response time,
  and the output (m = 1: its mean over the estimator window; m = 2: its least-squares slope)
  has not moved that way by more than its band: trip ``no-response``. At the safe value (the
  actuator off) a still output is a rig at rest; only an output moving *against* the reference
  trips there.
* **bit-identical reading while the loop asks for change** — the reading repeats exactly for
  ``frozen_s`` *after* the loop began to ask for change, that is while the command has moved
  far from its value when the reading began to repeat (its expected answer is :data:`FAR_FACTOR` bands,
  and at least :data:`FAR_MIN_FRACTION` of the actuator range), or reached a limit other than
  safe, or the error is far from zero (:data:`ERROR_FAR_FRACTION` of the output's span). A
  quantized sensor at rest reads exactly the same value forever: with a steady command that is
  not a fault, and an output that rested for a long time gets the whole ``frozen_s`` to answer
  a command that then moves.
* the noise band itself comes from the samples before ARM (:class:`NoiseMeter`), so every
  threshold is set against the rig's own sensor, never against a built-in simulator.

Everything here is a pure function of the samples it is given; the engine acts on the trips.
"""

from __future__ import annotations

import math
from collections import deque

import numpy as np

from rigloop.control.kernels import slope_weights
from rigloop.engine.records import Trip

#: Half-width of the noise band in standard deviations (common practice: a Gaussian reading
#: leaves ±4σ about once in 16 000 samples, and the checks below need it for a whole response
#: time, not once).
NOISE_BAND_SIGMAS = 4.0
#: An actuator change is "far" when the answer the model expects over the frozen time is this
#: many noise bands (common practice: a margin of 4 against the band).
FAR_FACTOR = 4.0
#: ... and at least this fraction of the actuator range, so that a dead zone or breakaway
#: friction (where F cancels alpha·u until the rotor breaks free) is not taken for a dead sensor
#: (common practice: the dead zones and breakaway of bench drives stay well below a quarter).
FAR_MIN_FRACTION = 0.25
#: An error "far from zero" for the frozen check: this fraction of the output's span (its limits,
#: else the reference's range) — far above what a loop at rest leaves behind (common practice).
ERROR_FAR_FRACTION = 0.05
#: Samples measured before ARM: about 0.2 s of the rig at rest, at least 16 and at most 64.
NOISE_SAMPLES_MIN, NOISE_SAMPLES_MAX, NOISE_SECONDS = 16, 64, 0.2
#: Rate of change: the least-squares slope over this many sample intervals (6 samples). Its
#: noise is ``σ·‖c‖`` (kernels.slope_weights); a single spike of height h reads ``h/(7·Ts)``.
RATE_WINDOW_INTERVALS = 5
#: rate_max below this many standard deviations of the slope's noise would trip on noise
#: (common practice: 6σ, about one false trip in 5·10^8 samples for Gaussian noise).
RATE_NOISE_SIGMAS = 6.0
#: MAD of a normal variable in standard deviations (Φ⁻¹(3/4), a standard constant).
_MAD_TO_STD = 0.6744897501960817


def idle_samples_needed(rate_hz: float) -> int:
    """How many samples at rest the noise meter wants (NOISE_SECONDS, clamped)."""
    return int(min(NOISE_SAMPLES_MAX, max(NOISE_SAMPLES_MIN, round(NOISE_SECONDS * rate_hz))))


def noise_std(values) -> float:
    """Standard deviation of white noise on a slowly varying signal, from second differences.

    ``y_{k+1} − 2y_k + y_{k−1}`` removes any straight-line drift (a rotor still coasting) and
    has variance ``6σ²`` for white noise. The median absolute value gives σ robustly (a spike
    does not inflate it); when more than half are zero (a coarse quantizer), the RMS is used.
    """
    y = np.asarray(values, dtype=float)
    if y.size < 3:
        return 0.0
    d2 = np.abs(y[2:] - 2.0 * y[1:-1] + y[:-2])
    d2 = d2[np.isfinite(d2)]
    if d2.size == 0:
        return 0.0
    med = float(np.median(d2))
    if med > 0.0:
        return med / _MAD_TO_STD / math.sqrt(6.0)
    return float(np.sqrt(np.mean(d2 * d2) / 6.0))


def resolution(values) -> float:
    """The smallest non-zero step between consecutive readings (0 when the reading never moved)."""
    y = np.asarray(values, dtype=float)
    steps = np.abs(np.diff(y))
    steps = steps[np.isfinite(steps) & (steps > 0.0)]
    return float(steps.min()) if steps.size else 0.0


def rate_noise_gain(period_s: float) -> float:
    """‖c‖₂ of the rate-of-change slope: its noise is this times the reading's σ."""
    return float(np.linalg.norm(slope_weights(RATE_WINDOW_INTERVALS, period_s)))


class NoiseMeter:
    """Collects the channels' samples before ARM and turns them into a noise floor per channel."""

    def __init__(self, names, needed: int):
        self.names = list(names)
        self.needed = int(needed)
        self._rows: list = []

    def add(self, values) -> None:
        if len(self._rows) < self.needed:
            self._rows.append(list(values))

    @property
    def done(self) -> bool:
        return len(self._rows) >= self.needed

    @property
    def count(self) -> int:
        return len(self._rows)

    def floor(self) -> dict:
        """``{channel: {"std", "resolution", "samples"}}`` from what was collected."""
        out = {}
        cols = np.array(self._rows, dtype=float).T if self._rows else None
        for i, name in enumerate(self.names):
            col = cols[i] if cols is not None else np.array([])
            out[name] = {"std": noise_std(col), "resolution": resolution(col), "samples": int(col.size)}
        return out


def band_of(std: float, res: float, level: float = 0.0) -> float:
    """Half-width of the noise band: NOISE_BAND_SIGMAS·σ, at least two quantization steps, and
    never below the rounding of a float at the signal's level."""
    return max(NOISE_BAND_SIGMAS * std, 2.0 * res, 1e-9 * max(1.0, abs(level)))


class ResponseMonitor:
    """The output's answer to the actuator (module docstring). Call :meth:`update` per running
    sample; :meth:`reset` at each ARM; :meth:`set_noise` once the noise floor is known."""

    def __init__(self, *, channel: str, unit: str, order: int, alpha: float, u_min: float,
                 u_max: float, safe: float, period_s: float, response_s: float, frozen_s: float,
                 window: int, span: float | None, std: float = 0.0, res: float = 0.0,
                 actuator: str = "u", actuator_unit: str = ""):
        self.channel, self.unit = channel, unit
        self.order = int(order)
        self.alpha = float(alpha)
        self.u_min, self.u_max, self.safe = float(u_min), float(u_max), float(safe)
        self.period_s = float(period_s)
        self.response_s = float(response_s)
        self.frozen_s = float(frozen_s)
        self.actuator, self.actuator_unit = actuator, actuator_unit
        self.span = span
        self._tol = 1e-6 * max(abs(self.u_max - self.u_min), 1e-12)
        n = max(2, int(window))
        self._n = n
        if self.order == 1:
            self._w = np.full(n + 1, 1.0 / (n + 1))          # mean over the window
        else:
            self._w = np.asarray(slope_weights(n, self.period_s))   # slope (velocity)
        self._buf = np.zeros(2 * (n + 1))
        self.set_noise(std, res)
        self.reset()

    def set_noise(self, std: float, res: float) -> None:
        self.std, self.res = float(std), float(res)
        self.band_y = band_of(self.std, self.res)
        if self.order == 1:
            self.band_z = self.band_y
        else:   # noise of the slope: σ‖c‖₂, a quantizer counted as uniform noise of q/√12
            sigma = max(self.std, self.res / math.sqrt(12.0))
            self.band_z = max(NOISE_BAND_SIGMAS * sigma * float(np.linalg.norm(self._w)), 1e-12)
        rng = abs(self.u_max - self.u_min)
        expected = abs(self.alpha) * (self.frozen_s if self.order == 1 else 0.5 * self.frozen_s ** 2)
        self.du_far = max(FAR_FACTOR * self.band_y / expected if expected > 0 else rng,
                          FAR_MIN_FRACTION * rng)
        self.e_far = max(FAR_FACTOR * self.band_y, ERROR_FAR_FRACTION * self.span) \
            if self.span else math.inf

    def reset(self) -> None:
        self._count = 0
        self._pos = 0
        self._sum = 0.0
        self._ring = [0.0] * (self._n + 1)
        self._episode = None                    # (t0, z0, d, s, at_safe, passed)
        self._last_y = None
        self._last_u = None
        self._same_since = None
        self._asked_since = None
        self._u_ref = None

    # ------------------------------------------------------------------------------------------
    def _push(self, y: float) -> float | None:
        m = self._n + 1
        pos = self._pos
        self._pos = (pos + 1) % m
        self._count += 1
        if self.order == 1:                    # the window's mean: a running sum, renewed at wrap
            ring = self._ring
            self._sum += y - ring[pos]
            ring[pos] = y
            if self._pos == 0:
                self._sum = math.fsum(ring)
            return self._sum / m if self._count >= m else None
        self._buf[pos] = y
        self._buf[pos + m] = y
        if self._count < m:
            return None
        return float(self._w.dot(self._buf[self._pos:self._pos + m]))

    def _limit_side(self, u: float) -> int:
        if u >= self.u_max - self._tol:
            return 1
        if u <= self.u_min + self._tol:
            return -1
        return 0

    def update(self, t: float, y: float, u: float, r: float) -> Trip | None:
        """One running sample: output y, applied actuator u, reference r (nan: open loop)."""
        z = self._push(y)
        trip = self._frozen(t, y, u, r)
        if trip is None and z is not None and r == r:
            trip = self._at_limit(t, y, z, u, r)
        self._last_y, self._last_u = y, u
        return trip

    def _frozen(self, t, y, u, r) -> Trip | None:
        if self._last_y is None or y != self._last_y:
            self._same_since = self._asked_since = None
            return None
        if self._same_since is None:
            self._same_since = t - self.period_s
            self._u_ref = self._last_u
        why = self._asking_for_change(y, u, r)
        if why is None:
            self._asked_since = None
            return None
        if self._asked_since is None:          # the rig gets frozen_s from now to answer
            self._asked_since = t - self.period_s
        if t - self._asked_since < self.frozen_s:
            return None
        held = t - self._same_since
        return Trip("no-response",
                    f"{self.channel} repeated {_g(y)} {self.unit} exactly {why}: a frozen or "
                    f"disconnected sensor (value: seconds repeated, limit: frozen time)",
                    t=t, channel=self.channel, value=held, limit=self.frozen_s)

    def _asking_for_change(self, y, u, r) -> str | None:
        """Why the loop asks the repeated reading to change (words), or None."""
        du = u - self._u_ref
        side = self._limit_side(u)
        limit_value = self.u_max if side > 0 else self.u_min
        to_limit = side != 0 and limit_value != self.safe and self._limit_side(self._u_ref) != side
        err = abs(y - r) if r == r else 0.0
        if abs(du) >= self.du_far:
            why = f"while {self.actuator} moved {_g(du)} {self.actuator_unit}".rstrip()
        elif to_limit:
            why = f"while {self.actuator} went to its limit {_g(limit_value)} {self.actuator_unit}".rstrip()
        elif err >= self.e_far and u != self.safe:
            why = f"while the error grew to {_g(err)} {self.unit}".rstrip()
        else:
            return None
        return why

    def _at_limit(self, t, y, z, u, r) -> Trip | None:
        d = self._limit_side(u)
        s = d * (1 if self.alpha > 0 else -1)
        asking = d != 0 and s * (r - y) > self.band_y
        ep = self._episode
        if not asking:
            self._episode = None
            return None
        at_safe = (self.u_max if d > 0 else self.u_min) == self.safe
        if ep is None or ep[2] != d:
            self._episode = [t, z, d, s, at_safe, False]
            return None
        t0, z0, _, _, _, passed = ep
        if passed or t - t0 < self.response_s:
            return None
        progress = s * (z - z0)
        if progress > self.band_z:
            ep[5] = True
            return None
        what = "value" if self.order == 1 else "rate of change"
        limit_text = f"{_g(self.u_max if d > 0 else self.u_min)} {self.actuator_unit}".rstrip()
        if progress < -self.band_z:
            return Trip("no-response",
                        f"{self.channel} moved against {self.actuator} (at its limit {limit_text} for "
                        f"{_g(t - t0)} s, its {what} went the other way): a sensor counting the wrong "
                        f"way, alpha of the wrong sign, a slipping coupling or a load the actuator "
                        f"cannot overcome (value: movement, limit: noise band)",
                        t=t, channel=self.channel, value=progress, limit=self.band_z)
        if at_safe:
            return None       # the actuator is off and the output is still: a rig at rest
        return Trip("no-response",
                    f"{self.channel} did not answer {self.actuator} at its limit {limit_text} for "
                    f"{_g(t - t0)} s (its {what} stayed inside its noise band): a frozen or "
                    f"disconnected sensor, a stalled rotor, a slipping coupling, or a reference out "
                    f"of reach (value: movement, limit: noise band)",
                    t=t, channel=self.channel, value=progress, limit=self.band_z)


class AppliedCheck:
    """The device's applied value against the host's command of the sequence it names.

    Every SAMPLE carries ``last_cmd_seq`` and the value applied: it must equal the COMMAND of
    that sequence after the device's clamps (those the host configured). Until the first COMMAND
    after ARM is applied the device holds the safe value. ``samples`` mismatches in a row trip.
    """

    def __init__(self, *, u_min: float, u_max: float, safe: float, samples: int = 3,
                 actuator: str = "u", unit: str = ""):
        self.u_min, self.u_max, self.safe = float(u_min), float(u_max), float(safe)
        self.samples = int(samples)
        self.actuator, self.unit = actuator, unit
        # float32 on the wire: 2^-23 relative, plus a part per million of the range
        self._tol_abs = 1e-6 * max(abs(self.u_max - self.u_min), 1e-9)
        self._sent: dict[int, float] = {}
        self._order: deque[int] = deque()
        self.reset()

    def reset(self) -> None:
        """At ARM: commands of earlier runs no longer count; the device holds safe first."""
        self._sent.clear()
        self._order.clear()
        self._bad = 0

    def sent(self, seq: int, value: float) -> None:
        self._sent[seq] = value
        self._order.append(seq)
        if len(self._order) > 256:
            self._sent.pop(self._order.popleft(), None)

    def check(self, t: float, last_cmd_seq: int, applied: float) -> Trip | None:
        want = self._sent.get(last_cmd_seq, self.safe)   # none of ours applied yet: safe
        want = min(max(want, self.u_min), self.u_max)
        tol = self._tol_abs + 2.0 ** -22 * max(abs(want), abs(applied))
        if applied == applied and abs(applied - want) <= tol:
            self._bad = 0
            return None
        self._bad += 1
        if self._bad < self.samples:
            return None
        return Trip("applied-mismatch",
                    f"the device applied another {self.actuator} than command {last_cmd_seq} asked for "
                    f"({self._bad} samples in a row; value: applied, limit: commanded): "
                    f"a device-side clamp, a firmware fault, or a device obeying another host",
                    t=t, channel=self.actuator, value=applied, limit=want)


def _g(x: float) -> str:
    return f"{x:.4g}"
