"""Step-response and tracking metrics computed from sampled arrays.

Step metrics follow the definitions of python-control's ``step_info`` (the reference library the
tests compare against), generalised from "0 to final value" to a change between two levels:
the response is normalised as ``z = (y - y_initial) / (y_final - y_initial)`` and the
``step_info`` rules are applied to ``z``. With ``y_initial = 0`` and ``t_step`` at the first
sample the two give identical numbers. Times are sample times (no interpolation), so their
resolution is one sample period — exactly as in ``step_info``.

All functions ignore non-finite samples (a NaN output row carries no information about the
response); integrals then bridge the gap with the trapezoid over the neighbouring samples.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

#: Fraction of the change that bounds the settling band (2 %, as ``step_info``'s default).
SETTLE_BAND = 0.02
#: Rise time is measured between these fractions of the change (10 % and 90 %).
RISE_LIMITS = (0.1, 0.9)
#: Steady-state error is averaged over this trailing fraction of the segment.
STEADY_FRACTION = 0.1

#: Unit of each metric: ``{y}`` output unit, ``{u}`` actuator unit, ``{f}`` unit of F̂.
METRIC_UNITS = {
    "rise_time_s": "s", "settling_time_s": "s", "overshoot_pct": "%", "peak": "{y}",
    "peak_time_s": "s", "steady_state_error": "{y}", "abs_steady_state_error": "{y}",
    "duration_s": "s", "rms_error": "{y}", "mean_error": "{y}", "iae": "{y}·s",
    "ise": "{y}²·s", "itae": "{y}·s²", "max_abs_error": "{y}", "u_rms": "{u}",
    "u_total_variation": "{u}", "max_abs_u": "{u}", "time_at_limits_pct": "%",
    "f_hat_min": "{f}", "f_hat_max": "{f}", "latency_ms_p50": "ms", "latency_ms_p99": "ms",
    "latency_ms_max": "ms", "compute_us_p50": "µs", "compute_us_p99": "µs",
    "compute_us_max": "µs",
}


def metric_unit(name: str, units: dict[str, str]) -> str:
    """The unit text of a metric, e.g. ``rpm·s`` for ``iae`` with ``units={"y": "rpm"}``;
    empty for counts and when a unit the metric needs is not known."""
    template = METRIC_UNITS.get(name, "")
    for key in ("y", "u", "f"):
        if "{" + key + "}" in template and not units.get(key):
            return ""
    return template.format(y=units.get("y", ""), u=units.get("u", ""), f=units.get("f", ""))


@dataclass(frozen=True)
class StepMetrics:
    """Metrics of one transition. NaN where the data do not allow the metric (e.g. never settled)."""

    rise_time_s: float
    settling_time_s: float
    overshoot_pct: float
    peak: float
    peak_time_s: float
    steady_state_error: float

    def as_dict(self) -> dict[str, float]:
        return asdict(self)


def step_metrics(t, y, *, t_step: float, y_initial: float, y_final: float,
                 settle_band: float = SETTLE_BAND,
                 rise_limits: tuple[float, float] = RISE_LIMITS) -> StepMetrics:
    """Metrics of the response ``y(t)`` to a change of level from ``y_initial`` to ``y_final``.

    Only samples with ``t >= t_step`` are used. With ``z = (y - y_initial)/(y_final - y_initial)``:

    - ``rise_time_s``: time of the first sample with ``z >= 0.9`` minus time of the first
      sample with ``z >= 0.1`` (``step_info`` "RiseTime").
    - ``settling_time_s``: ``t[k] - t_step`` where ``k`` is the sample just after the last one
      with ``|z - 1| >= settle_band``, i.e. the band is ±2 % of ``|y_final - y_initial|``
      around ``y_final`` (``step_info`` makes it ±2 % of the final value, which is the same thing
      for a change from 0). 0 when the response never leaves the band; NaN when the last sample
      is still outside it.
    - ``overshoot_pct``: ``100·max(0, max(z) − 1)``, percent of the change (``step_info``
      "Overshoot").
    - ``peak``: ``y`` at the first maximum of ``z`` — the extreme in the direction of the change
      (``step_info`` reports the largest ``|y|``, the same for a change upwards from 0);
      ``peak_time_s`` is its time from ``t_step``.
    - ``steady_state_error``: ``y_final − mean(y)`` over the samples in the last 10 % of the
      segment's time span (``t >= t_last − 0.1·(t_last − t_step)``). Textbook sign: positive
      when the output stays *below* the target; note this is the opposite sign of the recorded
      error column ``e = y − r``.
    """
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    if t.ndim != 1 or t.shape != y.shape:
        raise ValueError(f"t and y must be 1-D arrays of the same length, got shapes {t.shape} "
                         f"and {y.shape}")
    change = float(y_final) - float(y_initial)
    if not math.isfinite(change) or change == 0.0:
        raise ValueError(f"y_final ({y_final}) must differ from y_initial ({y_initial}) and both be "
                         f"finite: a transition needs a change of level")
    lo, hi = rise_limits
    if not 0.0 <= lo < hi <= 1.0:
        raise ValueError(f"rise_limits must satisfy 0 <= low < high <= 1, got {rise_limits}")
    if not settle_band > 0.0:
        raise ValueError(f"settle_band must be > 0 (a fraction of the change), got {settle_band}")

    eps = 1e-9 * max(1.0, abs(t_step))
    keep = (t >= t_step - eps) & np.isfinite(t) & np.isfinite(y)
    t, y = t[keep], y[keep]
    nan = math.nan
    if t.size == 0:
        return StepMetrics(nan, nan, nan, nan, nan, nan)
    z = (y - y_initial) / change

    i_lo, i_hi = _first(z >= lo), _first(z >= hi)
    rise = float(t[i_hi] - t[i_lo]) if i_lo is not None and i_hi is not None else nan

    outside = np.nonzero(np.abs(z - 1.0) >= settle_band)[0]
    settled = 0 if outside.size == 0 else int(outside[-1]) + 1
    settling = float(t[settled] - t_step) if settled < t.size else nan

    i_peak = int(np.argmax(z))
    overshoot = 100.0 * max(0.0, float(z[i_peak]) - 1.0)

    t_last = float(t[-1])
    tail = t >= t_last - STEADY_FRACTION * (t_last - t_step)
    ess = float(y_final) - float(np.mean(y[tail]))
    return StepMetrics(rise, settling, overshoot, float(y[i_peak]), float(t[i_peak] - t_step), ess)


def _first(mask: np.ndarray) -> int | None:
    idx = np.flatnonzero(mask)
    return int(idx[0]) if idx.size else None


@dataclass(frozen=True)
class RunMetrics:
    """Tracking quality, control effort and loop timing over a span of samples.

    Error integrals use the trapezoid rule over the sample times, e.g.
    ``IAE = Σ_k ½(|e_k| + |e_k+1|)(t_k+1 − t_k)``; ``ISE`` integrates ``e²`` and ``ITAE``
    integrates ``(t − t_0)|e|`` with ``t_0`` the time of the span's first sample (whether or
    not its error is finite). ``rms_error`` is ``sqrt(mean(e²))`` over the samples (not
    time-weighted; the sample rate is constant). A span made of several runs is integrated run
    by run: no integral, total variation or duration bridges the time between two runs, and
    each run's ITAE counts from its own first sample.
    """

    samples: int
    duration_s: float
    rms_error: float
    mean_error: float
    iae: float
    ise: float
    itae: float
    max_abs_error: float
    u_rms: float
    u_total_variation: float
    max_abs_u: float
    time_at_limits_pct: float
    f_hat_min: float
    f_hat_max: float
    latency_ms_p50: float
    latency_ms_p99: float
    latency_ms_max: float
    compute_us_p50: float
    compute_us_p99: float
    compute_us_max: float
    late_ticks: float

    def as_dict(self) -> dict[str, float]:
        return asdict(self)


def trapezoid(f: np.ndarray, t: np.ndarray) -> float:
    """∫ f dt by the trapezoid rule over the sample times (0 for fewer than two samples)."""
    if f.size < 2:
        return 0.0
    return float(np.sum(0.5 * (f[1:] + f[:-1]) * np.diff(t)))


def percentile(x, q: float) -> float:
    """The q-th percentile of the finite values of ``x`` (NaN when there are none)."""
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    return float(np.percentile(x, q)) if x.size else math.nan


def _finite_max(x: np.ndarray) -> float:
    x = x[np.isfinite(x)]
    return float(np.max(x)) if x.size else math.nan


def _finite_min(x: np.ndarray) -> float:
    x = x[np.isfinite(x)]
    return float(np.min(x)) if x.size else math.nan


def _piecewise(f: np.ndarray, t: np.ndarray, piece: np.ndarray) -> float:
    """Trapezoid integral that does not bridge two pieces (``piece`` labels each sample)."""
    if f.size < 2:
        return 0.0
    same = piece[1:] == piece[:-1]
    return float(np.sum((0.5 * (f[1:] + f[:-1]) * np.diff(t))[same]))


def _piece_starts(t: np.ndarray, piece: np.ndarray) -> np.ndarray:
    """Per sample: the time of the first sample of its piece."""
    first = np.concatenate(([True], piece[1:] != piece[:-1]))
    return t[np.flatnonzero(first)][np.cumsum(first) - 1]


def run_metrics(t, e, u, *, f_hat=None, u_min: float = math.nan, u_max: float = math.nan,
                latency_ms=None, compute_us=None, late=None, piece=None) -> RunMetrics:
    """Metrics over the given samples (pass only the rows that belong to the span).

    - error: ``rms_error``, ``mean_error``, ``iae``, ``ise``, ``itae``, ``max_abs_error`` of
      ``e = y − r`` over the finite samples (see the class docstring for the integrals).
    - effort, on the applied actuator value ``u``: ``u_rms = sqrt(mean(u²))``,
      ``u_total_variation = Σ|u_k+1 − u_k|``, ``max_abs_u``.
    - ``time_at_limits_pct``: percent of samples whose applied ``u`` lies within
      ``1e-6·(u_max − u_min)`` of ``u_min`` or ``u_max`` (equal to the percent of time, as
      samples are evenly spaced). NaN when the limits are unknown.
    - ``f_hat_min``/``f_hat_max``: range of F̂ ignoring NaN (warm-up) rows.
    - latency/compute: 50th and 99th percentile and maximum of the finite values;
      ``late_ticks``: sum of the ``late`` column.

    ``piece`` labels each sample with its run (time-ordered; default: one run); ``duration_s``
    is then the sum of the runs' durations.
    """
    t = np.asarray(t, dtype=float)
    e = np.asarray(e, dtype=float)
    u = np.asarray(u, dtype=float)
    if not (t.shape == e.shape == u.shape) or t.ndim != 1:
        raise ValueError(f"t, e and u must be 1-D arrays of the same length, got shapes "
                         f"{t.shape}, {e.shape}, {u.shape}")
    nan = math.nan
    n = int(t.size)
    piece = np.zeros(n, dtype=np.int64) if piece is None else np.asarray(piece)
    if piece.shape != t.shape:
        raise ValueError(f"piece must label every sample, got shape {piece.shape} for {t.shape}")
    ends = np.concatenate((piece[1:] != piece[:-1], [True])) if n else np.array([], bool)
    starts = np.concatenate(([True], piece[1:] != piece[:-1])) if n else np.array([], bool)
    duration = float(np.sum(t[ends] - t[starts])) if n >= 2 else 0.0

    ok = np.isfinite(e) & np.isfinite(t)
    te, ee, pe = t[ok], e[ok], piece[ok]
    if ee.size:
        abs_e = np.abs(ee)
        rms = float(np.sqrt(np.mean(ee * ee)))
        mean_e = float(np.mean(ee))
        iae = _piecewise(abs_e, te, pe)
        ise = _piecewise(ee * ee, te, pe)
        t0 = _piece_starts(t, piece)[ok]          # the span's first sample, finite error or not
        itae = _piecewise((te - t0) * abs_e, te, pe)
        max_abs_e = float(np.max(abs_e))
    else:
        rms = mean_e = iae = ise = itae = max_abs_e = nan

    okay_u = np.isfinite(u)
    uu, pu = u[okay_u], piece[okay_u]
    if uu.size:
        u_rms = float(np.sqrt(np.mean(uu * uu)))
        u_tv = float(np.sum(np.abs(np.diff(uu))[pu[1:] == pu[:-1]]))
        max_abs_u = float(np.max(np.abs(uu)))
    else:
        u_rms = u_tv = max_abs_u = nan
    at_limits = nan
    if uu.size and math.isfinite(u_min) and math.isfinite(u_max) and u_max > u_min:
        tol = 1e-6 * (u_max - u_min)
        at_limits = 100.0 * float(np.mean((uu <= u_min + tol) | (uu >= u_max - tol)))

    f = np.asarray(f_hat, dtype=float) if f_hat is not None else np.array([])
    lat = np.asarray(latency_ms, dtype=float) if latency_ms is not None else np.array([])
    comp = np.asarray(compute_us, dtype=float) if compute_us is not None else np.array([])
    late_sum = nan
    if late is not None:
        lt = np.asarray(late, dtype=float)
        late_sum = float(np.sum(lt[np.isfinite(lt)]))
    return RunMetrics(
        samples=n, duration_s=duration, rms_error=rms, mean_error=mean_e, iae=iae, ise=ise,
        itae=itae, max_abs_error=max_abs_e, u_rms=u_rms, u_total_variation=u_tv,
        max_abs_u=max_abs_u, time_at_limits_pct=at_limits,
        f_hat_min=_finite_min(f), f_hat_max=_finite_max(f),
        latency_ms_p50=percentile(lat, 50), latency_ms_p99=percentile(lat, 99),
        latency_ms_max=_finite_max(lat),
        compute_us_p50=percentile(comp, 50), compute_us_p99=percentile(comp, 99),
        compute_us_max=_finite_max(comp), late_ticks=late_sum,
    )
