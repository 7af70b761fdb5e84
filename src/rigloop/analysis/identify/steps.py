"""From a bump test's recording to estimates: every step, then their mean and spread.

For an output of model order m (1: y' = F + alpha·u; 2: the output integrates a speed-like
quantity, y'' = F + alpha·u), each transition of the profile (:mod:`.plan`) is one step, found
at the first sample after its requested time whose **applied** actuator value moves:

* levels: on the last :data:`STEADY_FRACTION` of the hold before and of the hold after the
  step, the level of y (m = 1) or its rate (m = 2), fitted **together with one shared drift**
  (a straight-line trend of the level, or of the rate) — the trends before and after the step
  tell the drift of the load apart from the step's effect;
* K, τ and θ of a FOPDT model by least squares (:func:`.fitting.fit_fopdt`), with the same
  drift; K is the static gain reported (m = 2: the gain of the rate, per unit u), since it
  allows for a level that had not settled by the end of the hold;
* ``Δlevel/Δu`` of each step, a cross-check of K;
* alpha: K/τ of the fit — the model's initial slope, from every sample of the step — checked
  against the derivative-free initial slope (:func:`.fitting.initial_slope_alpha`) on a window
  of ``τ/5`` after the dead time (at least two slew times and 5 samples, at most half the hold),
  on the output minus its fitted motion without the step. Where the two disagree beyond the
  slope's noise and 20 %, the response is not first order and the model-free slope is used;
* the noise floor from the second differences of every hold (:mod:`.noise`), and the dead zone
  from the ramp (:mod:`.deadzone`).

For an integrating output (m = 2) only the **steps while moving** are estimated (the profile's
``start`` and ``stop`` transitions, :mod:`.plan`, are recorded and left out: from rest and into a
stop, static friction and gear play act, not the model). A hold the limits guard cut too short
to fit a level leaves its step out with a warning instead of failing the test.

Each value is then given as the mean ± spread (sample standard deviation) over the steps, and
separately for the steps up and the steps down. Whether the estimates are good enough to use is
judged by :mod:`.verdict`, not here.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from rigloop.analysis.identify.deadzone import DeadZone, find_dead_zone
from rigloop.analysis.identify.driver import Schedule
from rigloop.analysis.identify.fitting import EstimationError, fit_fopdt, initial_slope_alpha
from rigloop.analysis.identify.noise import NoiseFloor, noise_floor
from rigloop.analysis.identify.plan import MIN_HOLD_SAMPLES, BumpPlan

#: Steady levels are fitted over this last fraction of each hold.
STEADY_FRACTION = 0.30
#: A step "responded" when its level change exceeds this many standard errors of the noise.
RESPONSE_SIGMAS = 5.0
#: alpha of a step is K/τ of its fit when the initial slope agrees with it within this many of the
#: slope's standard deviations plus this fraction (else the model-free slope is used).
SLOPE_AGREE_SIGMAS = 3.0
SLOPE_AGREE_FRACTION = 0.2
#: A step is left out of the means when its gain or alpha is further from the median than this
#: many scaled median absolute deviations (common practice for outliers) and this fraction.
OUTLIER_MADS = 4.0
OUTLIER_FRACTION = 0.15
#: The slope window after the step is τ divided by this (a fifth of τ: the response is still
#: within 20 % of its initial slope; common practice for an initial-slope estimate).
SLOPE_WINDOW_DIVISOR = 5.0


@dataclass
class StepEstimate:
    """Estimates from one step (``up``: the applied input rose, ``down``: it fell)."""

    direction: str
    t_start: float                   # s (run time) of the first sample whose applied u moved
    du: float                        # applied change, steady stretch after minus before
    level_before: float              # steady y (m = 1) or rate of y (m = 2) before the step
    level_after: float
    level_se: float                  # standard error of the change, from the noise floor
    responded: bool
    hold_s: float = 0.0              # length of the hold after the step
    drift: float = 0.0               # shared trend of the level (m = 1) or rate (m = 2) per s
    gain: float | None = None        # Δlevel/Δu
    gain_fit: float | None = None    # K of the fitted FOPDT model
    tau: float | None = None
    theta: float | None = None
    fit_rms: float | None = None
    fit_at_bound: str | None = None
    alpha: float | None = None        # the step's alpha: alpha_fit, or alpha_slope (alpha_source)
    alpha_source: str | None = None
    alpha_fit: float | None = None    # K/τ of the fitted model
    alpha_slope: float | None = None  # derivative-free initial slope, corrected
    alpha_uncorrected: float | None = None
    alpha_sigma: float | None = None  # standard deviation of alpha_slope from the noise floor
    window_s: float | None = None     # slope window after the step
    outlier: bool = False             # left out of the means (see _mark_outliers)
    kind: str = "step"               # step (m = 1); start, moving or stop (m = 2; plan.kind)

    def as_dict(self) -> dict:
        return asdict(self)


@dataclass
class Spread:
    """Mean, sample standard deviation and count of one estimate over the steps."""

    mean: float
    spread: float
    n: int

    @classmethod
    def of(cls, values) -> Spread | None:
        v = np.asarray([x for x in values if x is not None and math.isfinite(x)], dtype=float)
        if v.size == 0:
            return None
        return cls(float(np.mean(v)), float(np.std(v, ddof=1)) if v.size > 1 else 0.0, int(v.size))

    def as_dict(self) -> dict:
        return asdict(self)


@dataclass
class BumpEstimates:
    """What a bump test measured (over the steps that responded)."""

    order: int
    ts: float
    steps: list[StepEstimate]
    alpha: float
    alpha_spread: float
    gain: float | None               # K of the fitted FOPDT models (the static gain; m = 2: of the rate)
    gain_spread: float | None
    gain_levels: float | None        # Δlevel/Δu from the drift-corrected steady levels (a cross-check)
    tau: float | None
    theta: float | None
    noise_std: float
    noise: NoiseFloor
    alpha_fopdt: float | None        # K/τ of the fitted model: the alpha it implies (a cross-check)
    alpha_up: Spread | None = None
    alpha_down: Spread | None = None
    gain_up: Spread | None = None
    gain_down: Spread | None = None
    dead_zone: DeadZone | None = None
    warnings: list[str] = field(default_factory=list)

    @property
    def responded(self) -> list[StepEstimate]:
        return [s for s in self.steps if s.responded]

    @property
    def measured(self) -> list[StepEstimate]:
        """The steps the estimates may come from (m = 2: not the starts and stops)."""
        return [s for s in self.steps if s.kind in ("step", "moving")]

    def as_dict(self) -> dict:
        d = asdict(self)
        d["steps"] = [s.as_dict() for s in self.steps]
        d["noise"] = {**asdict(self.noise), "source": self.noise.source}
        return d


def _index_at(t: np.ndarray, time: float) -> int:
    """First index with ``t >= time`` (len(t) when none)."""
    return int(np.searchsorted(t, time - 1e-9, side="left"))


def _find_step(t: np.ndarray, u: np.ndarray, t_nominal: float, ts: float, tol: float) -> int | None:
    """First sample at or after the requested time whose applied u differs from the one before."""
    i = max(_index_at(t, t_nominal - 0.5 * ts), 1)
    moved = np.nonzero(np.abs(np.diff(u[i - 1:])) > tol)[0]
    return int(i + moved[0]) if moved.size else None


def level_change(order: int, t: np.ndarray, y: np.ndarray, before: slice, after: slice,
                 t_step: float, sigma: float) -> tuple[float, float, float, float, float]:
    """(level before, level after, shared drift, standard error of the change, residual RMS).

    One least-squares fit over both stretches: a level each (m = 1) or a line each (m = 2, the
    rate is its slope), plus one shared trend ``x^m`` (x = t − t_step) — a drifting level or
    rate. The standard error comes from ``σ²·(AᵀA)⁻¹`` of the fit.
    """
    idx = np.r_[np.arange(before.start, before.stop), np.arange(after.start, after.stop)]
    x = t[idx] - t_step
    scale = max(float(np.max(np.abs(x))), 1e-12)
    xs = x / scale
    is_b = (idx < before.stop).astype(float)
    is_a = 1.0 - is_b
    cols = [is_b, is_a]
    if order == 2:
        cols += [is_b * xs, is_a * xs]
    cols.append(xs ** order)
    a = np.stack(cols, axis=1)
    coef, *_ = np.linalg.lstsq(a, y[idx], rcond=None)
    res = y[idx] - a @ coef
    cov = np.linalg.pinv(a.T @ a)
    if order == 1:
        lb, la = coef[0], coef[1]
        var = cov[0, 0] + cov[1, 1] - 2 * cov[0, 1]
        se = sigma * math.sqrt(max(var, 0.0))
        drift = coef[-1] / scale
    else:
        lb, la = coef[2] / scale, coef[3] / scale
        var = cov[2, 2] + cov[3, 3] - 2 * cov[2, 3]
        se = sigma * math.sqrt(max(var, 0.0)) / scale
        drift = 2.0 * coef[-1] / scale ** 2
    return float(lb), float(la), float(drift), se, float(math.sqrt(np.mean(res * res)))


def _plain_level(order: int, t: np.ndarray, y: np.ndarray) -> float:
    """Mean of y (m = 1) or its least-squares slope (m = 2)."""
    if order == 1:
        return float(np.mean(y))
    return float(np.polyfit(t - t[0], y, 1)[0])


def _change_se(order: int, sigma: float, n_before: int, n_after: int, ts: float) -> float:
    """Standard error of a change of level (m = 1: of two means; m = 2: of two least-squares
    slopes, σ·√(12/(n³Ts²)) each, the textbook variance of a regression slope)."""
    if order == 1:
        return sigma * math.sqrt(1.0 / n_before + 1.0 / n_after)
    return sigma * math.sqrt(12.0 / (n_before ** 3 * ts * ts) + 12.0 / (n_after ** 3 * ts * ts))


def _mark_outliers(steps: list[StepEstimate], warnings: list[str]) -> None:
    """Leave out a step whose gain or alpha lies far from the others' (a load that stepped during
    its hold): more than :data:`OUTLIER_MADS` scaled median absolute deviations and
    :data:`OUTLIER_FRACTION` from the median. Needs four responding steps to tell."""
    good = [s for s in steps if s.responded]
    if len(good) < 4:
        return
    for attr in ("gain_fit", "alpha"):
        v = np.asarray([getattr(s, attr) for s in good], dtype=float)
        med = float(np.median(v))
        mad = 1.4826 * float(np.median(np.abs(v - med)))     # scaled to σ for normal data
        limit = max(OUTLIER_MADS * mad, OUTLIER_FRACTION * abs(med))
        for s, x in zip(good, v):
            if abs(x - med) > limit and s.responded:
                s.responded = False
                s.outlier = True
                warnings.append(f"the {s.direction} step at {s.t_start:.3g} s left out: its "
                                f"{'gain' if attr == 'gain_fit' else 'alpha'} {x:.3g} is far from "
                                f"the others' median {med:.3g} (a load that changed during its hold?)")


def analyse_bump(t: np.ndarray, y: np.ndarray, u: np.ndarray, *, order: int, plan: BumpPlan,
                 schedule: Schedule, ts: float | None = None, output: str = "y") -> BumpEstimates:
    """Estimate alpha, K, τ, θ, the noise and the dead zone from the running rows of a bump test.

    ``t`` (run time from the first running sample), ``y`` and the applied ``u`` are the rows
    recorded while the profile ran; ``schedule`` says when each step was requested
    (:meth:`.driver.BumpDriver.schedule`). Raises :class:`EstimationError` when nothing can be
    estimated (the recording is too short, the actuator never moved, no step responded).
    """
    if order not in (1, 2):
        raise EstimationError(f"model order must be 1 or 2, got {order!r}")
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    u = np.asarray(u, dtype=float)
    if t.size < 3 or not (np.all(np.isfinite(t)) and np.all(np.isfinite(u))):
        raise EstimationError("the recording holds too few running samples with a time and an "
                              "applied actuator value")
    if not np.all(np.isfinite(y)):
        raise EstimationError(f"{output} has {int(np.sum(~np.isfinite(y)))} non-finite readings "
                              "during the test; check the sensor and repeat")
    dt = np.diff(t)
    ts = float(np.median(dt)) if ts is None else float(ts)
    warnings: list[str] = []
    gaps = int(np.sum(dt > 1.5 * ts))
    if gaps:
        # protocol 1.1 §5: a gap in device time is a lost frame or a tick the device missed
        # (OVERRUN; its seq stays contiguous): either way the samples are not equally spaced
        warnings.append(f"{gaps} gap(s) in the sample times (frames lost on the link, or ticks the "
                        "device missed): the estimates assume equally spaced samples and may be off")
    if t[-1] < schedule.t_end - 2.0 * ts:
        raise EstimationError(f"the recording ends at {t[-1]:.3g} s, before the bump test's "
                              f"{schedule.t_end:.3g} s")
    if len(schedule.starts) < 2:
        raise EstimationError(f"the profile made {len(schedule.starts)} step(s) within its budget; "
                              "two are needed (out and back): raise --budget or shorten --initial-hold")
    tol = 1e-3 * abs(plan.du)
    starts = []
    for t_req in schedule.starts:
        i = _find_step(t, u, t_req, ts, tol)
        if i is None:
            raise EstimationError("the applied actuator value never moved at a requested step; the "
                                  "device did not follow the commands (check its clamps: "
                                  f"u0 = {plan.u0:g}, du = {plan.du:g})")
        starts.append(i)
    # holds: the settle hold ends at the first step, hold k at step k + 1 (the last at t_end)
    n = min(t.size, _index_at(t, schedule.t_end + 0.5 * ts))
    ends = starts[1:] + [n]
    stretches: list[slice | None] = []
    for k, ((h0, h1), end) in enumerate(zip(schedule.holds(), [starts[0]] + ends)):
        t_end = t[end - 1] + ts
        start = _index_at(t, t_end - STEADY_FRACTION * (h1 - h0))
        if end - start < MIN_HOLD_SAMPLES // 2:
            if order == 1 or k == 0:
                raise EstimationError(f"a hold has only {end - start} steady samples; lengthen "
                                      "--initial-hold and --hold")
            stretches.append(None)                # cut short by the limits guard
            continue
        stretches.append(slice(start, end))
    noise = noise_floor([y[s] for s in stretches if s is not None])
    sigma = noise.sigma

    steps = []
    for k in range(len(starts)):
        kind = schedule.kind(k)
        before, after = stretches[k], stretches[k + 1]
        if kind in ("start", "stop") or before is None or after is None:
            du = float(u[min(ends[k], t.size) - 1] - u[starts[k] - 1])
            step = StepEstimate("up" if du > 0 else "down", float(t[starts[k]]), du, math.nan,
                                math.nan, math.nan, False, float(t[ends[k] - 1] - t[starts[k]]),
                                kind=kind)
            if kind not in ("start", "stop"):
                warnings.append(f"step {k + 1} ({step.direction}): its hold or the one before it "
                                "was cut too short to fit a level (the limits guard); no estimate "
                                "from it")
            steps.append(step)
            continue
        step = _one_step(order, t, y, u, ts, plan, k, starts[k], ends[k], before, after, sigma,
                         output, warnings)
        step.kind = kind
        steps.append(step)
    _mark_outliers(steps, warnings)
    good = [s for s in steps if s.responded]
    if not good and order == 2 and not any(s.kind == "moving" and math.isfinite(s.level_before)
                                           for s in steps):
        raise EstimationError("no step while moving could be measured: the output reached the "
                              "limits guard (a quarter of the limit range from each limit) too "
                              "soon after each start; use a smaller --step, or widen the limits of "
                              f"{output} if the rig allows it")
    if not good:
        raise EstimationError(f"no response to the steps: {output} did not change beyond its noise "
                              f"({sigma:.3g}) when the actuator moved by {plan.du:g}; check that "
                              "the actuator drives this output, or use a larger --step")
    alpha = Spread.of(s.alpha for s in good)
    gain = Spread.of(s.gain for s in good)
    gain_fit = Spread.of(s.gain_fit for s in good)
    tau = Spread.of(s.tau for s in good)
    theta = Spread.of(s.theta for s in good)
    alpha_fopdt = float(np.mean([s.gain_fit / s.tau for s in good]))
    est = BumpEstimates(order, ts, steps, alpha.mean, alpha.spread, gain_fit.mean, gain_fit.spread,
                        gain.mean, tau.mean, theta.mean, sigma, noise, alpha_fopdt,
                        Spread.of(s.alpha for s in good if s.direction == "up"),
                        Spread.of(s.alpha for s in good if s.direction == "down"),
                        Spread.of(s.gain_fit for s in good if s.direction == "up"),
                        Spread.of(s.gain_fit for s in good if s.direction == "down"),
                        warnings=warnings)
    est.dead_zone = find_dead_zone(t, y, u, order=order, ramp_end=plan.ramp_s, safe=plan.safe,
                                   u0=plan.u0, span=plan.u_max - plan.u_min, sigma=sigma, ts=ts,
                                   model=(gain_fit.mean, tau.mean, theta.mean))
    return est


def _one_step(order: int, t: np.ndarray, y: np.ndarray, u: np.ndarray, ts: float, plan: BumpPlan,
              k: int, i_step: int, i_next: int, before: slice, after: slice, sigma: float,
              output: str, warnings: list[str]) -> StepEstimate:
    du = float(np.mean(u[after]) - np.mean(u[before]))
    lb, la, drift, _, _ = level_change(order, t, y, before, after, float(t[i_step]), sigma)
    dl = la - lb
    # did it respond: the plain change of level (no drift model, whose extrapolation is noisier)
    plain = _plain_level(order, t[after], y[after]) - _plain_level(order, t[before], y[before])
    se = _change_se(order, sigma, before.stop - before.start, after.stop - after.start, ts)
    direction = "up" if du > 0 else "down"
    responded = du != 0 and abs(plain) > RESPONSE_SIGMAS * se and abs(plain) > 1e-12 * (1 + abs(lb))
    hold_len = float(t[i_next - 1] - t[i_step])
    est = StepEstimate(direction, float(t[i_step]), du, lb, la, se, responded, hold_len, drift)
    name = f"step {k + 1} ({direction})"
    if not responded:
        warnings.append(f"{name}: {output} {'rate ' if order == 2 else ''}changed by {plain:.3g}, "
                        f"within the noise (±{RESPONSE_SIGMAS:g} x {se:.3g}); no estimate from it")
        return est
    est.gain = dl / du
    seg = slice(before.start, i_next)
    u_prev = np.concatenate(([u[seg.start]], u[seg][:-1]))
    changes = np.nonzero(np.abs(u[seg] - u_prev) > 0)[0]
    fit = fit_fopdt(order, t[seg], y[seg], float(t[i_step]), t[seg][changes],
                    (u[seg] - u_prev)[changes], ts=ts)
    est.gain_fit, est.tau, est.theta, est.fit_rms = fit.gain, fit.tau, fit.theta, fit.rms
    est.fit_at_bound = fit.at_bound
    est.drift = fit.drift                       # the fit models the step's tail; the levels do not
    if order == 1 and fit.at_bound is None and hold_len < 4.0 * fit.tau:
        warnings.append(f"{name}: the hold ({hold_len:.3g} s) is shorter than 4 τ "
                        f"({4 * fit.tau:.3g} s): the level had not settled, so K from the steady "
                        f"levels is low (the fitted K, {fit.gain:.4g}, allows for it); lengthen --hold")
    lo = max(2.0 * plan.slew_time_s, 5.0 * ts)
    width = min(max(fit.tau / SLOPE_WINDOW_DIVISOR, lo), 0.5 * hold_len)
    n_after = max(int(round(width / ts)), 2 if order == 1 else 3)
    delay = fit.theta / ts
    if i_step + int(delay) + n_after >= i_next:
        delay = 0.0
    dy = y[seg] - fit.free(t[seg])              # the step's effect alone
    u_before = float(np.mean(u[before]))
    alpha, raw, gain_noise = initial_slope_alpha(order, dy, u[seg] - u_before, ts,
                                                 i_step - seg.start, n_after, delay=delay,
                                                 tau=fit.tau)
    est.alpha_slope, est.alpha_uncorrected = alpha, raw
    est.alpha_sigma = sigma * gain_noise
    est.window_s = n_after * ts
    est.alpha_fit = fit.gain / fit.tau
    # the fit uses every sample of the step; the slope only the first τ/5 but assumes no model.
    # Where they agree within the slope's noise (or 20 %), the fit's is the better estimate.
    agree = abs(alpha - est.alpha_fit) <= SLOPE_AGREE_SIGMAS * est.alpha_sigma \
        + SLOPE_AGREE_FRACTION * abs(est.alpha_fit)
    est.alpha, est.alpha_source = (est.alpha_fit, "fit") if agree and fit.at_bound is None \
        else (alpha, "slope")
    return est
