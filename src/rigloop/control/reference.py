"""Reference profiles that give r, r' and r'' analytically.

The intelligent laws feed r' (order 1) or r'' (order 2) forward, so every profile here is at
least twice continuously differentiable (C2): a raw step would need an infinite derivative.
Level changes use the quintic blend

    s(τ) = 10τ³ − 15τ⁴ + 6τ⁵,   τ = (t − t_start)/blend ∈ [0, 1],

whose first and second derivatives vanish at both ends; ``r = r_from·(1 − s) + r_to·s`` hits both
levels exactly. Kinds (all times in seconds, values in the output channel's unit):

* ``levels`` — ``initial``, then each step blends to ``to`` from ``at`` over ``blend_s``
  (blends may not overlap; a step to the current level is not listed as a transition).
* ``ramp`` — from ``initial`` at ``start_s`` towards ``to`` at ``rate_per_s`` with blended
  corners (the slope itself follows quintic blends), ending exactly at ``to``.
* ``sine`` — ``initial + amplitude·E(t)·sin(2π·freq_hz·(t − start_s))``, the envelope E fading in
  over ``blend_s``.
* ``chirp`` — the same with a linear frequency sweep ``f0_hz → f1_hz`` over ``duration_s``
  (phase ``2π(f0·τ + (f1 − f0)·τ²/(2·duration))``), fading in and out over ``blend_s``.
* ``table`` — a natural cubic spline through the points of a CSV file with header ``t,r``.

:func:`with_setpoint` splices a live setpoint change onto any reference, starting from the
current r, r', r'' (a quintic matching value, slope and curvature at both ends), so the
splice is C2 as well.
"""

from __future__ import annotations

import bisect
import csv
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

__all__ = [
    "Transition",
    "Reference",
    "Constant",
    "Levels",
    "Ramp",
    "Sine",
    "Chirp",
    "Table",
    "Setpoint",
    "build_reference",
    "with_setpoint",
    "quintic_blend",
    "REFERENCE_KINDS",
]

_NAN3 = (math.nan, math.nan, math.nan)


@dataclass(frozen=True)
class Transition:
    """A change of level, for step-response metrics."""

    t_start: float
    t_end: float
    r_from: float
    r_to: float


def quintic_blend(tau: float) -> tuple[float, float, float]:
    """``(s, ds/dτ, d²s/dτ²)`` of the quintic blend, held at 0 before and 1 after [0, 1]."""
    if tau <= 0.0:
        return 0.0, 0.0, 0.0
    if tau >= 1.0:
        return 1.0, 0.0, 0.0
    t2 = tau * tau
    s = t2 * tau * (10.0 + tau * (-15.0 + 6.0 * tau))
    ds = 30.0 * t2 * (1.0 - tau) * (1.0 - tau)
    dds = 60.0 * tau * (1.0 - tau) * (1.0 - 2.0 * tau)
    return s, ds, dds


def _blend_integral(tau: float) -> float:
    """``∫_0^τ s``: 0 before 0, ``2.5τ⁴ − 3τ⁵ + τ⁶`` on [0, 1], ``τ − 1/2`` after."""
    if tau <= 0.0:
        return 0.0
    if tau >= 1.0:
        return tau - 0.5
    t4 = tau**4
    return t4 * (2.5 + tau * (-3.0 + tau))


class Reference:
    """Base class: :meth:`at` gives ``(r, r', r'')`` at time t (s)."""

    #: Time after which r stays constant, or None (periodic).
    duration: float | None = None
    #: Level changes, for step metrics.
    transitions: list[Transition]

    def __init__(self) -> None:
        self.transitions = []

    def at(self, t: float) -> tuple[float, float, float]:
        raise NotImplementedError

    def __call__(self, t: float) -> tuple[float, float, float]:
        return self.at(t)


class Constant(Reference):
    """A constant level."""

    def __init__(self, level: float) -> None:
        super().__init__()
        self.level = _num("level", level)
        self.duration = 0.0

    def at(self, t: float) -> tuple[float, float, float]:
        if not math.isfinite(t):
            return _NAN3
        return self.level, 0.0, 0.0


class Levels(Reference):
    """Blended level changes: ``steps`` are ``(at, to, blend_s)``, non-overlapping, in order."""

    def __init__(self, initial: float, steps: Sequence[tuple[float, float, float]], key: str = "reference") -> None:
        super().__init__()
        self.initial = _num(f"{key}.initial", initial)
        self._start: list[float] = []
        self._end: list[float] = []
        self._from: list[float] = []
        self._to: list[float] = []
        level = self.initial
        prev_end = -math.inf
        for n, (at, to, blend) in enumerate(steps):
            k = f"{key}.steps[{n}]"
            at = _num(f"{k}.at", at)
            to = _num(f"{k}.to", to)
            blend = _positive(f"{k}.blend_s", blend)
            if at < prev_end:
                raise ValueError(
                    f"{k}.at = {at} s starts before the previous change has finished at {prev_end} s; "
                    f"move it to >= {prev_end} s or shorten the previous blend_s"
                )
            end = at + blend
            self._start.append(at)
            self._end.append(end)
            self._from.append(level)
            self._to.append(to)
            if to != level:
                self.transitions.append(Transition(at, end, level, to))
            level = to
            prev_end = end
        self.duration = self._end[-1] if self._end else 0.0

    def at(self, t: float) -> tuple[float, float, float]:
        if not math.isfinite(t):
            return _NAN3
        i = bisect.bisect_right(self._start, t) - 1
        if i < 0:
            return self.initial, 0.0, 0.0
        a, b = self._from[i], self._to[i]
        if t >= self._end[i]:
            return b, 0.0, 0.0
        h = self._end[i] - self._start[i]
        s, ds, dds = quintic_blend((t - self._start[i]) / h)
        return a * (1.0 - s) + b * s, (b - a) * ds / h, (b - a) * dds / (h * h)


class Ramp(Reference):
    """From ``initial`` at ``start`` to ``to`` at ``rate`` (> 0, units/s) with blended corners.

    ``r' = v·[S(t − t0) − S(t − t1)]`` with ``S(x) = s(x/blend)``, ``v = ±rate`` and
    ``t1 = t0 + |to − initial|/rate``; integrating gives r. The slope reaches ``v`` when the
    ramp is longer than one blend; r arrives at ``to`` at ``t1 + blend``.
    """

    def __init__(self, initial: float, to: float, rate: float, start: float, blend: float, key: str = "reference") -> None:
        super().__init__()
        self.initial = _num(f"{key}.initial", initial)
        self.to = _num(f"{key}.to", to)
        rate = _positive(f"{key}.rate_per_s", rate)
        self.t0 = _num(f"{key}.start_s", start)
        self.blend = _positive(f"{key}.blend_s", blend)
        delta = self.to - self.initial
        self.v = math.copysign(rate, delta)
        self.t1 = self.t0 + abs(delta) / rate
        self.duration = self.t1 + self.blend if delta != 0 else self.t0
        if delta != 0:
            self.transitions.append(Transition(self.t0, self.duration, self.initial, self.to))

    def at(self, t: float) -> tuple[float, float, float]:
        if not math.isfinite(t):
            return _NAN3
        if t <= self.t0 or self.v == 0 or self.initial == self.to:
            return self.initial, 0.0, 0.0
        if t >= self.duration:
            return self.to, 0.0, 0.0
        b = self.blend
        x0, x1 = (t - self.t0) / b, (t - self.t1) / b
        s0, ds0, _ = quintic_blend(x0)
        s1, ds1, _ = quintic_blend(x1)
        r = self.initial + self.v * b * (_blend_integral(x0) - _blend_integral(x1))
        return r, self.v * (s0 - s1), self.v * (ds0 - ds1) / b


class _Oscillation(Reference):
    """``offset + amplitude·E(τ)·sin(φ(τ))`` for τ = t − start in [0, length]."""

    def __init__(self, offset: float, amplitude: float, start: float, blend: float, key: str) -> None:
        super().__init__()
        self.offset = _num(f"{key}.initial", offset)
        self.amplitude = _num(f"{key}.amplitude", amplitude)
        self.t0 = _num(f"{key}.start_s", start)
        self.blend = _positive(f"{key}.blend_s", blend)

    def _envelope(self, tau: float) -> tuple[float, float, float]:
        s, ds, dds = quintic_blend(tau / self.blend)
        return s, ds / self.blend, dds / (self.blend * self.blend)

    def _phase(self, tau: float) -> tuple[float, float, float]:
        raise NotImplementedError

    def _wave(self, tau: float, e: float, de: float, dde: float) -> tuple[float, float, float]:
        ph, w, dw = self._phase(tau)
        sn, cs = math.sin(ph), math.cos(ph)
        a = self.amplitude
        r = self.offset + a * e * sn
        dr = a * (de * sn + e * w * cs)
        ddr = a * (dde * sn + 2.0 * de * w * cs + e * (dw * cs - w * w * sn))
        return r, dr, ddr


class Sine(_Oscillation):
    """A sine of ``freq_hz`` whose amplitude fades in over ``blend_s`` (periodic: no duration)."""

    def __init__(self, offset: float, amplitude: float, freq: float, start: float, blend: float, key: str = "reference") -> None:
        super().__init__(offset, amplitude, start, blend, key)
        self.freq = _positive(f"{key}.freq_hz", freq)
        self._w = 2.0 * math.pi * self.freq
        self.duration = None

    def _phase(self, tau: float) -> tuple[float, float, float]:
        return self._w * tau, self._w, 0.0

    def at(self, t: float) -> tuple[float, float, float]:
        if not math.isfinite(t):
            return _NAN3
        tau = t - self.t0
        if tau <= 0.0:
            return self.offset, 0.0, 0.0
        return self._wave(tau, *self._envelope(tau))


class Chirp(_Oscillation):
    """Linear sweep ``f0 → f1`` over ``duration`` s, faded in and out over ``blend_s`` each.

    Instantaneous frequency ``f(τ) = f0 + (f1 − f0)·τ/duration``; after the sweep r rests at
    the offset.
    """

    def __init__(
        self, offset: float, amplitude: float, f0: float, f1: float, length: float, start: float, blend: float,
        key: str = "reference",
    ) -> None:
        super().__init__(offset, amplitude, start, blend, key)
        self.f0 = _non_negative(f"{key}.f0_hz", f0)
        self.f1 = _non_negative(f"{key}.f1_hz", f1)
        self.length = _positive(f"{key}.duration_s", length)
        if 2.0 * self.blend > self.length:
            raise ValueError(
                f"{key}.blend_s = {self.blend} s is more than half of {key}.duration_s = {self.length} s; "
                "the fade-in and fade-out must fit in the sweep — shorten blend_s"
            )
        self._k = (self.f1 - self.f0) / self.length
        self.duration = self.t0 + self.length

    def instantaneous_frequency(self, t: float) -> float:
        """Sweep frequency (Hz) at time t (clamped to the sweep)."""
        tau = min(max(t - self.t0, 0.0), self.length)
        return self.f0 + self._k * tau

    def _phase(self, tau: float) -> tuple[float, float, float]:
        two_pi = 2.0 * math.pi
        return two_pi * (self.f0 * tau + 0.5 * self._k * tau * tau), two_pi * (self.f0 + self._k * tau), two_pi * self._k

    def at(self, t: float) -> tuple[float, float, float]:
        if not math.isfinite(t):
            return _NAN3
        tau = t - self.t0
        if tau <= 0.0 or tau >= self.length:
            return self.offset, 0.0, 0.0
        e1, de1, dde1 = self._envelope(tau)
        e2, de2, dde2 = self._envelope(self.length - tau)  # d/dτ of E(L − τ) flips the sign
        de2, dde2 = -de2, dde2
        return self._wave(tau, e1 * e2, de1 * e2 + e1 * de2, dde1 * e2 + 2.0 * de1 * de2 + e1 * dde2)


class Table(Reference):
    """Natural cubic spline through ``(t_i, r_i)``; r holds the end values outside the table.

    On ``[t_i, t_i+1]`` with ``h = t_i+1 − t_i``, ``A = (t_i+1 − t)/h``, ``B = 1 − A``:
    ``r = A·r_i + B·r_i+1 + ((A³ − A)·M_i + (B³ − B)·M_i+1)·h²/6``, where the knot curvatures
    ``M`` solve the tridiagonal system
    ``h_i−1·M_i−1 + 2(h_i−1 + h_i)·M_i + h_i·M_i+1 = 6·(Δr_i/h_i − Δr_i−1/h_i−1)`` with
    ``M_0 = M_n = 0`` (natural ends); r' and r'' are the exact derivatives of that cubic.
    Outside the table r' and r'' are 0, so a profile should start and end flat (repeat the
    end values) to avoid a jump in r' there.
    """

    def __init__(self, t: Sequence[float], r: Sequence[float], source: str = "table") -> None:
        super().__init__()
        t_arr = np.asarray(t, dtype=float)
        r_arr = np.asarray(r, dtype=float)
        if t_arr.ndim != 1 or t_arr.shape != r_arr.shape or t_arr.size < 2:
            raise ValueError(f"{source}: needs at least 2 points (t, r), got {t_arr.size}")
        if not (np.all(np.isfinite(t_arr)) and np.all(np.isfinite(r_arr))):
            raise ValueError(f"{source}: every t and r must be a finite number")
        steps = np.diff(t_arr)
        if np.any(steps <= 0):
            i = int(np.argmax(steps <= 0)) + 1
            raise ValueError(
                f"{source}: t must increase strictly; point {i} has t = {t_arr[i]} after t = {t_arr[i - 1]}"
            )
        self._t = t_arr.tolist()
        self._r = r_arr.tolist()
        self._h = steps.tolist()
        self._m = _natural_spline_curvatures(t_arr, r_arr).tolist()
        self.duration = self._t[-1]

    @property
    def knots(self) -> tuple[list[float], list[float]]:
        return list(self._t), list(self._r)

    def at(self, t: float) -> tuple[float, float, float]:
        if not math.isfinite(t):
            return _NAN3
        if t <= self._t[0]:
            return self._r[0], 0.0, 0.0
        if t >= self._t[-1]:
            return self._r[-1], 0.0, 0.0
        i = bisect.bisect_right(self._t, t) - 1
        h = self._h[i]
        a = (self._t[i + 1] - t) / h
        b = 1.0 - a
        m0, m1 = self._m[i], self._m[i + 1]
        r0, r1 = self._r[i], self._r[i + 1]
        r = a * r0 + b * r1 + ((a**3 - a) * m0 + (b**3 - b) * m1) * h * h / 6.0
        dr = (r1 - r0) / h - (3.0 * a * a - 1.0) * h * m0 / 6.0 + (3.0 * b * b - 1.0) * h * m1 / 6.0
        ddr = a * m0 + b * m1
        return r, dr, ddr

    @classmethod
    def from_csv(cls, path: str | Path) -> Table:
        """Read a CSV with the header ``t,r`` (seconds, output units)."""
        path = Path(path)
        try:
            with path.open(newline="", encoding="utf-8-sig") as fh:     # spreadsheets add a BOM
                rows = list(csv.reader(fh))
        except FileNotFoundError:
            raise ValueError(f"reference.file: {path} does not exist; give a CSV path relative to the config") from None
        except (OSError, UnicodeDecodeError, csv.Error) as exc:
            raise ValueError(f"reference.file: cannot read {path}: {exc}") from None
        rows = [(n + 1, row) for n, row in enumerate(rows) if row and any(c.strip() for c in row)]
        if not rows:
            raise ValueError(f"{path}: the file is empty; it needs a header 't,r' and at least 2 rows")
        line, header = rows[0]
        if [c.strip().lower() for c in header] != ["t", "r"]:
            raise ValueError(f"{path}:{line}: the header must be 't,r', got {','.join(header)!r}")
        ts: list[float] = []
        rs: list[float] = []
        for line, row in rows[1:]:
            if len(row) != 2:
                raise ValueError(f"{path}:{line}: expected 2 values (t,r), got {len(row)}: {','.join(row)!r}")
            vals = []
            for name, cell in zip(("t", "r"), row):
                try:
                    v = float(cell)
                except ValueError:
                    raise ValueError(f"{path}:{line}: {name} = {cell.strip()!r} is not a number") from None
                if not math.isfinite(v):
                    raise ValueError(f"{path}:{line}: {name} = {cell.strip()!r} is not a finite number")
                vals.append(v)
            if ts and vals[0] <= ts[-1]:
                raise ValueError(f"{path}:{line}: t = {vals[0]} does not increase (previous t = {ts[-1]})")
            ts.append(vals[0])
            rs.append(vals[1])
        if len(ts) < 2:
            raise ValueError(f"{path}: needs at least 2 data rows, got {len(ts)}")
        return cls(ts, rs, source=str(path))


def _natural_spline_curvatures(t: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Second derivatives at the knots of the natural cubic spline (tridiagonal elimination, then back substitution)."""
    n = t.size - 1
    m = np.zeros(n + 1)
    if n < 2:
        return m
    h = np.diff(t)
    slope = np.diff(r) / h
    # unknowns M_1..M_{n-1}
    sub = h[:-1].copy()  # coefficient of M_{i-1}
    diag = 2.0 * (h[:-1] + h[1:])
    sup = h[1:].copy()  # coefficient of M_{i+1}
    rhs = 6.0 * (slope[1:] - slope[:-1])
    k = n - 1
    for i in range(1, k):
        w = sub[i] / diag[i - 1]
        diag[i] -= w * sup[i - 1]
        rhs[i] -= w * rhs[i - 1]
    x = np.zeros(k)
    x[-1] = rhs[-1] / diag[-1]
    for i in range(k - 2, -1, -1):
        x[i] = (rhs[i] - sup[i] * x[i + 1]) / diag[i]
    m[1:n] = x
    return m


class Setpoint(Reference):
    """A live setpoint change spliced onto ``prior`` at ``t_now``.

    Before ``t_now`` it is ``prior``; over ``[t_now, t_now + blend_s]`` the quintic
    polynomial that starts with the prior's ``(r, r', r'')`` and ends at ``(level, 0, 0)``; then
    ``level``. In ``τ = (t − t_now)/blend_s`` with ``d = level − r0``, ``V = r0'·blend_s``,
    ``A = r0''·blend_s²``: ``p(τ) = r0 + V·τ + A/2·τ² + (10d − 6V − 3A/2)·τ³
    + (−15d + 8V + 3A/2)·τ⁴ + (6d − 3V − A/2)·τ⁵``.
    """

    def __init__(self, prior: Reference, t_now: float, level: float, blend_s: float) -> None:
        super().__init__()
        if not isinstance(prior, Reference):
            raise TypeError(f"prior must be a Reference, got {type(prior).__name__}")
        self.prior = prior
        self.t_now = _num("t_now", t_now)
        self.level = _num("level", level)
        self.blend = _positive("blend_s", blend_s)
        r0, v0, a0 = prior.at(self.t_now)
        if not (math.isfinite(r0) and math.isfinite(v0) and math.isfinite(a0)):
            raise ValueError(f"the current reference is not finite at t_now = {self.t_now} s; cannot blend from it")
        self.t_end = self.t_now + self.blend
        h = self.blend
        d, v, a = self.level - r0, v0 * h, a0 * h * h
        self._c = (r0, v, 0.5 * a, 10 * d - 6 * v - 1.5 * a, -15 * d + 8 * v + 1.5 * a, 6 * d - 3 * v - 0.5 * a)
        self.duration = self.t_end
        self.transitions = [tr for tr in prior.transitions if tr.t_end <= self.t_now]
        self.transitions.append(Transition(self.t_now, self.t_end, r0, self.level))

    def at(self, t: float) -> tuple[float, float, float]:
        if not math.isfinite(t):
            return _NAN3
        if t < self.t_now:
            return self.prior.at(t)
        if t >= self.t_end:
            return self.level, 0.0, 0.0
        h = self.blend
        x = (t - self.t_now) / h
        c0, c1, c2, c3, c4, c5 = self._c
        p = c0 + x * (c1 + x * (c2 + x * (c3 + x * (c4 + x * c5))))
        dp = c1 + x * (2 * c2 + x * (3 * c3 + x * (4 * c4 + x * 5 * c5)))
        ddp = 2 * c2 + x * (6 * c3 + x * (12 * c4 + x * 20 * c5))
        return p, dp / h, ddp / (h * h)


class StartFrom(Reference):
    """``ref`` offset so that it starts at the measured ``level`` and merges into ``ref`` (C2).

    ``r(t) = ref(t) + (level − ref(0))·(1 − s(t/T))`` with ``s`` the quintic blend, so arming a
    rig at rest does not present the law with a step of the whole operating level.
    """

    def __init__(self, ref: Reference, level: float, blend_s: float) -> None:
        super().__init__()
        if not (math.isfinite(level) and math.isfinite(blend_s)) or blend_s <= 0:
            raise ValueError(f"start blend needs a finite level and blend_s > 0, got {level}, {blend_s}")
        self.ref = ref
        self.offset = level - ref.at(0.0)[0]
        self.blend = float(blend_s)
        self.duration = ref.duration if ref.duration is None else max(ref.duration, self.blend)
        self.transitions = list(ref.transitions)

    def at(self, t: float) -> tuple[float, float, float]:
        r, dr, ddr = self.ref.at(t)
        s, ds, dds = quintic_blend(t / self.blend)
        k = self.offset
        return (r + k * (1.0 - s), dr - k * ds / self.blend, ddr - k * dds / (self.blend * self.blend))


def with_setpoint(ref: Reference, t_now: float, level: float, blend_s: float) -> Reference:
    """A reference equal to ``ref`` before ``t_now`` that then blends (C2) to ``level``."""
    return Setpoint(ref, t_now, level, blend_s)


# -- building from a config mapping -------------------------------------------------------

#: Keys each kind accepts (besides ``kind``); ``blend_s`` is accepted (and unused) for tables.
REFERENCE_KINDS: dict[str, tuple[str, ...]] = {
    "levels": ("initial", "blend_s", "steps"),
    "ramp": ("initial", "start_s", "rate_per_s", "to", "blend_s"),
    "sine": ("initial", "start_s", "amplitude", "freq_hz", "blend_s"),
    "chirp": ("initial", "start_s", "amplitude", "f0_hz", "f1_hz", "duration_s", "blend_s"),
    "table": ("file", "blend_s"),
}
_DEFAULTS = {"initial": 0.0, "blend_s": 1.0, "start_s": 0.0}


def build_reference(spec: Mapping, base_dir: str | Path | None = None) -> Reference:
    """Build a reference from the ``reference:`` mapping of a config (see module docstring).

    Missing ``initial``/``start_s`` default to 0 and ``blend_s`` to 1 s; a table's ``file`` is
    relative to ``base_dir`` (the config's folder). Bad input raises ValueError naming the key.
    """
    key = "reference"
    if not isinstance(spec, Mapping):
        raise ValueError(f"{key} must be a mapping with a 'kind', got {type(spec).__name__}")
    kind = spec.get("kind")
    if kind not in REFERENCE_KINDS:
        raise ValueError(f"{key}.kind = {kind!r} is unknown; use one of {', '.join(REFERENCE_KINDS)}")
    allowed = REFERENCE_KINDS[kind]
    for k in spec:
        if k != "kind" and k not in allowed:
            raise ValueError(f"{key}.{k} does not apply to kind {kind}; allowed keys: {', '.join(allowed)}")

    def get(name: str) -> object:
        if name in spec and spec[name] is not None:
            return spec[name]
        if name in _DEFAULTS:
            return _DEFAULTS[name]
        raise ValueError(f"{key}.{name} is required for kind {kind}")

    blend = get("blend_s")
    if kind == "levels":
        steps = spec.get("steps") or []
        if not isinstance(steps, Sequence) or isinstance(steps, (str, bytes)):
            raise ValueError(f"{key}.steps must be a list of {{at, to, blend_s?}} mappings, got {steps!r}")
        parsed = []
        for n, step in enumerate(steps):
            k = f"{key}.steps[{n}]"
            if not isinstance(step, Mapping):
                raise ValueError(f"{k} must be a mapping {{at, to, blend_s?}}, got {step!r}")
            for sk in step:
                if sk not in ("at", "to", "blend_s"):
                    raise ValueError(f"{k}.{sk} is not a step key; allowed: at, to, blend_s")
            for sk in ("at", "to"):
                if sk not in step:
                    raise ValueError(f"{k}.{sk} is required")
            step_blend = step.get("blend_s")
            parsed.append((step["at"], step["to"], blend if step_blend is None else step_blend))
        return Levels(get("initial"), parsed, key=key)
    if kind == "ramp":
        return Ramp(get("initial"), get("to"), get("rate_per_s"), get("start_s"), blend, key=key)
    if kind == "sine":
        return Sine(get("initial"), get("amplitude"), get("freq_hz"), get("start_s"), blend, key=key)
    if kind == "chirp":
        return Chirp(
            get("initial"), get("amplitude"), get("f0_hz"), get("f1_hz"), get("duration_s"), get("start_s"), blend,
            key=key,
        )
    _positive(f"{key}.blend_s", blend)
    file = get("file")
    if not isinstance(file, (str, Path)) or not str(file):
        raise ValueError(f"{key}.file must be a path to a CSV file, got {file!r}")
    path = Path(file)
    if not path.is_absolute() and base_dir is not None:
        path = Path(base_dir) / path
    return Table.from_csv(path)


def _num(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ValueError(f"{name} = {value!r} is not a finite number")
    return float(value)


def _positive(name: str, value: object) -> float:
    v = _num(name, value)
    if v <= 0:
        raise ValueError(f"{name} = {v} must be > 0")
    return v


def _non_negative(name: str, value: object) -> float:
    v = _num(name, value)
    if v < 0:
        raise ValueError(f"{name} = {v} must be >= 0")
    return v
