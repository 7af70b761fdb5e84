"""Step metrics of one transition read through the noise of a real rig.

:func:`rigloop.analysis.metrics.step_metrics` applies the definitions of python-control's
``step_info`` to the samples as they are. On a rig those samples carry noise, and the noise, not
the loop, then sets the overshoot (the largest sample) and the settling time (the last time the
output left the band). :func:`transition_metrics` therefore

1. measures the noise floor σ of the segment (:func:`rigloop.analysis.noise.noise_floor`);
2. smooths the response with a centred cubic Savitzky–Golay filter, no longer than needed to
   bring ``NOISE_MULTIPLE·σ_s`` (σ_s the noise left in it) down to a quarter of the stated band
   (so the band stays as stated) and to half a percent of the change (so noise moves the
   overshoot by less than about half a percentage point), and never longer than half the rise
   time (read on a first smoothing) nor a fifth of the segment, so that the response's own
   shape is kept;
3. widens the settling band to ``max(stated % of the change, NOISE_MULTIPLE·σ_s)`` — a band
   narrower than the noise left is crossed by the noise alone — and says so;
4. reads rise, settling, overshoot and peak on the smoothed response with the ``step_info``
   rules, and the steady-state error (a mean, which noise does not bias) on the raw samples;
5. states how far the noise left can move the overshoot (``overshoot_noise_pct``,
   ``NOISE_MULTIPLE·σ_s`` in percent of the change): where the rise time does not allow enough
   smoothing, an overshoot of that size may be noise;
6. calls a response settled only when it then stays in the band for at least
   ``SETTLE_CONFIRM_FRACTION`` of the segment, so that a settling time is never really the
   segment's length.

Without noise (σ = 0, or a noise already well inside the band) nothing is smoothed and the
numbers are those of ``step_metrics`` (but for rule 6).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from rigloop.analysis.metrics import RISE_LIMITS, SETTLE_BAND, StepMetrics, step_metrics
from rigloop.analysis.noise import MIN_WINDOW, noise_floor, smooth, window_for_noise

#: The band is at least this many standard deviations of the noise left after smoothing: a
#: normal sample lies outside ±4σ with probability 6e-5 (common practice for a "clear of noise"
#: threshold).
NOISE_MULTIPLE = 4.0
#: The smoothing aims at NOISE_MULTIPLE·σ_s <= this share of the stated band ...
SMOOTH_SHARE_OF_BAND = 0.25
#: ... and <= this fraction of the change, so that the overshoot's noise stays below about
#: half a percentage point even with a wide band (ours).
OVERSHOOT_RESOLUTION = 0.005
#: The smoothing window is at most this fraction of the rise time (keeps peaks; ours).
RISE_WINDOW_FRACTION = 0.5
#: ... and at most this fraction of the segment's samples.
SEGMENT_WINDOW_FRACTION = 0.2
#: Settled only if the response then stays in the band for this fraction of the segment (ours).
SETTLE_CONFIRM_FRACTION = 0.1

SETTLED = "settled"
NEVER_LEFT = "within the band throughout"
NOT_SETTLED = "not settled within the segment"
NOT_MEASURED = "not measured"


@dataclass(frozen=True)
class TransitionMetrics:
    """Step metrics of a transition with the band, noise and smoothing they were read with."""

    step: StepMetrics
    band_stated_pct: float     # the band asked for, percent of the change
    band: float                # half-width of the band used, output unit
    band_pct: float            # the same, percent of the change
    band_widened: bool         # the stated band was below the noise and was widened
    noise_std: float           # noise floor of the raw samples, output unit
    noise_left: float          # noise left after smoothing, output unit
    smoothing_samples: int     # Savitzky–Golay window, samples (1 = not smoothed)
    smoothing_s: float         # the same in seconds
    settled: str               # SETTLED, NEVER_LEFT, NOT_SETTLED or NOT_MEASURED
    overshoot_noise_pct: float = math.nan   # NOISE_MULTIPLE·noise_left, percent of the change:
    #                                         how far the noise alone can move the overshoot

    def as_dict(self) -> dict:
        out = self.step.as_dict()
        out.update({k: v for k, v in asdict(self).items() if k != "step"})
        return out

    @property
    def band_note(self) -> str:
        """Words for a widened band ("" when the stated band was used)."""
        if not self.band_widened:
            return ""
        return (f"the stated ±{self.band_stated_pct:g} % band is below the noise: widened to "
                f"±{self.band_pct:.3g} % ({NOISE_MULTIPLE:g}× the noise left after smoothing)")


def not_measured(settle_band: float = SETTLE_BAND) -> TransitionMetrics:
    nan = math.nan
    return TransitionMetrics(StepMetrics(*(nan,) * 6), 100.0 * settle_band, nan, nan, False, nan,
                             nan, 1, 0.0, NOT_MEASURED, nan)


def transition_metrics(t, y, *, t_step: float, y_initial: float, y_final: float,
                       settle_band: float = SETTLE_BAND) -> TransitionMetrics:
    """Noise-robust step metrics of ``y(t)`` (samples from ``t_step`` on; see the module
    docstring). ``settle_band`` is the stated band, a fraction of the change."""
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    change = abs(float(y_final) - float(y_initial))
    if not settle_band > 0.0:
        raise ValueError(f"settle_band must be > 0 (a fraction of the change), got {settle_band}")
    keep = (t >= t_step - 1e-9 * max(1.0, abs(t_step))) & np.isfinite(t) & np.isfinite(y)
    t, y = t[keep], y[keep]
    if not change > 0.0 or t.size == 0:
        return not_measured(settle_band)
    ts = float(np.median(np.diff(t))) if t.size >= 2 else 0.0
    sigma = noise_floor(y)
    stated = settle_band * change
    most = max(1, int(SEGMENT_WINDOW_FRACTION * t.size))
    target = min(SMOOTH_SHARE_OF_BAND * stated, OVERSHOOT_RESOLUTION * change) / NOISE_MULTIPLE
    window = window_for_noise(sigma, target, most)
    if window > 1:
        first = smooth(y, window, sigma)
        rise = step_metrics(t, first.y, t_step=t_step, y_initial=y_initial, y_final=y_final,
                            settle_band=settle_band, rise_limits=RISE_LIMITS).rise_time_s
        if math.isfinite(rise) and ts > 0:
            cap = int(RISE_WINDOW_FRACTION * rise / ts)
            cap = cap if cap % 2 else cap - 1
            window = min(window, cap) if cap >= MIN_WINDOW else 1
    sm = smooth(y, window, sigma)
    band = max(stated, NOISE_MULTIPLE * sm.noise_left)
    core = step_metrics(t, sm.y, t_step=t_step, y_initial=y_initial, y_final=y_final,
                        settle_band=band / change)
    raw = step_metrics(t, y, t_step=t_step, y_initial=y_initial, y_final=y_final,
                       settle_band=band / change)
    settling, status = core.settling_time_s, SETTLED
    span = float(t[-1] - t_step)
    if not math.isfinite(settling):
        status = NOT_SETTLED
    elif settling == 0.0:
        status = NEVER_LEFT
    elif span - settling < SETTLE_CONFIRM_FRACTION * span:
        settling, status = math.nan, NOT_SETTLED
    step = StepMetrics(core.rise_time_s, settling, core.overshoot_pct, core.peak,
                       core.peak_time_s, raw.steady_state_error)
    return TransitionMetrics(step, 100.0 * settle_band, band, 100.0 * band / change,
                             band > stated * (1.0 + 1e-12), sigma, sm.noise_left, sm.window,
                             sm.window * ts if sm.window > 1 else 0.0, status,
                             100.0 * NOISE_MULTIPLE * sm.noise_left / change)
