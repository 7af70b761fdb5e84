"""The estimation step of the controller: F̂ and ŷ' as dot products over one shared window.

One implementation: the weights come from :mod:`rigloop.control.estimators` (the same functions
the standalone :class:`~rigloop.control.estimators.Estimator` uses) and the derivative kernel of
:mod:`rigloop.control.kernels`; a known input delay adds the prediction of
:mod:`rigloop.control.delay`. :func:`law_inputs` gives what the law acts on.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from rigloop.control.delay import DelayPredictor
from rigloop.control.estimators import delay_intervals, make_kernel, samples_needed, window_weights
from rigloop.control.kernels import MAX_WINDOW_SAMPLES, derivative_kernel
from rigloop.control.ring import interleave

if TYPE_CHECKING:
    from rigloop.control.controller import ControlParams


class Estimation:
    """The weights one parameter set needs, laid over the controller's shared sample window.

    F̂ and ŷ' are each one dot product of a weight vector with the interleaved ``(y, u)``
    window; the weights are padded with zeros when the window is longer than they need.
    """

    __slots__ = ("params", "order", "window", "derivative_window", "f_needed", "d_needed",
                 "samples_needed", "delay", "predictor", "_kernel", "_dk", "_wy", "_wu", "wf", "wd")

    def __init__(self, params: ControlParams, ts: float) -> None:
        self.params = params
        self.order = params.order
        n = params.window_samples(ts)
        self._kernel = make_kernel(params.estimator, params.order, n, ts)
        self.window = params.order if params.estimator == "one-step" else n
        self.derivative_window = params.derivative_window_samples(ts)
        self._dk = derivative_kernel(self.derivative_window, ts)
        self.delay = delay_intervals(params.input_delay_s, ts)
        self.f_needed = samples_needed(self._kernel, self.delay)
        if self.f_needed > MAX_WINDOW_SAMPLES:
            raise ValueError(f"input_delay_s = {params.input_delay_s} s with this window needs "
                             f"{self.f_needed} samples; the limit is {MAX_WINDOW_SAMPLES}")
        self.d_needed = self.derivative_window + 1
        # The intelligent laws act on the output predicted over a known delay (control/delay.py).
        self.predictor = (DelayPredictor(params.order, self.delay, ts)
                          if self.delay > 0.0 and params.law != "PID" else None)
        p_needed = self.predictor.samples_needed if self.predictor is not None else 0
        self.samples_needed = max(self.f_needed, self.d_needed, p_needed)

    def fit(self, length: int) -> None:
        """Lay the weights over a window of ``length`` samples (>= samples_needed)."""
        self._wy, self._wu = window_weights(self._kernel, length, self.delay)
        self.wd = interleave(self._dk, None, length)
        if self.predictor is not None:
            self.predictor.fit(length)
        self.set_alpha(self.params.alpha)

    def set_alpha(self, alpha: float) -> None:
        self.wf = self._wy - alpha * self._wu


def law_inputs(est: Estimation, view, f_hat: float, dy: float, y: float, r: float, dr: float,
                ddr: float) -> tuple[float, float, float, float]:
    """(e, e', y', r^(m)) the law acts on: measured, or predicted over a known input delay."""
    p = est.predictor
    if p is None:
        return y - r, dy - dr, dy, dr if est.order == 1 else ddr
    y_tau, dy_tau = p.output(view, est.params.alpha, f_hat, y, dy)
    r_tau, dr_tau, ddr_tau = p.reference(r, dr, ddr)
    if est.order == 1:
        return y_tau - r_tau, dy - dr, dy, dr_tau
    return y_tau - r_tau, dy_tau - dr_tau, dy_tau, ddr_tau
