"""The automatic bump test: plan an open-loop step around an operating point, estimate the
ultra-local model's alpha and a first-order-plus-dead-time (FOPDT) model from the recording, and
suggest settings for the model-free laws and the PID baseline.

The profile (:class:`BumpPlan`) drives the actuator open loop through the engine, so every trip,
the clamp and the slew limit stay active: ramp from ``actuator.safe`` to the operating level
``u0``, hold ``settle_s``, step to ``u0 + du``, hold ``hold_s``, step back to ``u0``, hold
``hold_s``; the engine then ramps down. The steps are slew-limited, so every estimate works on
the **applied** actuator column, and a step starts at the first sample whose applied value moves.

Estimates (:func:`analyse_bump`), for an output of model order m (1: y' = F + alpha·u; 2: the
output integrates a speed-like quantity, y'' = F + alpha·u):

* levels: over the last :data:`STEADY_FRACTION` of each hold, the mean of y (m = 1) or the
  least-squares slope of y (m = 2, the rate), and the mean applied u;
* gain ``K = Δlevel/Δu`` of each step (m = 2: the gain of the rate, per unit u; an integrating
  output has no static gain);
* K, τ and θ of a FOPDT model by least squares (:func:`fit_fopdt`), which also models a level
  that had not quite settled before the step;
* alpha by the derivative-free initial slope (:func:`initial_slope_alpha`) on a window of
  ``τ/5`` after the step (at least two slew times and 5 samples, at most half the hold) — the
  window needs τ, and the fit does not need alpha, so the fit runs first;
* noise: the standard deviation of y about a least-squares polynomial of degree m + 1 over the
  last :data:`STEADY_FRACTION` of the first hold.

Up and down steps are estimated separately and averaged (each estimate divides by its own
signed input change, so the signs agree).

Suggestions (:func:`suggest_settings`): alpha rounded to two significant digits; the gains of
the iP (m = 1) or iPD (m = 2) for a closed-loop time constant ``tau_cl``; an estimator window
from the measured noise; PID gains by the SIMC rules for the baseline.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from rigloop.control.kernels import algebraic_kernel
from rigloop.control.tuning import effective_delay, ip_gains, ipd_gains, simc_pid

#: Default hold at the operating level before the first step (s).
DEFAULT_SETTLE_S = 4.0
#: Default hold after each step (s).
DEFAULT_HOLD_S = 3.0
#: Default step: this fraction of the actuator range.
DEFAULT_STEP_FRACTION = 0.10
#: Steady levels are means over this last fraction of each hold.
STEADY_FRACTION = 0.30
#: Target of the suggested estimator window: noise of F̂ at most this fraction of |alpha·du|.
NOISE_FRACTION = 0.10
#: A hold must span at least this many samples to be analysed.
MIN_HOLD_SAMPLES = 25
#: Default closed-loop time constant: τ divided by this, and never below MIN_TAU_CL_SAMPLES·Ts.
TAU_CL_DIVISOR = 5.0
MIN_TAU_CL_SAMPLES = 5
#: Damping of the suggested iPD.
IPD_ZETA = 1.0
#: A step "responded" when its level change exceeds this many standard errors of the noise.
RESPONSE_SIGMAS = 5.0


class PlanError(ValueError):
    """A bump test that cannot be run as asked; ``option`` names the command-line option."""

    def __init__(self, option: str, message: str) -> None:
        super().__init__(message)
        self.option = option


class EstimationError(Exception):
    """The recording does not allow the estimates; the message says why and what to change."""


# ----------------------------------------------------------------------------------- the plan
@dataclass(frozen=True)
class BumpPlan:
    """The open-loop profile ``u(t)`` of one bump test (t from the first running sample)."""

    u0: float                  # operating level
    du: float                  # step (may be negative: step down first)
    safe: float                # actuator.safe, where the ramp starts
    ramp_rate: float           # actuator units per second of the ramp from safe to u0
    slew_per_s: float | None   # actuator.slew_per_s (None: steps are not slew-limited)
    settle_s: float
    hold_s: float
    u_min: float
    u_max: float
    unit: str = ""

    @property
    def t_ramp(self) -> float:
        """Duration of the ramp from the safe value to u0 (s)."""
        return abs(self.u0 - self.safe) / self.ramp_rate

    @property
    def t_up(self) -> float:
        """Time the first step is requested (s)."""
        return self.t_ramp + self.settle_s

    @property
    def t_down(self) -> float:
        """Time the step back to u0 is requested (s)."""
        return self.t_up + self.hold_s

    @property
    def duration_s(self) -> float:
        """Length of the open-loop profile; the engine's ramped stop follows."""
        return self.t_down + self.hold_s

    @property
    def slew_time_s(self) -> float:
        """Time the shaper takes to move the actuator by |du| (0 without a slew limit)."""
        return abs(self.du) / self.slew_per_s if self.slew_per_s else 0.0

    def __call__(self, t: float) -> float:
        """Requested actuator value at run time ``t`` (the engine's open-loop hook)."""
        if t < self.t_ramp:
            direction = 1.0 if self.u0 >= self.safe else -1.0
            return self.safe + direction * self.ramp_rate * max(t, 0.0)
        if self.t_up <= t < self.t_down:
            return self.u0 + self.du
        return self.u0

    def as_dict(self) -> dict:
        return {"u0": self.u0, "du": self.du, "safe": self.safe, "ramp_rate": self.ramp_rate,
                "slew_per_s": self.slew_per_s, "settle_s": self.settle_s, "hold_s": self.hold_s,
                "t_up": self.t_up, "t_down": self.t_down, "duration_s": self.duration_s,
                "unit": self.unit}


def default_operating_point(u_min: float, u_max: float, safe: float) -> float:
    """The middle of [u_min, u_max]; halfway from ``safe`` to ``u_max`` when the middle is the
    safe value.

    Why not ``safe`` itself: on our rigs (and most) the safe value is "off" — 0 % duty, 0 V —
    where the output does not respond smoothly (a stopped fan, a motor held by static friction).
    A bipolar drive has its safe value in the middle of its range, so the middle is no good
    either; halfway to the top of the range runs the rig forward at a moderate level.
    """
    middle = 0.5 * (u_min + u_max)
    if abs(middle - safe) <= 1e-9 * (u_max - u_min):
        return 0.5 * (safe + u_max)
    return middle


def plan_bump(u_min: float, u_max: float, safe: float, slew_per_s: float | None, *,
              rate_hz: float, at: float | None = None, step: float | None = None,
              settle_s: float | None = None, hold_s: float | None = None,
              max_duration_s: float | None = None, unit: str = "") -> BumpPlan:
    """Check the wanted bump test against the actuator range and the run limits.

    Raises :class:`PlanError` naming the option (``--operating-level``, ``--step``, ``--initial-hold``,
    ``--hold``), the value and what is allowed. ``u0 ± du`` must stay inside
    [u_min, u_max] so that the test may step either way from u0. The ramp from ``safe`` to u0
    runs at the slew limit, or over one second per full range when there is none.
    """
    span = u_max - u_min
    u_text = f" {unit}" if unit else ""
    u0 = default_operating_point(u_min, u_max, safe) if at is None else _finite("--operating-level", at)
    if not u_min <= u0 <= u_max:
        raise PlanError("--operating-level", f"--operating-level {u0:g}: the operating level must lie in the actuator range "
                                f"[{u_min:g}, {u_max:g}]{u_text}")
    du = DEFAULT_STEP_FRACTION * span if step is None else _finite("--step", step)
    if du == 0:
        raise PlanError("--step", "--step 0: the step must be non-zero (default: 10 % of the "
                                  f"actuator range, {DEFAULT_STEP_FRACTION * span:g}{u_text})")
    room = min(u0 - u_min, u_max - u0)
    if abs(du) > room:
        given = f"--step {du:g}" if step is not None else f"the default step {du:g}{u_text} (--step)"
        raise PlanError("--step", f"{given}: u0 ± du = {u0:g} ± {abs(du):g}{u_text} leaves the "
                                  f"actuator range [{u_min:g}, {u_max:g}]{u_text}; at --operating-level {u0:g} "
                                  f"the step may be at most {room:g}{u_text} "
                                  f"(allowed: 0 < |--step| <= {room:g})")
    ts = 1.0 / rate_hz
    slew_time = abs(du) / slew_per_s if slew_per_s else 0.0
    shortest = max(MIN_HOLD_SAMPLES * ts, 4.0 * slew_time)
    settle = DEFAULT_SETTLE_S if settle_s is None else _finite("--initial-hold", settle_s)
    hold = DEFAULT_HOLD_S if hold_s is None else _finite("--hold", hold_s)
    for option, value in (("--initial-hold", settle), ("--hold", hold)):
        if value < shortest:
            raise PlanError(option, f"{option} {value:g}: too short to measure a level; allowed: "
                                    f">= {shortest:.3g} s ({MIN_HOLD_SAMPLES} samples and 4x the "
                                    f"{slew_time:.3g} s the slew limit takes for the step)")
    ramp_rate = float(slew_per_s) if slew_per_s else float(span)
    plan = BumpPlan(float(u0), float(du), float(safe), ramp_rate,
                    float(slew_per_s) if slew_per_s else None, float(settle), float(hold),
                    float(u_min), float(u_max), unit)
    if max_duration_s is not None and plan.duration_s >= max_duration_s:
        raise PlanError("--initial-hold", f"--initial-hold {settle:g} and --hold {hold:g}: the bump test would "
                                    f"last {plan.duration_s:.3g} s, not below limits.max_duration_s "
                                    f"= {max_duration_s:g} s; shorten them or raise the limit")
    return plan


def _finite(option: str, value: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise PlanError(option, f"{option} {value!r}: must be a finite number")
    return float(value)


# --------------------------------------------------------------------- pure estimator pieces
def poly_fit(t: np.ndarray, y: np.ndarray, degree: int, t_ref: float) -> np.ndarray:
    """Least-squares polynomial coefficients in powers of ``(t − t_ref)``, lowest first."""
    x = np.asarray(t, dtype=float) - t_ref
    scale = max(float(np.max(np.abs(x))), 1e-12)
    a = np.vander(x / scale, degree + 1, increasing=True)
    coef, *_ = np.linalg.lstsq(a, np.asarray(y, dtype=float), rcond=None)
    return coef / scale ** np.arange(degree + 1)


def poly_eval(coef: np.ndarray, t: np.ndarray, t_ref: float) -> np.ndarray:
    x = np.asarray(t, dtype=float) - t_ref
    return sum(c * x ** k for k, c in enumerate(coef)) + np.zeros_like(x)


def detrended_std(t: np.ndarray, y: np.ndarray, degree: int) -> float:
    """Standard deviation of y about its least-squares polynomial of ``degree``.

    Divides by ``n − degree − 1`` (the degrees of freedom the fit leaves).
    """
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    dof = y.size - degree - 1
    if dof < 1:
        return math.nan
    t_ref = float(t[0])
    resid = y - poly_eval(poly_fit(t, y, degree, t_ref), t, t_ref)
    return float(math.sqrt(float(np.dot(resid, resid)) / dof))


def derivative_weights(order: int, n: int, ts: float) -> tuple[np.ndarray, np.ndarray]:
    """(y-weights, u-weights) of the derivative-free estimator of y^(m) over ``n`` intervals:
    the control core's algebraic kernel (:func:`rigloop.control.kernels.algebraic_kernel`)."""
    k = algebraic_kernel(order, n, ts)
    return k.y_weights, k.u_weights


def estimator_noise_gain(order: int, n: int, ts: float) -> float:
    """σ_F/σ_y of the derivative-free estimate over ``n`` intervals for white noise on y.

    It is the Euclidean norm of the y-weights. For large n this is the textbook variance of a
    least-squares slope (common practice): σ_F ≈ σ_y·√(12/(N³·Ts²)) for m = 1, and of a
    least-squares second derivative σ_F ≈ σ_y·√(720/(N⁵·Ts⁴)) for m = 2 (N = n + 1 samples).
    """
    c, _ = derivative_weights(order, n, ts)
    return float(np.linalg.norm(c))


def window_for_noise(order: int, sigma_y: float, ts: float, target: float, n_min: int,
                     n_max: int) -> tuple[int, float]:
    """Smallest window n in [n_min, n_max] (intervals) whose F̂ noise is at most ``target``.

    Returns ``(n, σ_F)``; n_max when even that window is noisier than the target.
    """
    n_min = max(int(n_min), 2 if order == 1 else 3)
    n_max = max(int(n_max), n_min)
    if not (sigma_y > 0) or not (target > 0):
        return n_min, (0.0 if sigma_y == 0 else math.nan)
    lo, hi = n_min, n_max
    if sigma_y * estimator_noise_gain(order, hi, ts) > target:
        return hi, sigma_y * estimator_noise_gain(order, hi, ts)
    while lo < hi:                       # σ_F falls monotonically with n
        mid = (lo + hi) // 2
        if sigma_y * estimator_noise_gain(order, mid, ts) <= target:
            hi = mid
        else:
            lo = mid + 1
    return lo, sigma_y * estimator_noise_gain(order, lo, ts)


def unit_response(order: int, s: np.ndarray, tau: float) -> np.ndarray:
    """Response to a unit input step at s = 0 of ``K=1``: ``1 − e^(−s/τ)`` (m = 1) or its
    integral ``s − τ(1 − e^(−s/τ))`` (m = 2, the output integrates the first-order rate)."""
    sp = np.maximum(s, 0.0)
    decay = -np.expm1(-sp / tau)
    return decay if order == 1 else sp - tau * decay


def fopdt_response(order: int, t: np.ndarray, t_changes: np.ndarray, du_changes: np.ndarray,
                   gain: float, tau: float, theta: float) -> np.ndarray:
    """Forced response of a FOPDT ``K·e^(−θs)/(τs + 1)`` (times 1/s for m = 2) to input changes.

    The input is the applied actuator as a zero-order hold: it changes by ``du_changes[j]`` at
    ``t_changes[j]``, so the output is the exact superposition
    ``K·Σ_j Δu_j·r(t − t_j − θ)`` with the unit response r of :func:`unit_response`. A
    slew-limited step is thus modelled as recorded, not as an ideal step.
    """
    t = np.asarray(t, dtype=float)
    t_changes = np.asarray(t_changes, dtype=float)
    out = np.zeros(t.size)
    if t_changes.size == 0:
        return out
    first = int(np.searchsorted(t, float(t_changes.min()) + theta, side="right"))
    s = t[None, first:] - t_changes[:, None] - theta       # the output moves only after that
    out[first:] = gain * (np.asarray(du_changes, dtype=float) @ unit_response(order, s, tau))
    return out


def free_response_basis(order: int, t: np.ndarray, t_step: float, t0: float, tau: float) -> np.ndarray:
    """Columns spanning the output's motion without the step: ``(t − t_step)^k`` for k < m and
    ``e^(−(t − t0)/τ)``.

    A first-order plant that has not quite settled still approaches its level (m = 1) or its
    rate (m = 2) as ``e^(−t/τ)`` with the same τ as the step response; a settled one has zero
    weight on that column. Measuring the exponential from ``t0`` (the first sample used) keeps
    the column within [0, 1].
    """
    t = np.asarray(t, dtype=float)
    cols = [(t - t_step) ** k for k in range(order)]
    cols.append(np.exp(-(t - t0) / tau))
    return np.stack(cols, axis=1)


@dataclass
class FopdtFit:
    """Result of :func:`fit_fopdt`; :meth:`free` gives the fitted motion without the step."""

    order: int
    gain: float                # K of the fitted model
    tau: float
    theta: float
    rms: float                 # residual RMS of the fit (output unit)
    at_bound: str | None       # "tau_min", "tau_max" or "theta_max" when the optimum sits there
    t_step: float
    t0: float
    free_coef: np.ndarray

    def free(self, t: np.ndarray) -> np.ndarray:
        """The output the rig would have shown without the step (the pre-step motion continued)."""
        return free_response_basis(self.order, t, self.t_step, self.t0, self.tau) @ self.free_coef


def fit_fopdt(order: int, t: np.ndarray, y: np.ndarray, t_step: float, t_changes: np.ndarray,
              du_changes: np.ndarray, *, ts: float, theta_max: float | None = None) -> FopdtFit:
    """K, τ and θ of the step response by least squares.

    The samples run from a stretch before the step (``t < t_step``) to the end of its hold. The
    model is the free motion (:func:`free_response_basis`) plus K times the forced response
    (:func:`fopdt_response`); for each candidate (τ, θ) the free motion's coefficients and K
    enter linearly and are solved by linear least squares, so only τ and θ are searched.
    Fitting K too keeps τ and θ unbiased when a hold was too short for the level to settle
    (K from the steady stretches then comes out low, and a fixed K would push θ up).

    Least squares rather than the two-point method (28.3 %/63.2 % crossings): it uses every
    sample of the response, so the noise averages out instead of moving two crossing times; it
    models the slew-limited input as applied and a level that had not quite settled; and it
    gives θ on a continuous scale. The search: a grid over ln τ (Ts/2 to three times the
    record after the step) and θ (0 to a third of it), then a pattern search that halves its
    steps down to 1e-4 in ln τ and 1e-4·Ts in θ.
    """
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    t0 = float(t[0])
    span = float(t[-1] - t_step)
    if theta_max is None:
        theta_max = span / 3.0
    ln_lo, ln_hi = math.log(ts / 2.0), math.log(3.0 * span)

    def solve(ln_tau: float, theta: float) -> tuple[float, np.ndarray]:
        tau = math.exp(ln_tau)
        forced = fopdt_response(order, t, t_changes, du_changes, 1.0, tau, theta)
        basis = np.column_stack((free_response_basis(order, t, t_step, t0, tau), forced))
        coef, *_ = np.linalg.lstsq(basis, y, rcond=None)
        res = y - basis @ coef
        return float(np.dot(res, res)), coef

    ln_grid = np.linspace(ln_lo, ln_hi, 21)
    th_grid = np.linspace(0.0, theta_max, 13)
    c0, ln_tau, theta = math.inf, float(ln_grid[0]), 0.0
    for lt in ln_grid:
        for th in th_grid:
            c, _ = solve(float(lt), float(th))
            if c < c0:
                c0, ln_tau, theta = c, float(lt), float(th)
    d_ln, d_th = float(ln_grid[1] - ln_grid[0]), max(float(th_grid[1] - th_grid[0]), ts)
    while d_ln > 1e-4 or d_th > 1e-4 * ts:
        moved = False
        for a, b in ((d_ln, 0.0), (-d_ln, 0.0), (0.0, d_th), (0.0, -d_th)):
            cand_ln = min(max(ln_tau + a, ln_lo), ln_hi)
            cand_th = min(max(theta + b, 0.0), theta_max)
            c, _ = solve(cand_ln, cand_th)
            if c < c0:
                c0, ln_tau, theta, moved = c, cand_ln, cand_th, True
        if not moved:
            d_ln, d_th = d_ln / 2.0, d_th / 2.0
    c0, coef = solve(ln_tau, theta)
    at_bound = None
    if ln_tau <= ln_lo + 1e-3:
        at_bound = "tau_min"
    elif ln_tau >= ln_hi - 1e-3:
        at_bound = "tau_max"
    elif theta_max > 0 and theta >= theta_max * (1 - 1e-6):
        at_bound = "theta_max"
    return FopdtFit(order, float(coef[-1]), math.exp(ln_tau), theta, math.sqrt(c0 / t.size),
                    at_bound, float(t_step), t0, coef[:-1])


def initial_slope_alpha(order: int, dy: np.ndarray, du: np.ndarray, ts: float, i_step: int,
                        n: int, *, delay: float = 0.0, tau: float | None = None
                        ) -> tuple[float, float, float]:
    """alpha = initial slope of y^(m) per unit of applied input change, derivative-free.

    ``dy`` is the output minus its motion without the step (the pre-step trend continued, so
    ``dy`` carries the step's effect alone: "the slope after minus the slope before"), and
    ``du`` the applied input minus its level before the step. On the window of ``n`` intervals
    where the output answers (``dy`` from ``i_step + ⌊d⌋``, d = θ/Ts the dead time in samples),
    the derivative-free estimator's weights (:func:`derivative_weights`) give
    ``S = Σc·dy = alpha·Ū + (mean change of F)`` with ``Ū = Σw·ū``, exactly when F does not
    change; ``ū_j`` is the mean over sample interval j of the input delayed by θ,
    ``f·du[j−⌊d⌋−1] + (1 − f)·du[j−⌊d⌋]`` with f the fraction of d. Using Ū — the
    kernel-weighted applied input — instead of the nominal step makes the estimate exact for a
    slew-limited step.

    F does change once the output moves: in a first-order plant by ``−δ/τ``, δ the step's
    effect on ``y^(m−1)``, which biases S low by about ``T/(2τ)`` of itself. With τ known
    (the FOPDT fit) the correction ``C = (1/τ)·Σ_j w_j·δ_j`` adds it back, δ_j taken over the
    sample interval j (the mean of dy at both ends for m = 1, the difference quotient of dy for
    m = 2), and

        alpha = (S + C) / Ū.

    Returns ``(alpha, S/Ū, ‖c‖/|Ū|)``: the estimate, the same without C, and the noise gain
    (standard deviation of alpha per unit of white noise on y).
    """
    dy = np.asarray(dy, dtype=float)
    du = np.asarray(du, dtype=float)
    c, w = derivative_weights(order, n, ts)
    whole = int(math.floor(delay))
    frac = float(delay) - whole
    j0 = i_step + whole
    ya = dy[j0:j0 + n + 1]
    ua = (1.0 - frac) * du[i_step:i_step + n] + frac * du[max(i_step - 1, 0):i_step + n - 1]
    if i_step < 1 or ya.size != n + 1 or ua.size != n:
        raise EstimationError("the recording is too short after the step for the slope window; "
                              "lengthen --hold")
    u_w = float(np.dot(w, ua))
    if u_w == 0:
        raise EstimationError("the applied input did not change inside the slope window")
    s = float(np.dot(c, ya))
    corr = 0.0
    if tau is not None:
        g = 0.5 * (ya[:-1] + ya[1:]) if order == 1 else np.diff(ya) / ts
        corr = float(np.dot(w, g)) / tau
    return (s + corr) / u_w, s / u_w, float(np.linalg.norm(c)) / abs(u_w)


# ------------------------------------------------------------------ estimates from a record
@dataclass
class StepEstimate:
    """Estimates from one step (``up``: u0 → u0 + du, ``down``: back to u0)."""

    direction: str
    t_start: float                   # s (run time) of the first sample whose applied u moved
    du: float                        # applied change, steady stretch after minus before
    level_before: float              # steady y (m = 1) or rate of y (m = 2) before the step
    level_after: float
    responded: bool
    gain: float | None = None        # Δlevel/Δu
    gain_fit: float | None = None    # K of the fitted FOPDT model
    tau: float | None = None
    theta: float | None = None
    fit_rms: float | None = None
    alpha: float | None = None
    alpha_uncorrected: float | None = None
    alpha_sigma: float | None = None  # standard deviation of alpha from the measured noise
    window_s: float | None = None     # slope window after the step

    def as_dict(self) -> dict:
        return asdict(self)


@dataclass
class BumpEstimates:
    """What a bump test measured (means over the steps that responded)."""

    order: int
    ts: float
    steps: list[StepEstimate]
    alpha: float
    gain: float | None               # Δlevel/Δu from the steady levels
    gain_fit: float | None           # K of the fitted FOPDT model
    tau: float | None
    theta: float | None
    noise_std: float
    alpha_fopdt: float | None        # K/τ of the fitted model: the alpha it implies (a cross-check)
    warnings: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        d = asdict(self)
        d["steps"] = [s.as_dict() for s in self.steps]
        return d


def _index_at(t: np.ndarray, time: float) -> int:
    """First index with ``t >= time`` (len(t) when none)."""
    return int(np.searchsorted(t, time - 1e-9, side="left"))


def _find_step(t: np.ndarray, u: np.ndarray, t_nominal: float, ts: float, tol: float) -> int | None:
    """First sample at or after the requested time whose applied u differs from the one before."""
    i = max(_index_at(t, t_nominal - 0.5 * ts), 1)
    moved = np.nonzero(np.abs(np.diff(u[i - 1:])) > tol)[0]
    return int(i + moved[0]) if moved.size else None


def _level(order: int, t: np.ndarray, y: np.ndarray) -> float:
    if order == 1:
        return float(np.mean(y))
    return float(poly_fit(t, y, 1, float(t[0]))[1])


def _level_se(order: int, sigma: float, n: int, ts: float) -> float:
    """Standard error of a steady level from n samples with white noise σ."""
    if order == 1:
        return sigma / math.sqrt(n)
    return sigma * math.sqrt(12.0 / (n ** 3 * ts * ts))


def analyse_bump(t: np.ndarray, y: np.ndarray, u: np.ndarray, *, order: int, plan: BumpPlan,
                 ts: float | None = None, output: str = "y") -> BumpEstimates:
    """Estimate alpha, K, τ, θ and the noise from the running rows of a bump test.

    ``t`` (run time from the first running sample), ``y`` and the applied ``u`` are the rows
    recorded while the profile ran. Raises :class:`EstimationError` when nothing can be
    estimated (for example the output did not respond to either step).
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
        warnings.append(f"{gaps} gap(s) in the sample times (lost samples): the estimates assume "
                        "equally spaced samples and may be off")
    if t[-1] < plan.duration_s - 2.0 * ts:
        raise EstimationError(f"the recording ends at {t[-1]:.3g} s, before the bump test's "
                              f"{plan.duration_s:.3g} s")
    tol = 1e-3 * abs(plan.du)
    i_up = _find_step(t, u, plan.t_up, ts, tol)
    i_dn = _find_step(t, u, plan.t_down, ts, tol) if i_up is not None else None
    if i_up is None or i_dn is None:
        raise EstimationError("the applied actuator value never moved at the requested step; the "
                              "device did not follow the commands (check its clamps: "
                              f"u0 = {plan.u0:g}, du = {plan.du:g})")
    n = t.size
    # steady stretches: the last STEADY_FRACTION of each hold
    holds = [(plan.settle_s, i_up), (plan.hold_s, i_dn), (plan.hold_s, n)]
    stretches = []
    for length, end in holds:
        t_end = t[end - 1] + ts if end < n else t[-1] + ts
        start = _index_at(t, t_end - STEADY_FRACTION * length)
        if end - start < MIN_HOLD_SAMPLES // 2:
            raise EstimationError(f"a hold has only {end - start} steady samples; lengthen "
                                  "--initial-hold and --hold")
        stretches.append(slice(start, end))
    s0 = stretches[0]
    noise = detrended_std(t[s0], y[s0], order + 1)
    levels = [_level(order, t[s], y[s]) for s in stretches]
    u_levels = [float(np.mean(u[s])) for s in stretches]

    steps: list[StepEstimate] = []
    for k, (direction, i_step, i_next) in enumerate((("up", i_up, i_dn), ("down", i_dn, n))):
        before, after = stretches[k], stretches[k + 1]
        du = u_levels[k + 1] - u_levels[k]
        dl = levels[k + 1] - levels[k]
        se = math.hypot(_level_se(order, noise, before.stop - before.start, ts),
                        _level_se(order, noise, after.stop - after.start, ts))
        responded = du != 0 and abs(dl) > RESPONSE_SIGMAS * se and abs(dl) > 1e-12 * (1 + abs(levels[k]))
        est = StepEstimate(direction, float(t[i_step]), du, levels[k], levels[k + 1], responded)
        steps.append(est)
        if not responded:
            warnings.append(f"the {direction} step: {output} {'rate ' if order == 2 else ''}changed "
                            f"by {dl:.3g}, within the noise (±{RESPONSE_SIGMAS:g} x {se:.3g}); "
                            "no estimate from this step")
            continue
        est.gain = dl / du
        _check_settled(order, t[before], y[before], noise, ts, dl, direction,
                       "--initial-hold" if k == 0 else "--hold", warnings)
        # FOPDT fit over the steady stretch before the step and the whole hold after it
        seg = slice(before.start, i_next)
        u_prev = np.concatenate(([u[seg.start]], u[seg][:-1]))
        changes = np.nonzero(np.abs(u[seg] - u_prev) > 0)[0]
        fit = fit_fopdt(order, t[seg], y[seg], float(t[i_step]), t[seg][changes],
                        (u[seg] - u_prev)[changes], ts=ts)
        est.gain_fit, est.tau, est.theta, est.fit_rms = fit.gain, fit.tau, fit.theta, fit.rms
        if fit.at_bound is not None:
            warnings.append(f"the {direction} step: the FOPDT fit ended at its search bound "
                            f"({fit.at_bound}); τ and θ are unreliable (is the hold long enough, "
                            "is the response first order?)")
        hold_len = float(t[i_next - 1] - t[i_step])
        if order == 1 and hold_len < 4.0 * fit.tau:
            warnings.append(f"the {direction} step: the hold ({hold_len:.3g} s) is shorter than "
                            f"4 τ ({4 * fit.tau:.3g} s): the level had not settled, so K from the "
                            f"steady levels is low (the fitted K, {fit.gain:.4g}, allows for it); "
                            "lengthen --hold")
        # slope window after the step (docs/reports.md): τ/5, at least 2 slew times and 5
        # samples, at most half the hold
        lo = max(2.0 * plan.slew_time_s, 5.0 * ts)
        width = min(max(fit.tau / TAU_CL_DIVISOR, lo), 0.5 * hold_len)
        n_after = max(int(round(width / ts)), 2 if order == 1 else 3)
        delay = fit.theta / ts
        if i_step + int(delay) + n_after >= i_next:
            delay = 0.0
        dy = y[seg] - fit.free(t[seg])              # the step's effect alone
        alpha, raw, gain_noise = initial_slope_alpha(order, dy, u[seg] - u_levels[k], ts,
                                                     i_step - seg.start, n_after, delay=delay,
                                                     tau=fit.tau)
        est.alpha, est.alpha_uncorrected = alpha, raw
        est.alpha_sigma = noise * gain_noise
        est.window_s = n_after * ts
        if est.alpha_sigma > 0 and abs(alpha) < 3.0 * est.alpha_sigma:
            warnings.append(f"the {direction} step: alpha {alpha:.3g} is hardly above its noise "
                            f"(σ {est.alpha_sigma:.2g}); use a larger --step")
    good = [s for s in steps if s.responded]
    if not good:
        raise EstimationError(f"no response to the step: {output} did not change beyond its noise "
                              f"({noise:.3g}) when the actuator moved by {plan.du:g}; check that "
                              "the actuator drives this output, or use a larger --step")
    alphas = [s.alpha for s in good]
    if len(alphas) == 2 and alphas[0] * alphas[1] < 0:
        warnings.append("the up and down steps give alphas of opposite sign; the estimates are "
                        "unreliable (noise, backlash, or a load that changed during the test)")
    elif len(alphas) == 2 and abs(alphas[0] - alphas[1]) > 0.3 * max(abs(alphas[0]), abs(alphas[1])):
        warnings.append(f"the up and down steps disagree on alpha ({alphas[0]:.3g} vs "
                        f"{alphas[1]:.3g}): the rig is not linear over the step, or noisy")
    def mean(attr: str) -> float:
        return float(np.mean([getattr(s, attr) for s in good]))

    alpha_fopdt = float(np.mean([s.gain_fit / s.tau for s in good]))
    alpha = float(np.mean(alphas))
    if abs(alpha - alpha_fopdt) > 0.2 * abs(alpha):
        warnings.append(f"the initial slope (alpha {alpha:.3g}) and the fitted model (K/τ "
                        f"{alpha_fopdt:.3g}) disagree by more than 20 %: the response is not "
                        "first order (a second lag, backlash, a nonlinearity) or noisy")
    return BumpEstimates(order, ts, steps, alpha, mean("gain"), mean("gain_fit"),
                         mean("tau"), mean("theta"), noise, alpha_fopdt, warnings)


def _check_settled(order: int, t: np.ndarray, y: np.ndarray, noise: float, ts: float,
                   change: float, direction: str, option: str, warnings: list[str]) -> None:
    """Warn when the level still drifted before a step by more than 2 % of the step's change."""
    coef = poly_fit(t, y, order, float(t[0]))
    length = float(t[-1] - t[0])
    drift = abs(coef[order]) * math.factorial(order) * length    # change of y^(m−1) over the stretch
    se = noise * estimator_noise_gain(order, t.size - 1, ts) * length
    if drift > 0.02 * abs(change) and drift > 3.0 * se:
        what = "output" if order == 1 else "output's rate"
        warnings.append(f"before the {direction} step the {what} still moved by {drift:.3g} over "
                        f"the last {length:.3g} s ({100 * drift / abs(change):.2g} % of the step's "
                        "change): the fit allows for it, but the steady-level gain K is less "
                        f"certain; a longer {option} helps")


# --------------------------------------------------------------------------- suggestions
@dataclass
class Suggestions:
    """Settings suggested from a bump test (see :func:`suggest_settings`)."""

    order: int
    law: str                 # iP (m = 1) or iPD (m = 2)
    alpha: float
    tau_cl: float
    tau_cl_rule: str
    kp: float
    kd: float
    window_s: float
    window_samples: int
    sigma_f: float           # expected noise of F̂ with that window (output unit/s^m)
    sigma_f_target: float
    pid_kp: float
    pid_ki: float
    pid_kd: float
    pid_u0: float
    pid_tau_c: float
    pid_theta: float         # dead time used by the SIMC rules (sampling included)
    notes: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        return asdict(self)


def round_sig(x: float, digits: int) -> float:
    """``x`` rounded to ``digits`` significant digits."""
    if x == 0 or not math.isfinite(x):
        return x
    return float(f"{x:.{digits}g}")


def suggest_settings(est: BumpEstimates, plan: BumpPlan, *, tau_cl: float | None = None,
                     pid_u0: float | None = None) -> Suggestions:
    """Gains and window for the model-free law, and SIMC gains for the PID baseline.

    * alpha: the measured alpha to two significant digits.
    * ``tau_cl``: as given, else ``τ/5`` (never below 5 sample periods). m = 1 (iP):
      ``Kp = 1/tau_cl``; m = 2 (iPD): ``ω = 1/tau_cl``, ζ = 1, ``(Kp, Kd) = (ω², 2ζω)``.
    * estimator window: the shortest whose F̂ noise (:func:`estimator_noise_gain` × measured
      noise) is at most :data:`NOISE_FRACTION` of ``|alpha·du|``, clamped to [3 samples, τ/2]
      and to ``tau_cl`` (a window longer than the loop's time scale makes F̂ lag).
    * PID baseline by the SIMC rules ('Simple analytic rules for model reduction and PID
      controller tuning', Journal of Process Control, 2003) for the fitted model (K, τ, θ)
      with ``τc = tau_cl`` — the same
      closed-loop speed as the model-free law, for a fair comparison — and
      ``θ = θ_fit + Ts/2 + Ts`` (zero-order hold and the one-sample answer of the loop). For
      m = 2 the output integrates the first-order rate ``K/(s(τs + 1))``: the rules' integrating
      case, ``Kc = 1/(K(τc + θ))``, ``τI = 4(τc + θ)``, ``τD = τ``.
    """
    ts = est.ts
    if est.tau is None or est.gain is None:
        raise EstimationError("no time constant was estimated; cannot suggest gains")
    tau = est.tau
    notes: list[str] = []
    floor = MIN_TAU_CL_SAMPLES * ts
    if tau_cl is None:
        tau_cl = max(tau / TAU_CL_DIVISOR, floor)
        rule = f"τ/{TAU_CL_DIVISOR:g}" if tau / TAU_CL_DIVISOR >= floor else f"{MIN_TAU_CL_SAMPLES} sample periods"
    else:
        rule = "--tau-cl"
        if tau_cl < floor:
            raise PlanError("--tau-cl", f"--tau-cl {tau_cl:g}: must be at least {MIN_TAU_CL_SAMPLES} "
                                        f"sample periods ({floor:.3g} s)")
    if est.order == 1:
        law, kp, kd = "iP", ip_gains(tau_cl), 0.0
    else:
        law = "iPD"
        kp, kd = ipd_gains(1.0 / tau_cl, IPD_ZETA)
    alpha = round_sig(est.alpha, 2)
    target = NOISE_FRACTION * abs(est.alpha * plan.du)
    n_hi = max(3, min(int(math.floor(0.5 * tau / ts)), int(math.floor(tau_cl / ts))))
    n, sigma_f = window_for_noise(est.order, est.noise_std, ts, target, 3, n_hi)
    if sigma_f > target * (1 + 1e-9):
        cap = "τ/2" if n_hi == int(math.floor(0.5 * tau / ts)) else "the closed-loop time constant"
        notes.append(f"the noise asks for a window longer than {cap}: F̂ will carry noise of "
                     f"{sigma_f:.3g} (more than {100 * NOISE_FRACTION:g} % of alpha·du); a slower "
                     "--tau-cl allows a longer window")
    theta_eff = effective_delay(max(est.theta or 0.0, 0.0), ts)
    k_model = est.gain_fit if est.gain_fit is not None else est.gain
    if est.order == 1:
        pid_kp, pid_ki, pid_kd = simc_pid(k_model, tau, theta_eff, tau_c=tau_cl)
        u0 = plan.u0 if pid_u0 is None else pid_u0
    else:
        # integrating process as the limit of a very slow lag: k·B/(B·s + 1) → k/s (B large)
        big = 1e6 * max(tau, tau_cl + theta_eff)
        pid_kp, pid_ki, pid_kd = simc_pid(k_model * big, big, theta_eff, tau_c=tau_cl, tau2=tau)
        u0 = plan.safe if pid_u0 is None else pid_u0
        notes.append("an integrating output holds still at the input that gives zero rate; the "
                     f"PID bias pid_u0 is set to the safe value {plan.safe:g} — adjust it if the "
                     "rig needs a holding input")
    return Suggestions(est.order, law, alpha, tau_cl, rule, round_sig(kp, 3), round_sig(kd, 3),
                       round(n * ts, 9), n, sigma_f, target, round_sig(pid_kp, 3),
                       round_sig(pid_ki, 3), round_sig(pid_kd, 3), u0, tau_cl, theta_eff, notes)


def config_snippet(s: Suggestions, *, header: str = "") -> str:
    """YAML lines to merge into a rig's config: the model-free settings, and the PID baseline
    as a commented block (uncomment it to run the baseline instead)."""
    lines = []
    if header:
        lines += [f"# {line}" for line in header.splitlines()]
    kp_note = (f"iP: closed-loop time constant {s.tau_cl:.3g} s" if s.order == 1 else
               f"iPD: omega = {1 / s.tau_cl:.3g} rad/s, zeta = 1")
    body = [
        ("control:", ""),
        (f"  alpha: {_num(s.alpha)}", "measured initial slope per unit input (2 digits)"),
        (f"  kp: {_num(s.kp)}", kp_note),
        (f"  kd: {_num(s.kd)}", "" if s.order == 2 else "not used by iP"),
        ("  estimator:", ""),
        (f"    window_s: {_num(s.window_s)}", f"{s.window_samples} samples, from the measured noise"),
    ]
    width = max(len(text) for text, _ in body) + 2
    lines += [(text.ljust(width) + f"# {note}") if note else text for text, note in body]
    lines += [
        "# PID baseline by the SIMC rules (same closed-loop time constant); to run it instead:",
        "# control:",
        "#   law: PID",
        f"#   kp: {_num(s.pid_kp)}",
        f"#   ki: {_num(s.pid_ki)}",
        f"#   kd: {_num(s.pid_kd)}",
        f"#   pid_u0: {_num(s.pid_u0)}",
    ]
    return "\n".join(lines) + "\n"


def snippet_overrides(s: Suggestions) -> list[str]:
    """The snippet's active keys as ``--set`` overrides (``KEY=VALUE``)."""
    return [f"control.alpha={_num(s.alpha)}", f"control.kp={_num(s.kp)}", f"control.kd={_num(s.kd)}",
            f"control.estimator.window_s={_num(s.window_s)}"]


def _num(x: float) -> str:
    """A YAML number that reads back as the same float (no trailing noise digits)."""
    text = repr(float(x))
    return text
