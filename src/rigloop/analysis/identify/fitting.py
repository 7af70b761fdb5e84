"""Fitting one step of the bump test: a first-order-plus-dead-time (FOPDT) model by least
squares, and alpha from the derivative-free initial slope.

Both work on one stretch of the record: the steady end of the hold before a step, and the
whole hold after it. The output's motion *without* the step — a level or rate still
approaching its value, and a slow drift of the load — is modelled by the free-response columns
(:func:`free_response_basis`) and fitted together with the step's forced response, so the drift
is removed using the trends both before and after the step.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rigloop.control.kernels import algebraic_kernel


class EstimationError(Exception):
    """The recording does not allow the estimates; the message says why and what to change."""


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


def free_response_basis(order: int, t: np.ndarray, t_step: float, t0: float, tau: float,
                        scale: float = 1.0) -> np.ndarray:
    """Columns spanning the output's motion without the step: ``(t − t_step)^k`` for k <= m and
    ``e^(−(t − t0)/τ)``.

    ``k < m`` is the level (m = 1) or the position and rate (m = 2) the output holds; ``k = m``
    is a slow drift of the load, a straight-line trend of the level (m = 1) or of the rate
    (m = 2), fitted from the stretches both before the step and at the end of its hold. A
    first-order plant that has not quite settled still approaches its level (or rate) as
    ``e^(−t/τ)`` with the same τ as the step response; a settled one has zero weight on that
    column. Measuring the exponential from ``t0`` (the first sample used) keeps the column
    within [0, 1]; the powers are divided by ``scale`` (the fit's longest |t − t_step|) for
    the same reason.
    """
    t = np.asarray(t, dtype=float)
    x = t - t_step
    cols = [(x / scale) ** k for k in range(order + 1)]
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
    scale: float = 1.0

    def free(self, t: np.ndarray) -> np.ndarray:
        """The output the rig would have shown without the step (the pre-step motion continued)."""
        return free_response_basis(self.order, t, self.t_step, self.t0, self.tau,
                                   self.scale) @ self.free_coef

    @property
    def drift(self) -> float:
        """Slope of the fitted drift: of the level per second (m = 1), of the rate per second
        (m = 2)."""
        return float(self.free_coef[self.order]) * math.factorial(self.order) / self.scale ** self.order


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
    scale = max(float(np.max(np.abs(t - t_step))), ts)

    def solve(ln_tau: float, theta: float) -> tuple[float, np.ndarray]:
        tau = math.exp(ln_tau)
        forced = fopdt_response(order, t, t_changes, du_changes, 1.0, tau, theta)
        basis = np.column_stack((free_response_basis(order, t, t_step, t0, tau, scale), forced))
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
                    at_bound, float(t_step), t0, coef[:-1], scale)


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


