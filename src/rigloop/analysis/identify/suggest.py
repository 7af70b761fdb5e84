"""Settings suggested from a bump test: alpha, gains that respect the delay, a window that meets
the noise target with the config's estimator kind, and the PID baseline by the SIMC rules.

The rules, in the order they are applied (:func:`suggest_settings`):

1. **alpha**: the measured mean to two significant digits.
2. **estimator window**: the shortest window (never below
   :func:`rigloop.control.window_choice.shortest_window`, the same bound ``rigloop check`` warns
   at) whose F̂ noise — the noise floor times the estimator's own noise gain ‖y-weights‖ — is at
   most :data:`NOISE_FRACTION` of ``|alpha·du|``. The gain is computed from the weights of the
   config's kind (algebraic, averaging or one-step), not assumed. A one-step estimator has no
   window to lengthen: when it misses the target the snippet switches to the algebraic kind.
3. **closed-loop time constant** ``tau_cl``: the largest of τ/:data:`TAU_CL_DIVISOR`,
   :data:`MIN_TAU_CL_SAMPLES` sample periods, and :data:`TAU_CL_PER_DELAY` times the loop's
   dead time ``θ_loop = θ + 1.5·Ts + (the estimator's input lag)``. Source: the SIMC rules
   ('Simple analytic rules for model reduction and PID controller tuning', Journal of Process
   Control, 2003) take τc >= θ for a PI controller. A model-free law has more dead time in its
   loop than the plant's — the F̂ it cancels is the window's mean, about half a window old — and
   with F̂ exact but late by θ_loop the error obeys ``e' = −Kp·e(t − θ_loop)``, whose
   characteristic equation ``s + Kp·e^(−s·θ_loop) = 0`` has only real roots for
   ``Kp·θ_loop <= 1/e`` (a standard result for the first-order delay equation, from memory):
   ``tau_cl >= e·θ_loop``, rounded up to 3.
4. **known input delay**: ``control.input_delay_s`` = 0, and the fitted θ is reported. Measured
   (``bench/control_quality.py --delay-aware``): pairing y with ``u(t − θ)`` — the delay-aware
   ultra-local model ``y^(m)(t) = F + alpha·u(t − θ)`` — raised the tracking error on every rig
   of the scenario suite with the gains of rule 3 (the law then answers the reference θ late,
   while the plain estimate folds part of the delay into F̂). ``delay_aware=True`` sets it to θ
   (two digits; 0 below one sample period) for such comparisons.
5. **gains**: iP (m = 1) ``Kp = 1/tau_cl``; iPD (m = 2) ``ω = 1/tau_cl``, ζ = 1,
   ``(Kp, Kd) = (ω², 2ζω)``.
6. **PID baseline** by the SIMC rules for the fitted model with ``τc = tau_cl`` (the same
   closed-loop speed, for a fair comparison) and ``θ = θ_fit + 1.5·Ts``; for m = 2 the rules'
   integrating case.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

from rigloop.analysis.identify.fitting import EstimationError
from rigloop.analysis.identify.plan import BumpPlan, PlanError
from rigloop.analysis.identify.steps import BumpEstimates
from rigloop.control.tuning import effective_delay, ip_gains, ipd_gains, simc_pid
from rigloop.control.window_choice import input_lag, window_for_noise

#: Target of the suggested estimator window: noise of F̂ at most this fraction of |alpha·du|
#: (our choice: the law then acts on F̂ errors a tenth of the step it was identified with).
NOISE_FRACTION = 0.10
#: Default closed-loop time constant: τ divided by this (a loop five times faster than the
#: plant; common practice) ...
TAU_CL_DIVISOR = 5.0
#: ... never below this many sample periods ...
MIN_TAU_CL_SAMPLES = 5
#: ... and never below this multiple of the loop's dead time (module docstring, rule 3).
TAU_CL_PER_DELAY = 3.0
#: With ``delay_aware``, the fitted dead time goes into ``control.input_delay_s`` from this many
#: sample periods on; below it, it is within the fit's spread.
MIN_DELAY_SAMPLES = 1.0
#: Damping of the suggested iPD.
IPD_ZETA = 1.0
#: Longest window suggested (samples): per-sample work grows with it.
MAX_WINDOW_SAMPLES = 2000
DELAY_RULE_SOURCE = ("tau_c >= theta of the SIMC rules ('Simple analytic rules for model reduction "
                     "and PID controller tuning', Journal of Process Control, 2003), times "
                     f"{TAU_CL_PER_DELAY:g} for the law's own dead time")


@dataclass
class Suggestions:
    """Settings suggested from a bump test (see :func:`suggest_settings`)."""

    order: int
    law: str                 # iP (m = 1) or iPD (m = 2)
    alpha: float
    tau_cl: float
    tau_cl_rule: str
    loop_delay_s: float      # θ_loop: the dead time the delay rule used
    kp: float
    kd: float
    estimator_kind: str
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
    theta_s: float = 0.0         # the fitted dead time θ
    input_delay_s: float = 0.0   # control.input_delay_s suggested (0 unless delay_aware)
    notes: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        return asdict(self)


def round_sig(x: float, digits: int) -> float:
    """``x`` rounded to ``digits`` significant digits."""
    if x == 0 or not math.isfinite(x):
        return x
    return float(f"{x:.{digits}g}")


def suggest_settings(est: BumpEstimates, plan: BumpPlan, *, kind: str = "algebraic",
                     tau_cl: float | None = None, pid_u0: float | None = None,
                     delay_aware: bool = False) -> Suggestions:
    """Gains and window for the model-free law, and SIMC gains for the PID baseline (module
    docstring). Raises :class:`EstimationError` when alpha and the gain disagree in sign (the
    verdict refuses those first) and :class:`PlanError` for a ``tau_cl`` below 5 samples."""
    ts = est.ts
    if est.tau is None or est.gain is None:
        raise EstimationError("no time constant was estimated; cannot suggest gains")
    if est.alpha == 0 or (est.gain != 0 and math.copysign(1, est.alpha) != math.copysign(1, est.gain)):
        raise EstimationError(f"alpha ({est.alpha:.3g}) contradicts the sign of the measured gain "
                              f"({est.gain:.3g}); no settings suggested")
    tau = est.tau
    notes: list[str] = []
    alpha = round_sig(est.alpha, 2)
    target = NOISE_FRACTION * abs(est.alpha * plan.du)
    n, sigma_f = window_for_noise(kind, est.order, est.noise_std, ts, target, MAX_WINDOW_SAMPLES)
    if kind == "one-step" and sigma_f > target * (1 + 1e-9):
        notes.append(f"the one-step estimator's F noise ({sigma_f:.3g}) would be "
                     f"{sigma_f / target:.3g} x the target; the snippet switches to the algebraic "
                     "estimator")
        kind = "algebraic"
        n, sigma_f = window_for_noise(kind, est.order, est.noise_std, ts, target, MAX_WINDOW_SAMPLES)
    if sigma_f > target * (1 + 1e-9):
        notes.append(f"even a window of {n} samples leaves F noise of {sigma_f:.3g} (more than "
                     f"{100 * NOISE_FRACTION:g} % of alpha·du): use a larger --step or a quieter sensor")
    q = est.noise.quantum
    if q > 0 and est.noise.sigma_quantum >= est.noise.sigma_diff:
        notes.append(f"the output is read in steps of {q:.3g} and its noise is mostly that "
                     f"rounding (q/sqrt(12) = {est.noise.sigma_quantum:.3g}); the window allows "
                     "for it, and control.quantization_band (default 1 count) keeps a still output "
                     "from dithering the actuator")
    theta_eff = effective_delay(max(est.theta or 0.0, 0.0), ts)
    loop_delay = theta_eff + input_lag(kind, est.order, n, ts)
    floor = MIN_TAU_CL_SAMPLES * ts
    candidates = [(tau / TAU_CL_DIVISOR, f"tau/{TAU_CL_DIVISOR:g}"),
                  (floor, f"{MIN_TAU_CL_SAMPLES} sample periods"),
                  (TAU_CL_PER_DELAY * loop_delay,
                   f"{TAU_CL_PER_DELAY:g} x the loop's dead time {loop_delay:.3g} s")]
    if tau_cl is None:
        tau_cl, rule = max(candidates)
    else:
        rule = "--tau-cl"
        if tau_cl < floor:
            raise PlanError("--tau-cl", f"--tau-cl {tau_cl:g}: must be at least {MIN_TAU_CL_SAMPLES} "
                                        f"sample periods ({floor:.3g} s)")
        if tau_cl < TAU_CL_PER_DELAY * loop_delay:
            notes.append(f"--tau-cl {tau_cl:g} is faster than {TAU_CL_PER_DELAY:g} x the loop's dead "
                         f"time ({loop_delay:.3g} s): expect overshoot ({DELAY_RULE_SOURCE})")
    if est.order == 1:
        law, kp, kd = "iP", ip_gains(tau_cl), 0.0
    else:
        law = "iPD"
        kp, kd = ipd_gains(1.0 / tau_cl, IPD_ZETA)
    k_model = est.gain
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
    theta = max(est.theta or 0.0, 0.0)
    delay = round_sig(theta, 2) if delay_aware and theta >= MIN_DELAY_SAMPLES * ts else 0.0
    return Suggestions(est.order, law, alpha, tau_cl, rule, loop_delay, round_sig(kp, 3),
                       round_sig(kd, 3), kind, round(n * ts, 9), n, sigma_f, target,
                       round_sig(pid_kp, 3), round_sig(pid_ki, 3), round_sig(pid_kd, 3), u0,
                       tau_cl, theta_eff, theta, delay, notes)


def config_snippet(s: Suggestions, *, header: str = "") -> str:
    """YAML lines to merge into a rig's config: the model-free settings, and the PID baseline
    as a commented block (uncomment it to run the baseline instead)."""
    lines = []
    if header:
        lines += [f"# {line}" for line in header.splitlines()]
    kp_note = (f"iP: closed-loop time constant {s.tau_cl:.3g} s ({s.tau_cl_rule})" if s.order == 1 else
               f"iPD: omega = {1 / s.tau_cl:.3g} rad/s, zeta = 1 ({s.tau_cl_rule})")
    body = [
        ("control:", ""),
        (f"  alpha: {_num(s.alpha)}", "measured initial slope per unit input (2 digits)"),
        (f"  kp: {_num(s.kp)}", kp_note),
        (f"  kd: {_num(s.kd)}", "" if s.order == 2 else "not used by iP"),
        (f"  input_delay_s: {_num(s.input_delay_s)}",
         f"fitted dead time {s.theta_s:.3g} s; "
         "0: F folds the delay in (docs/identify.md)"),
        ("  estimator:", ""),
        (f"    kind: {s.estimator_kind}", ""),
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
            f"control.input_delay_s={_num(s.input_delay_s)}",
            f"control.estimator.kind={s.estimator_kind}",
            f"control.estimator.window_s={_num(s.window_s)}"]


def _num(x: float) -> str:
    """A YAML number that reads back as the same float (no trailing noise digits)."""
    return repr(float(x))
