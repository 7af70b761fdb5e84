"""Control laws: the intelligent P/PI/PD/PID laws and a classic PID baseline.

With the error ``e = y − r``, the estimate F̂ of the ultra-local model ``y^(m) = F + alpha·u``
and the integral state ``I = ∫e dt`` (rectangle rule, ``I_k = I_{k−1} + Ts·e_k``):

=====  =====  ============================================================
law    order  requested actuator value
=====  =====  ============================================================
iP     1      ``u = (−F̂ + r'  − Kp·e                 + b) / alpha``
iPI    1      ``u = (−F̂ + r'  − Kp·e − Ki·I          + b) / alpha``
iPD    2      ``u = (−F̂ + r'' − Kp·e          − Kd·e' + b) / alpha``
iPID   2      ``u = (−F̂ + r'' − Kp·e − Ki·I − Kd·e' + b) / alpha``
PID    —      ``u = u0 − (Kp·e + Ki·I + Kd·y') + b``
=====  =====  ============================================================

With F̂ = F the intelligent laws impose linear error dynamics whose coefficients are the gains
(:mod:`rigloop.control.tuning`). A law ignores the gains it does not use (iP ignores Ki, Kd).

The PID baseline works on the same ``e = y − r`` (hence the minus sign: a positive process gain
needs positive gains) and takes its derivative **on the measurement**, ``y'`` instead of
``e'``, so that a quick setpoint change gives no derivative kick. ``u0`` is the operating-point
feed-forward. Negative PID gains serve a reverse-acting process.

Anti-windup (the law knows the actuator limits and the value the device last applied):

* ``conditional`` (default): the integral is not advanced on a sample where the request is
  beyond a limit and the new integration would push it further out.
* ``back-calculation``: ``I`` also moves by ``(Ts/Tt)·(u_request − u_applied)`` expressed in
  integral units, which pulls the request back to what the actuator delivers; the tracking time
  is ``Tt = √(Ti·Td)`` with ``Ti = Kp/Ki``, ``Td = Kd/Kp`` (``Tt = Ti`` when Kd = 0; common
  practice), never below one sample period.
* ``none``: plain integration.

Bumpless changes (:meth:`ControlLaw.retune`): the request just after a change equals the request
just before, for the same inputs. A law with an integral absorbs the jump into ``I``. A law
without one keeps a bias ``b`` that absorbs the jump; for the intelligent laws ``b`` then decays
as ``exp(−λ·t)`` with λ the decay rate of the slowest closed-loop mode (``Kp`` for order 1; for
order 2 the real part of the slower root of ``s² + Kd·s + Kp``), so the change fades in at the
pace the loop was designed for. For the PID baseline without an integral, ``b`` is a manual
reset and stays.

A non-finite input gives a non-finite request for that sample (the shaper and the supervisor act
on it) but never enters the integral or the bias.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

#: Law names.
LAWS = ("iP", "iPI", "iPD", "iPID", "PID")
#: Model order each intelligent law is built on.
MODEL_ORDER = {"iP": 1, "iPI": 1, "iPD": 2, "iPID": 2}
#: Anti-windup modes.
ANTI_WINDUP_MODES = ("conditional", "back-calculation", "none")

_WITH_INTEGRAL = ("iPI", "iPID", "PID")
_WITH_DERIVATIVE = ("iPD", "iPID", "PID")


def _number(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ValueError(f"{name} must be a finite number, got {value!r}")
    return float(value)


@dataclass(frozen=True)
class LawGains:
    """The law and its gains (validated on construction)."""

    law: str = "iP"
    alpha: float = 1.0
    kp: float = 1.0
    ki: float = 0.0
    kd: float = 0.0
    u0: float = 0.0

    def __post_init__(self) -> None:
        if self.law not in LAWS:
            raise ValueError(f"law {self.law!r} is unknown; use one of {', '.join(LAWS)}")
        for name in ("alpha", "kp", "ki", "kd", "u0"):
            _number(name, getattr(self, name))
        if self.alpha == 0:
            raise ValueError("alpha must not be 0 (the law divides by it); use a value of the size of y^(m)/u")
        if self.law != "PID":
            for name in ("kp", "ki", "kd"):
                if getattr(self, name) < 0:
                    raise ValueError(
                        f"{name} = {getattr(self, name)!r} is negative; law {self.law} needs gains >= 0 "
                        "(the sign of alpha sets the direction of action)"
                    )

    @property
    def intelligent(self) -> bool:
        """True for iP/iPI/iPD/iPID (the laws that use F̂)."""
        return self.law != "PID"

    @property
    def uses_integral(self) -> bool:
        return self.law in _WITH_INTEGRAL and self.ki != 0.0

    @property
    def uses_derivative(self) -> bool:
        return self.law in _WITH_DERIVATIVE and self.kd != 0.0

    def bias_decay_rate(self) -> float:
        """λ of the bias term (1/s): the slowest closed-loop mode; 0 for the PID baseline."""
        if not self.intelligent:
            return 0.0
        if MODEL_ORDER[self.law] == 1:
            return max(self.kp, 0.0)
        kd = self.kd if self.law in _WITH_DERIVATIVE else 0.0
        disc = kd * kd / 4.0 - self.kp
        return max(kd / 2.0 - math.sqrt(disc), 0.0) if disc >= 0 else kd / 2.0

    def tracking_time(self, ts: float) -> float:
        """Back-calculation tracking time Tt (s), at least one sample period."""
        if not self.uses_integral or self.kp == 0:
            return ts
        ti = abs(self.kp / self.ki)
        td = abs(self.kd / self.kp) if self.law in _WITH_DERIVATIVE else 0.0
        tt = math.sqrt(ti * td) if td > 0 else ti
        return max(tt, ts)


class ControlLaw:
    """One law with its state (integral, bias, last request) and its anti-windup."""

    def __init__(
        self,
        gains: LawGains,
        ts: float,
        u_min: float,
        u_max: float,
        anti_windup: str = "conditional",
    ) -> None:
        self.ts = _number("ts", ts)
        if self.ts <= 0:
            raise ValueError(f"ts must be > 0 s, got {ts!r}")
        self.set_limits(u_min, u_max)
        if anti_windup not in ANTI_WINDUP_MODES:
            raise ValueError(
                f"anti_windup {anti_windup!r} is unknown; use one of {', '.join(ANTI_WINDUP_MODES)}"
            )
        self.anti_windup = anti_windup
        self.integral = 0.0
        self.bias = 0.0
        self.last_request = math.nan
        self._has_inputs = False
        self._f = self._e = self._de = self._dy = self._rd = math.nan
        self._apply_gains(gains)

    # -- configuration -------------------------------------------------------------------
    def set_limits(self, u_min: float, u_max: float) -> None:
        """Actuator range the anti-windup works against."""
        u_min = _number("u_min", u_min)
        u_max = _number("u_max", u_max)
        if not u_min < u_max:
            raise ValueError(f"u_min ({u_min}) must be below u_max ({u_max})")
        self.u_min, self.u_max = u_min, u_max

    def _apply_gains(self, gains: LawGains) -> None:
        self.gains = gains
        self._intelligent = gains.intelligent
        self._scale = 1.0 / gains.alpha if gains.intelligent else 1.0
        self._kp = gains.kp
        self._ki = gains.ki if gains.law in _WITH_INTEGRAL else 0.0
        self._kd = gains.kd if gains.law in _WITH_DERIVATIVE else 0.0
        self._u0 = gains.u0
        self._uses_integral = gains.uses_integral
        self._g_integral = -self._ki * self._scale  # ∂u/∂I
        self._decay = math.exp(-gains.bias_decay_rate() * self.ts)
        self._tracking_gain = self.ts / gains.tracking_time(self.ts)

    # -- evaluation ----------------------------------------------------------------------
    def evaluate(
        self,
        f_hat: float,
        e: float,
        de: float,
        dy: float,
        ref_deriv: float,
        integral: float | None = None,
        bias: float | None = None,
    ) -> float:
        """The request for these inputs and this state, without changing any state.

        ``ref_deriv`` is r' (order 1) or r'' (order 2); ``de`` is e', ``dy`` is y'.
        """
        i = self.integral if integral is None else integral
        b = self.bias if bias is None else bias
        if self._intelligent:
            num = -f_hat + ref_deriv - self._kp * e + b
            if self._ki != 0.0:
                num -= self._ki * i
            if self._kd != 0.0:
                num -= self._kd * de
            return num * self._scale
        u = self._u0 - self._kp * e + b
        if self._ki != 0.0:
            u -= self._ki * i
        if self._kd != 0.0:
            u -= self._kd * dy
        return u

    def output(self, f_hat: float, e: float, de: float, dy: float, ref_deriv: float, u_applied: float) -> float:
        """Advance the state by one sample and return the request."""
        b = self.bias * self._decay
        i_old = self.integral
        i_new = i_old
        if self._uses_integral and math.isfinite(e):
            i_new = i_old + self.ts * e
            if (
                self.anti_windup == "back-calculation"
                and math.isfinite(self.last_request)
                and math.isfinite(u_applied)
            ):
                i_new -= self._tracking_gain * (self.last_request - u_applied) / self._g_integral
        u = self.evaluate(f_hat, e, de, dy, ref_deriv, i_new, b)
        if self.anti_windup == "conditional" and i_new != i_old:
            push = self._g_integral * (i_new - i_old)  # change of u caused by integrating
            if (u > self.u_max and push > 0) or (u < self.u_min and push < 0):
                i_new = i_old
                u = self.evaluate(f_hat, e, de, dy, ref_deriv, i_new, b)
        self.integral = i_new
        self.bias = b
        self.last_request = u
        self._f, self._e, self._de, self._dy, self._rd = f_hat, e, de, dy, ref_deriv
        self._has_inputs = True
        return u

    # -- changes -------------------------------------------------------------------------
    def retune(
        self,
        gains: LawGains,
        *,
        f_hat: float | None = None,
        e: float | None = None,
        de: float | None = None,
        dy: float | None = None,
        ref_deriv: float | None = None,
    ) -> None:
        """Switch to ``gains`` without a jump in the request.

        The request of the last inputs under the old gains is kept equal under the new gains,
        where some inputs may change with the switch (a new estimator gives a new F̂, a new model
        order takes r'' instead of r', a new input delay predicts another e): pass those as
        keywords.
        """
        if not self._has_inputs:
            self._apply_gains(gains)
            return
        u_before = self.evaluate(self._f, self._e, self._de, self._dy, self._rd)
        self._apply_gains(gains)
        if f_hat is not None:
            self._f = f_hat
        if e is not None:
            self._e = e
        if de is not None:
            self._de = de
        if dy is not None:
            self._dy = dy
        if ref_deriv is not None:
            self._rd = ref_deriv
        if not math.isfinite(u_before):
            return
        if self._uses_integral:
            u_new = self.evaluate(self._f, self._e, self._de, self._dy, self._rd, self.integral, 0.0)
            if math.isfinite(u_new):
                self.bias = 0.0
                self.integral += (u_before - u_new) / self._g_integral
        else:
            u_new = self.evaluate(self._f, self._e, self._de, self._dy, self._rd, 0.0, self.bias)
            if math.isfinite(u_new):
                self.integral = 0.0
                self.bias += (u_before - u_new) / self._scale

    def request_for_last_inputs(self) -> float:
        """The request the law as configured now gives for the last inputs (nan if none)."""
        if not self._has_inputs:
            return math.nan
        return self.evaluate(self._f, self._e, self._de, self._dy, self._rd)

    def remember(self, f_hat: float, e: float, de: float, dy: float, ref_deriv: float) -> None:
        """Take these as the last inputs (what :meth:`retune` keeps the request continuous for)."""
        self._f, self._e, self._de, self._dy, self._rd = f_hat, e, de, dy, ref_deriv
        self._has_inputs = True

    def set_anti_windup(self, mode: str) -> None:
        if mode not in ANTI_WINDUP_MODES:
            raise ValueError(f"anti_windup {mode!r} is unknown; use one of {', '.join(ANTI_WINDUP_MODES)}")
        self.anti_windup = mode

    def reset(self, u_hold: float = math.nan) -> None:
        """Clear the integral and the bias; ``u_hold`` is taken as the last request."""
        self.integral = 0.0
        self.bias = 0.0
        self.last_request = u_hold
        self._has_inputs = False
        self._f = self._e = self._de = self._dy = self._rd = math.nan
