"""The controller the engine and the offline runner call once per sample.

It joins an F estimator, an algebraic derivative of the measurement and a law behind one
:meth:`Controller.step`, and owns the warm-up and the bumpless parameter changes. Both
estimates read one shared window of the newest ``(y, u_applied)`` samples
(:class:`rigloop.control.ring.PairWindow`): a sample costs two dot products and the law.

Per sample k the caller passes the measurement ``y_k``, the actuator value the device applied
from tick k on (``u_applied``, the truth from the device, never the host's intent) and the
reference ``r, r', r''`` at the sample's time. The estimators take ``(y_k, u_applied_k)``; the
law gets ``e = y − r``, ``e' = ŷ' − r'`` (the algebraic derivative of y, the analytic r') and F̂.
Two refinements sit on that path: the output passes through the quantization band first
(:mod:`rigloop.control.quantization`: a still, quantized output does not dither the law), and
with a known input delay the estimate pairs y with the delayed input and the intelligent laws
act on the output predicted over the delay (:mod:`rigloop.control.delay`). ``e`` as published
stays the measured ``y − r``.

Warm-up: until both the F estimator and the derivative have a full window, ``ready`` is False
and :meth:`step` returns ``u_hold`` (the integral does not run).

Parameter changes (:meth:`update_params`) are validated first and leave everything unchanged
when invalid. Gains and alpha apply at once, bumpless (see :mod:`rigloop.control.laws`). A new
estimator kind, window, derivative window or model order gives new weights over the samples
the controller already keeps; if they need more samples than it holds, the window grows and the
current configuration keeps running (``switch_pending`` is True, ``pending_params`` holds the
new values) until it is full, and the switch then happens bumplessly within a sample — the loop
never loses its estimate. During warm-up a change applies at once and the warm-up goes on
with the samples already kept.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping
from dataclasses import asdict, dataclass, fields, replace

from rigloop.control.estimation import Estimation, law_inputs
from rigloop.control.estimators import ESTIMATOR_KINDS
from rigloop.control.kernels import MAX_WINDOW_SAMPLES
from rigloop.control.laws import ANTI_WINDUP_MODES, LAWS, MODEL_ORDER, ControlLaw, LawGains
from rigloop.control.quantization import QuantizationBand
from rigloop.control.ring import PairWindow


def _is_number(value: object) -> bool:
    return isinstance(value, numbers.Real) and not isinstance(value, bool) and math.isfinite(float(value))


@dataclass(frozen=True)
class ControlParams:
    """Everything that defines the control law; validated on construction (ValueError)."""

    law: str = "iP"  # iP | iPI | iPD | iPID | PID
    order: int = 1  # 1 or 2 (iPD/iPID need 2, iP/iPI need 1; PID: order of the F̂ shown)
    alpha: float = 1.0
    kp: float = 1.0
    ki: float = 0.0
    kd: float = 0.0
    estimator: str = "algebraic"  # algebraic | averaging | one-step
    window_s: float = 0.05
    derivative_window_s: float | None = None  # None -> same as window_s
    anti_windup: str = "conditional"  # conditional | back-calculation | none
    pid_u0: float = 0.0  # PID baseline bias (operating-point feed-forward)
    input_delay_s: float = 0.0  # known input delay of the ultra-local model (estimators.py)
    quantization_band: float = 1.0  # hysteresis on y in counts of the resolution (quantization.py)
    resolution: float | None = None  # the output's resolution; None: measured from the readings

    def __post_init__(self) -> None:
        if self.law not in LAWS:
            raise ValueError(f"law = {self.law!r} is unknown; use one of {', '.join(LAWS)}")
        if not isinstance(self.order, numbers.Integral) or isinstance(self.order, bool) or self.order not in (1, 2):
            raise ValueError(f"order = {self.order!r} is not allowed; use 1 or 2")
        needed = MODEL_ORDER.get(self.law)
        if needed is not None and self.order != needed:
            raise ValueError(
                f"order = {self.order} does not fit law = {self.law}: {self.law} is built on the "
                f"order-{needed} model; set order: {needed}"
            )
        for name in ("alpha", "kp", "ki", "kd", "window_s", "pid_u0"):
            if not _is_number(getattr(self, name)):
                raise ValueError(f"{name} = {getattr(self, name)!r} is not a finite number")
        if self.alpha == 0:
            raise ValueError("alpha = 0 is not allowed (the law divides by it); give the size of y^(m) per unit u")
        if self.law != "PID":
            for name in ("kp", "ki", "kd"):
                if getattr(self, name) < 0:
                    raise ValueError(
                        f"{name} = {getattr(self, name)!r} is negative; law {self.law} needs gains >= 0 "
                        "(the sign of alpha sets the direction of action)"
                    )
        if self.estimator not in ESTIMATOR_KINDS:
            raise ValueError(f"estimator = {self.estimator!r} is unknown; use one of {', '.join(ESTIMATOR_KINDS)}")
        if self.window_s <= 0:
            raise ValueError(f"window_s = {self.window_s!r} must be > 0 s")
        if self.derivative_window_s is not None:
            if not _is_number(self.derivative_window_s) or self.derivative_window_s <= 0:
                raise ValueError(
                    f"derivative_window_s = {self.derivative_window_s!r} must be a number > 0 s, "
                    "or None to use window_s"
                )
        if not _is_number(self.input_delay_s) or self.input_delay_s < 0:
            raise ValueError(f"input_delay_s = {self.input_delay_s!r} must be a number >= 0 s "
                             "(0: no delay in the model)")
        if self.anti_windup not in ANTI_WINDUP_MODES:
            raise ValueError(
                f"anti_windup = {self.anti_windup!r} is unknown; use one of {', '.join(ANTI_WINDUP_MODES)}"
            )
        if not _is_number(self.quantization_band) or self.quantization_band < 0:
            raise ValueError(f"quantization_band = {self.quantization_band!r} must be a number >= 0 "
                             "(counts of the output's resolution; 0 = off)")
        if self.resolution is not None and (not _is_number(self.resolution) or self.resolution < 0):
            raise ValueError(f"resolution = {self.resolution!r} must be a number >= 0 (0: a continuous "
                             "reading), or None to measure it from the readings")
        # plain Python numbers from here on (numpy scalars, ints from YAML)
        for name in ("alpha", "kp", "ki", "kd", "window_s", "pid_u0", "input_delay_s",
                     "quantization_band"):
            object.__setattr__(self, name, float(getattr(self, name)))
        if self.resolution is not None:
            object.__setattr__(self, "resolution", float(self.resolution))
        object.__setattr__(self, "order", int(self.order))
        if self.derivative_window_s is not None:
            object.__setattr__(self, "derivative_window_s", float(self.derivative_window_s))

    @property
    def gains(self) -> LawGains:
        return LawGains(self.law, self.alpha, self.kp, self.ki, self.kd, self.pid_u0)

    def window_samples(self, ts: float) -> int:
        """F-estimator window N in sample intervals: ``max(2, round(window_s/ts))`` (3 for order 2)."""
        return _samples(self.window_s, ts, 2 if self.order == 1 else 3, "window_s")

    def derivative_window_samples(self, ts: float) -> int:
        """Derivative window in sample intervals: ``max(2, round(derivative_window_s/ts))``."""
        w = self.window_s if self.derivative_window_s is None else self.derivative_window_s
        return _samples(w, ts, 2, "derivative_window_s" if self.derivative_window_s is not None else "window_s")

    def estimation_samples(self, ts: float) -> int:
        """Samples the F estimate reads, the input delay included (ValueError over the limit)."""
        return Estimation(self, ts).f_needed

    def as_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_mapping(cls, mapping: Mapping) -> ControlParams:
        """Build from the ``control:`` mapping of a config.

        Accepts the field names above, and ``estimator`` either as a name or as a mapping
        ``{kind, window_s}``; ignores ``output`` (the channel name, not a law parameter).
        """
        data = dict(mapping)
        data.pop("output", None)
        est = data.get("estimator")
        if isinstance(est, Mapping):
            est = dict(est)
            if "kind" in est:
                data["estimator"] = est.pop("kind")
            else:
                data.pop("estimator")
            if "window_s" in est:
                data["window_s"] = est.pop("window_s")
            if est:
                raise ValueError(f"estimator.{sorted(est)[0]} is not a control parameter; allowed: kind, window_s")
        _check_keys(data)
        return cls(**data)


_FIELD_NAMES = tuple(f.name for f in fields(ControlParams))


def _check_keys(data: Mapping) -> None:
    for key in data:
        if key not in _FIELD_NAMES:
            raise ValueError(f"{key!r} is not a control parameter; allowed: {', '.join(_FIELD_NAMES)}")


def _samples(seconds: float, ts: float, minimum: int, name: str) -> int:
    n = max(minimum, int(round(seconds / ts)))
    if n > MAX_WINDOW_SAMPLES:
        raise ValueError(
            f"{name} = {seconds} s is {n} samples at ts = {ts} s; the limit is {MAX_WINDOW_SAMPLES} samples"
        )
    return n


_ESTIMATION_FIELDS = ("order", "estimator", "window_s", "derivative_window_s", "input_delay_s")


class Controller:
    """Estimator + derivative + law behind one allocation-free :meth:`step`."""

    def __init__(self, params: ControlParams, ts: float, u_min: float, u_max: float, u_hold: float) -> None:
        if not isinstance(params, ControlParams):
            raise TypeError(f"params must be a ControlParams, got {type(params).__name__}")
        if not _is_number(ts) or ts <= 0:
            raise ValueError(f"ts = {ts!r} must be a finite number > 0 s")
        for name, value in (("u_min", u_min), ("u_max", u_max), ("u_hold", u_hold)):
            if not _is_number(value):
                raise ValueError(f"{name} = {value!r} is not a finite number")
        if not u_min < u_max:
            raise ValueError(f"u_min = {u_min} must be below u_max = {u_max}")
        if not u_min <= u_hold <= u_max:
            raise ValueError(f"u_hold = {u_hold} must lie within [u_min, u_max] = [{u_min}, {u_max}]")
        self.ts = float(ts)
        self.u_min, self.u_max = float(u_min), float(u_max)
        self.u_hold = float(u_hold)
        self.params = params
        self._pending: Estimation | None = None
        self._start(params)

    def _start(self, params: ControlParams) -> None:
        """Fresh window, estimation and law for ``params`` (warm-up)."""
        self.params = params
        self._est = Estimation(params, self.ts)
        self._ring = PairWindow(self._est.samples_needed)
        self._est.fit(self._ring.length)
        self._law = ControlLaw(params.gains, self.ts, self.u_min, self.u_max, params.anti_windup)
        self._law.reset(self.u_hold)
        self._band = QuantizationBand(params.quantization_band, params.resolution)
        self._y = self._r = self._dr = self._ddr = math.nan
        self._clear_outputs()

    # -- read-only views -------------------------------------------------------------------
    @property
    def window(self) -> int:
        """F-estimator window N in sample intervals."""
        return self._est.window

    @property
    def derivative_window(self) -> int:
        """Derivative window in sample intervals."""
        return self._est.derivative_window

    @property
    def warmup_samples(self) -> int:
        """Samples needed after a reset before the law runs."""
        return self._est.samples_needed

    @property
    def switch_pending(self) -> bool:
        return self._pending is not None

    @property
    def pending_params(self) -> ControlParams | None:
        return None if self._pending is None else self._pending.params

    @property
    def bias(self) -> float:
        """The law's bumpless-transfer bias (see :mod:`rigloop.control.laws`)."""
        return self._law.bias

    def _clear_outputs(self) -> None:
        self.f_hat = math.nan
        self.e = math.nan
        self.de = math.nan
        self.dy = math.nan
        self.integral = 0.0
        self.ready = False
        self.u = self.u_hold

    # -- the hot path ----------------------------------------------------------------------
    def step(self, y: float, u_applied: float, r: float, dr: float, ddr: float) -> float:
        """Take sample k and return the requested (unshaped) actuator value.

        Returns ``u_hold`` during warm-up. After the call, ``f_hat``, ``e``, ``de``, ``dy``,
        ``integral``, ``ready`` and ``u`` describe this sample.
        """
        measured = y
        y = self._band.filter(y)      # the law and the estimates see the output through the band
        ring = self._ring
        ring.push(y, u_applied)
        self._y = y
        self._r = r
        self._dr = dr
        self._ddr = ddr
        if self._pending is not None and ring.count >= self._pending.samples_needed:
            self._switch(at_sample=True)
            ring = self._ring
        est = self._est
        count = ring.count
        view = ring.view()
        self.e = measured - r
        if count >= est.f_needed:
            self.f_hat = float(est.wf.dot(view))
        if count >= est.d_needed:
            self.dy = float(est.wd.dot(view))
            self.de = self.dy - dr
        if count < est.samples_needed:
            self.ready = False
            self.u = self.u_hold
            return self.u
        self.ready = True
        law_e, law_de, law_dy, law_rd = law_inputs(est, view, self.f_hat, self.dy, y, r, dr, ddr)
        law_e = self._band.error(law_e)
        self.u = self._law.output(self.f_hat, law_e, law_de, law_dy, law_rd, u_applied)
        self.integral = self._law.integral
        return self.u

    def request_for_last_sample(self) -> float:
        """What the law, as configured now, asks for the last sample's inputs.

        Right after a bumpless change this equals :attr:`u`; nan before the law has run.
        """
        return self._law.request_for_last_inputs()

    # -- changes ---------------------------------------------------------------------------
    def update_params(self, **changes) -> None:
        """Change parameters while running, bumplessly (module docstring).

        Setting ``law`` to an intelligent law without giving ``order`` also sets the order that
        law needs. Invalid changes raise ValueError and change nothing.
        """
        _check_keys(changes)
        base = self._pending.params if self._pending is not None else self.params
        if "law" in changes and "order" not in changes and changes["law"] in MODEL_ORDER:
            changes = {**changes, "order": MODEL_ORDER[changes["law"]]}
        new = replace(base, **changes)
        candidate = Estimation(new, self.ts)  # validates the windows against ts
        rebuild = any(getattr(new, k) != getattr(self.params, k) for k in _ESTIMATION_FIELDS)
        if not rebuild:
            # gains, alpha, anti-windup: at once (a pending switch is superseded)
            self._pending = None
            if self._ring.length > self._est.samples_needed:
                self._ring = self._ring.resized(self._est.samples_needed)
                self._est.fit(self._ring.length)
            self._apply_in_place(new)
            return
        if candidate.samples_needed > self._ring.length:
            self._ring = self._ring.resized(candidate.samples_needed)
            self._est.fit(self._ring.length)
        candidate.fit(self._ring.length)
        self._pending = candidate
        if not self.ready or self._ring.count >= candidate.samples_needed:
            self._switch(at_sample=False)  # during warm-up: at once, the warm-up goes on

    def _apply_in_place(self, new: ControlParams) -> None:
        self._band.band = new.quantization_band
        if new.resolution != self._band.resolution:
            self._band.resolution = new.resolution
        self.params = new
        self._est.params = new
        self._est.set_alpha(new.alpha)
        self._law.set_anti_windup(new.anti_windup)
        if self.ready:
            self.f_hat = float(self._est.wf.dot(self._ring.view()))
            self._law.retune(new.gains, f_hat=self.f_hat)
        else:
            self._law.retune(new.gains)

    def _switch(self, at_sample: bool) -> None:
        """Make the pending estimation active, bumplessly.

        The law's request for the current inputs is kept: with ``at_sample`` (inside
        :meth:`step`, the new sample already in the window) the law first takes the old
        estimation's inputs of this sample; otherwise it keeps those of the last sample, and
        the new estimation is evaluated on the same window.
        """
        new, old = self._pending, self._est
        assert new is not None
        self._pending = None
        view = self._ring.view()
        y, r, dr, ddr = self._y, self._r, self._dr, self._ddr
        if at_sample:
            old_f, old_dy = float(old.wf.dot(view)), float(old.wd.dot(view))
            self._law.remember(old_f, *law_inputs(old, view, old_f, old_dy, y, r, dr, ddr))
        f_hat = float(new.wf.dot(view))
        dy = float(new.wd.dot(view))
        self._est = new
        self.params = new.params
        self._law.set_anti_windup(new.params.anti_windup)
        law_e, law_de, law_dy, law_rd = law_inputs(new, view, f_hat, dy, y, r, dr, ddr)
        self._law.retune(new.params.gains, f_hat=f_hat, e=law_e, de=law_de, dy=law_dy,
                         ref_deriv=law_rd)
        if not at_sample:
            count = self._ring.count
            self.f_hat = f_hat if count >= new.f_needed else math.nan
            self.dy = dy if count >= new.d_needed else math.nan
            self.de = self.dy - self._dr
        if self._ring.length > new.samples_needed:  # shrink: a one-off copy, then shorter dots
            self._ring = self._ring.resized(new.samples_needed)
            new.fit(self._ring.length)

    def reset(self, u_hold: float | None = None) -> None:
        """Back to warm-up: window, integral and bias cleared.

        A pending parameter switch takes effect now. ``u_hold`` (if given) becomes the value
        returned during warm-up.
        """
        if u_hold is not None:
            if not _is_number(u_hold) or not self.u_min <= u_hold <= self.u_max:
                raise ValueError(f"u_hold = {u_hold!r} must be a number within [{self.u_min}, {self.u_max}]")
            self.u_hold = float(u_hold)
        params = self._pending.params if self._pending is not None else self.params
        self._pending = None
        self._start(params)
