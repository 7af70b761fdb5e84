"""Whether a bump test's estimates may be used: refuse rather than guess.

A suggested alpha goes straight into a controller that moves a rig. A wrong sign makes the loop
push the output away from the setpoint; a value several times off makes it limit-cycle. So the
tool **refuses** — exits non-zero with the reason and what to try, and prints no config
snippet — when the estimates do not hold together:

* **too few steps while moving** (m = 2): fewer than two were measured;
* **the output hardly moved**: a step's change of level (m = 1) or of rate (m = 2) is within
  :data:`.steps.RESPONSE_SIGMAS` standard errors of the noise, or the output moved less than
  :data:`MOVED_SIGMAS` noise standard deviations over the step (m = 2: the change of rate times
  the hold);
* **the steps disagree in sign**: two steps' alphas, or alpha and the static gain, have opposite
  signs;
* **the steps disagree beyond their spread**: the spread of alpha over the steps exceeds
  :data:`MAX_RELATIVE_SPREAD` of its mean *and* what the noise explains — the rig does not act
  the same way twice (backlash, a load that changed, a dead zone reached by the steps);
* **a fit sits on its search bound**: τ or θ of some step ended on the edge of the search, so
  the correction that divides by τ is unfounded;
* **the steps reach into the dead zone** found on the ramp (:mod:`.deadzone`);
* **the model does not describe the response**: the fit's residual is more than
  :data:`FIT_RMS_NOISE` times the noise floor, so its K/τ is not the rig's alpha;
* **a correction outweighs the data**: the correction of the initial slope for the plant's own
  motion is larger than the slope measured, so alpha would come from the model, not the rig.

Warnings (printed, but the snippet is given): the steps up and down disagree beyond their
combined spread, the initial slope and K/τ of the fit disagree.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from rigloop.analysis.identify.plan import BumpPlan
from rigloop.analysis.identify.steps import BumpEstimates

#: The output must move by at least this many noise standard deviations over a step (common
#: practice: about where a step stands out of the noise on a plot).
MOVED_SIGMAS = 3.0
#: Largest spread of alpha over the steps, relative to its mean (our choice: beyond ±35 % the
#: suggested gains are off by more than a loop's usual gain margin allows).
MAX_RELATIVE_SPREAD = 0.35
#: The spread is "beyond the noise" when it exceeds this many times the noise's own share
#: (the typical standard deviation of one step's alpha from the noise floor).
SPREAD_NOISE_FACTOR = 3.0
#: The fit describes the response when its residual RMS is at most this many times the noise
#: floor (common practice: residuals at the noise level mean the model holds).
FIT_RMS_NOISE = 2.0
#: Up and down disagree when their means differ by more than this many combined standard errors.
UP_DOWN_SIGMAS = 3.0
#: ... and by more than this fraction of their mean (smaller differences do not change a tuning).
UP_DOWN_FRACTION = 0.05
#: The initial slope and the fit's K/τ are compared against this relative difference.
FIT_SLOPE_TOLERANCE = 0.2


@dataclass(frozen=True)
class Refusal:
    """One reason not to use the estimates, and what to try instead."""

    reason: str
    advice: str

    def as_dict(self) -> dict:
        return asdict(self)


def judge(est: BumpEstimates, plan: BumpPlan) -> tuple[list[Refusal], list[str]]:
    """(refusals, warnings) for the estimates of one bump test (module docstring)."""
    refusals: list[Refusal] = []
    notes: list[str] = []
    sigma = est.noise_std
    m = est.order
    quiet = []
    for k, s in enumerate(est.steps):
        if s.outlier or s not in est.measured or not math.isfinite(s.level_before):
            continue                      # a start or stop, or a hold the guard cut short
        moved = abs(s.level_after - s.level_before) * (1.0 if m == 1 else s.hold_s)
        if not s.responded or (sigma > 0 and moved < MOVED_SIGMAS * sigma):
            quiet.append(f"{k + 1} ({s.direction}: {moved:.3g} against a noise of {sigma:.3g})")
    if quiet:
        refusals.append(Refusal(
            f"the output hardly moved on step(s) {', '.join(quiet)}",
            "use a larger --step, or choose --operating-level away from a dead zone or a stop; check that the "
            "actuator drives this output"))
    good = est.responded
    if m == 2 and len(good) < 2:
        refusals.append(Refusal(
            f"only {len(good)} step(s) while moving could be measured (the limits guard ended the "
            "excursions early, or the steps did not answer)",
            "use a smaller --step so that the output travels less per hold, or widen the output's "
            "limits if the rig allows it"))
    alphas = [s.alpha for s in good if s.alpha is not None]
    signs = {math.copysign(1.0, a) for a in alphas if a != 0}
    if len(signs) > 1:
        refusals.append(Refusal(
            "the steps give alphas of opposite sign (" + ", ".join(f"{a:.3g}" for a in alphas) + ")",
            "the rig does not answer the same way each time: look for backlash, a slipping "
            "coupling or a load that changed; repeat with a larger --step and longer --hold"))
    if est.gain is not None and est.alpha != 0 and est.gain != 0 and \
            math.copysign(1.0, est.alpha) != math.copysign(1.0, est.gain):
        refusals.append(Refusal(
            f"alpha ({est.alpha:.3g}) and the static gain ({est.gain:.3g}) have opposite signs",
            "the initial slope contradicts the steady response; repeat with longer --hold and "
            "check the sensor's sign"))
    if len(alphas) > 1 and len(signs) == 1:
        rel = est.alpha_spread / abs(est.alpha) if est.alpha else math.inf
        typical = math.sqrt(sum((s.alpha_sigma or 0.0) ** 2 for s in good) / len(good))
        if rel > MAX_RELATIVE_SPREAD and est.alpha_spread > SPREAD_NOISE_FACTOR * typical:
            refusals.append(Refusal(
                f"the steps disagree on alpha beyond their spread: {est.alpha:.3g} ± "
                f"{est.alpha_spread:.3g} ({100 * rel:.0f} %, the noise explains ± {typical:.2g})",
                "the rig is not the same from step to step (a load that changes, backlash, a "
                "dead zone within the steps): use a smaller --step around an --operating-level away from "
                "the dead zone, or longer --hold"))
    bounded = [f"{k + 1} ({s.fit_at_bound})" for k, s in enumerate(est.steps)
               if s.fit_at_bound and not s.outlier]
    if bounded:
        refusals.append(Refusal(
            f"the model fit sits on its search bound on step(s) {', '.join(bounded)}",
            "the response is not a first-order lag with dead time over the hold: lengthen "
            "--hold (tau_max), raise the sample rate (tau_min) or look for a second lag"))
    loose = [f"{k + 1} ({s.fit_rms / sigma:.2g} x)" for k, s in enumerate(est.steps)
             if s.responded and s.fit_rms is not None and sigma > 0 and s.fit_rms > FIT_RMS_NOISE * sigma]
    if loose:
        refusals.append(Refusal(
            f"the model does not describe the response: its residual is above {FIT_RMS_NOISE:g} x "
            f"the noise floor on step(s) {', '.join(loose)}",
            "the rig is not a first-order lag with dead time around this level (backlash, a load "
            "that changes with position, a second lag): try a smaller --step, a level away from "
            "rest (--operating-level) or shorter holds"))
    heavy = [f"{k + 1}" for k, s in enumerate(good)
             if s.alpha_source == "slope" and s.alpha_slope is not None
             and abs(s.alpha_slope - s.alpha_uncorrected) > abs(s.alpha_uncorrected)]
    if heavy:
        refusals.append(Refusal(
            f"on step(s) {', '.join(heavy)} the correction for the plant's own motion outweighs "
            "the measured slope",
            "the slope window is long against the time constant or the output hardly moved: "
            "use a larger --step, or a faster sample rate"))
    if not refusals:
        for what, up, dn in (("alpha", est.alpha_up, est.alpha_down),
                             ("the static gain", est.gain_up, est.gain_down)):
            if up is None or dn is None or up.n < 2 or dn.n < 2:
                continue
            se = math.hypot(up.spread / math.sqrt(up.n), dn.spread / math.sqrt(dn.n))
            diff = abs(up.mean - dn.mean)
            if diff > UP_DOWN_SIGMAS * se and diff > UP_DOWN_FRACTION * abs(up.mean + dn.mean) / 2:
                notes.append(f"the steps up and down disagree on {what} beyond their spread "
                             f"({up.mean:.3g} ± {up.spread:.2g} vs {dn.mean:.3g} ± {dn.spread:.2g}): "
                             "the rig is not linear over the step (its slope changes with the "
                             "input, or backlash); the mean is used")
    slopes = [s for s in good if s.alpha_slope is not None and s.alpha_sigma is not None]
    if slopes and est.alpha_fopdt:
        slope = sum(s.alpha_slope for s in slopes) / len(slopes)
        slope_se = math.sqrt(sum(s.alpha_sigma ** 2 for s in slopes)) / len(slopes)
        if abs(slope - est.alpha_fopdt) > FIT_SLOPE_TOLERANCE * abs(est.alpha_fopdt) + 3 * slope_se:
            notes.append(f"the model-free initial slope ({slope:.3g} ± {slope_se:.2g}) and the "
                         f"fitted model (K/τ {est.alpha_fopdt:.3g}) disagree by more than "
                         f"{100 * FIT_SLOPE_TOLERANCE:.0f} % and the slope's noise: the response is "
                         "not first order (a second lag, backlash, a nonlinearity)")
    dz = est.dead_zone
    if dz is not None and dz.found and dz.u_start is not None:
        direction = 1.0 if plan.u0 >= plan.safe else -1.0
        lowest = plan.u0 - direction * abs(plan.du)
        if (lowest - dz.u_start) * direction <= 0:
            refusals.append(Refusal(
                f"the steps reach {lowest:.4g}, inside the dead zone (the output starts to move at "
                f"about {dz.u_start:.4g})",
                "choose --operating-level and --step so that u0 - |du| stays above the dead zone"))
        notes.append(f"the output starts to move at about {dz.u_start:.3g} on the ramp (a dead "
                     "zone): keep the operating range above it — actuator.min at about that "
                     "value if the rig may rest there, or an offset in the drive")
    return refusals, notes

