"""The safety supervisor: decides, sample by sample, whether the rig must stop.

It only *decides*; the loop acts (sends STOP at once, shapes the ramp, records the trip). Every
check returns ``None`` or a :class:`~rigloop.engine.records.Trip` naming the cause, the device
time, the channel, the offending value and the limit, so the recording says exactly why.
"""

from __future__ import annotations

import math
from collections import deque

from rigloop.control.kernels import slope_weights
from rigloop.engine.plausibility import (
    RATE_NOISE_SIGMAS,
    RATE_WINDOW_INTERVALS,
    AppliedCheck,
    NoiseMeter,
    ResponseMonitor,
    idle_samples_needed,
    rate_noise_gain,
)
from rigloop.engine.records import Trip
from rigloop.protocol.messages import Status

_FAULT = int(Status.FAULT)          # plain ints: IntFlag arithmetic costs microseconds per sample
_WATCHDOG = int(Status.WATCHDOG)


class _Burst:
    """More than ``max_count`` events within ``window_s`` seconds?"""

    def __init__(self, max_count: int, window_s: float):
        self.max_count = int(max_count)
        self.window_s = float(window_s)
        self._times: deque[float] = deque(maxlen=self.max_count + 1)

    def add(self, now: float, n: int = 1) -> bool:
        for _ in range(min(n, self.max_count + 1)):
            self._times.append(now)
        return len(self._times) > self.max_count and now - self._times[0] <= self.window_s

    def count(self, now: float) -> int:
        return sum(1 for t in self._times if now - t <= self.window_s)


class ChannelGuard:
    """Limits of one channel, with the last samples its rate of change is estimated from."""

    __slots__ = ("name", "unit", "index", "min", "max", "rate_max", "frozen_s", "stop",
                 "_last_v", "_last_t", "_same_since", "_far_since", "_u_ref", "_ring", "_n")

    def __init__(self, name, unit, index, lim):
        self.name = name
        self.unit = unit
        self.index = index
        self.min = _opt(getattr(lim, "min", None))
        self.max = _opt(getattr(lim, "max", None))
        self.rate_max = _opt(getattr(lim, "rate_max", None))
        self.frozen_s = _opt(getattr(lim, "frozen_s", None))
        self.stop = getattr(lim, "stop", "immediate") or "immediate"
        self._last_v = None
        self._last_t = None
        self._same_since = None
        self._far_since = None
        self._u_ref = None
        self._ring: deque[float] = deque(maxlen=RATE_WINDOW_INTERVALS + 1)
        self._n = 0


def _opt(x):
    return None if x is None else float(x)


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def _reference_span(cfg) -> float | None:
    from rigloop.config.derived import _reference_extremes

    ext = _reference_extremes(cfg)
    return (ext[1] - ext[0]) or None if ext is not None else None


class Supervisor:
    """Limits, rate limits, frozen sensors, staleness, link-error and overrun bursts, duration."""

    def __init__(self, cfg):
        self.cfg = cfg
        lim = cfg.limits
        self.period_s = 1.0 / cfg.device.rate_hz
        self.guards: list[ChannelGuard] = []
        names = [c.name for c in cfg.channels]
        units = {c.name: c.unit for c in cfg.channels}
        for name, chl in (lim.channels or {}).items():
            if name in names:
                self.guards.append(ChannelGuard(name, units[name], names.index(name), chl))
        self.channel_names = names
        self.stale_s = lim.stale_periods * self.period_s
        self.max_duration_s = lim.max_duration_s
        self._link = _Burst(lim.link_errors_max, lim.link_errors_window_s)
        self._overruns = _Burst(lim.overruns_max, lim.overruns_window_s)
        self._last_rejected = 0
        self.last_values = None
        self._rate_w = [float(c) for c in slope_weights(RATE_WINDOW_INTERVALS, self.period_s)]
        self._u_now = float(cfg.actuator.safe)
        self._safe = float(cfg.actuator.safe)
        self._du_far = 0.25 * abs(cfg.actuator.max - cfg.actuator.min)
        self._feedback_setup(cfg)

    # -- per-sample checks -----------------------------------------------------------------
    def check_sample(self, t: float, values, running: bool) -> Trip | None:
        """Non-finite channels, min/max, rate of change and frozen channels, in that order."""
        self.last_values = values
        for i, v in enumerate(values):
            if not math.isfinite(v):
                name = self.channel_names[i]
                return Trip("non-finite", f"channel {name} reported {v}", t=t, channel=name, value=v)
        for g in self.guards:
            v = values[g.index]
            if g.max is not None and v > g.max:
                return Trip("limit", f"{g.name} above its maximum [{g.unit}]", t=t, channel=g.name, value=v,
                            limit=g.max, stop=g.stop)
            if g.min is not None and v < g.min:
                return Trip("limit", f"{g.name} below its minimum [{g.unit}]", t=t, channel=g.name, value=v,
                            limit=g.min, stop=g.stop)
            if g.rate_max is not None:
                g._ring.append(v)
                if len(g._ring) > RATE_WINDOW_INTERVALS:
                    rate = sum(c * y for c, y in zip(self._rate_w, g._ring))
                    if abs(rate) > g.rate_max:
                        return Trip("rate-limit",
                                    f"{g.name} changing faster than its rate limit [{g.unit}/s] "
                                    f"(slope over the last {RATE_WINDOW_INTERVALS + 1} samples)",
                                    t=t, channel=g.name, value=rate, limit=g.rate_max, stop=g.stop)
            if g.frozen_s is not None and g._last_t is not None and t > g._last_t:
                trip = self._frozen_channel(g, t, v, running)
                if trip is not None:
                    return trip
            g._last_v, g._last_t = v, t
        return None

    def _frozen_channel(self, g: ChannelGuard, t: float, v: float, running: bool) -> Trip | None:
        """A channel repeating its value exactly for frozen_s after the command moved far from
        where it was when the value began to repeat (a quantized reading at rest repeats forever,
        and a channel at rest for long gets the whole frozen_s to answer a command that moves)."""
        if v != g._last_v:
            g._same_since = g._far_since = None
            return None
        if g._same_since is None:
            g._same_since = g._last_t
            g._u_ref = self._u_now
        held = t - g._same_since
        if not (running and abs(self._u_now - g._u_ref) >= self._du_far):
            g._far_since = None
            return None
        if g._far_since is None:
            g._far_since = g._last_t
        if t - g._far_since >= g.frozen_s:
            g._last_v, g._last_t = v, t
            return Trip("frozen-sensor",
                        f"{g.name} stuck at {_fmt(v)} {g.unit} for {_fmt(held)} s while the command moved "
                        f"{_fmt(self._u_now - g._u_ref)} (frozen_s {_fmt(g.frozen_s)} s)",
                        t=t, channel=g.name, value=held, limit=g.frozen_s, stop=g.stop)
        return None

    # -- feedback plausibility (rigloop.engine.plausibility) ---------------------------------
    def _feedback_setup(self, cfg) -> None:
        from rigloop.config.feedback_checks import frozen_time, response_time, stated_noise

        plaus = cfg.limits.plausibility
        a, ctl = cfg.actuator, cfg.control
        self.stated_noise = stated_noise(cfg)
        self.noise = NoiseMeter(self.channel_names, idle_samples_needed(cfg.device.rate_hz))
        self.noise_floor: dict | None = None
        self.output_index = cfg.channel_index(ctl.output)
        self.response = None
        if plaus.enabled:
            lim = cfg.limits.channels.get(ctl.output)
            span = (lim.max - lim.min) if lim is not None and lim.min is not None and lim.max is not None \
                else _reference_span(cfg)
            window = max(2, round((ctl.estimator.window_s if ctl.estimator.kind != "one-step"
                                   else 10 * self.period_s) / self.period_s))
            unit = cfg.channels[self.output_index].unit
            self.response = ResponseMonitor(
                channel=ctl.output, unit=unit, order=ctl.order, alpha=ctl.alpha, u_min=a.min,
                u_max=a.max, safe=a.safe, period_s=self.period_s, response_s=response_time(cfg)[0],
                frozen_s=frozen_time(cfg), window=window, span=span,
                std=self.stated_noise.get(ctl.output, 0.0), actuator=a.name, actuator_unit=a.unit)
        self.applied = AppliedCheck(u_min=a.min, u_max=a.max, safe=a.safe, actuator=a.name,
                                    unit=a.unit) if plaus.applied else None

    def idle_sample(self, values) -> bool:
        """A sample while not running: material for the noise floor. True once, when the floor
        has just been fixed (its warnings are then in :meth:`fix_noise_floor`'s return)."""
        if self.noise_floor is not None:
            return False
        self.noise.add(values)
        return self.noise.done

    @property
    def noise_ready(self) -> bool:
        return self.noise.done

    def fix_noise_floor(self) -> list[str]:
        """Turn the idle samples into the noise floor (once) and set the checks' bands from it;
        return the warnings about rate limits below the noise."""
        if self.noise_floor is not None:
            return []
        warnings = []
        self.noise_floor = self.noise.floor()
        stated_res = {c.name: getattr(c, "resolution", None) for c in self.cfg.channels}
        for name, entry in self.noise_floor.items():
            if name in self.stated_noise:
                entry["stated_std"] = self.stated_noise[name]
            if stated_res.get(name):                 # channels[].resolution, when given
                entry["stated_resolution"] = stated_res[name]
        for g in self.guards:
            if g.rate_max is None:
                continue
            entry = self.noise_floor[g.name]
            std = max(entry["std"], entry.get("stated_std") or 0.0)
            floor = RATE_NOISE_SIGMAS * std * rate_noise_gain(self.period_s)
            if g.rate_max < floor:
                warnings.append(f"limits.{g.name}.rate_max {_fmt(g.rate_max)} {g.unit}/s is below "
                                f"{_fmt(floor)} {g.unit}/s, {RATE_NOISE_SIGMAS:g} sigma of the rate "
                                f"noise the sensor showed at rest (std {_fmt(std)} {g.unit}): it may "
                                f"trip on noise")
        if self.response is not None:
            entry = self.noise_floor[self.response.channel]
            std = max(entry["std"], entry.get("stated_std") or 0.0)
            self.response.set_noise(std, max(entry["resolution"], entry.get("stated_resolution") or 0.0))
        return warnings

    def on_arm(self) -> list[str]:
        """At ARM: fix the noise floor if not yet done, reset the monitors; return warnings."""
        warnings = self.fix_noise_floor()
        if self.response is not None:
            self.response.reset()
        if self.applied is not None:
            self.applied.reset()
        return warnings

    def note_command(self, u: float, seq: int | None = None) -> None:
        """The command just sent (seq None: not in a run, the device ignores it)."""
        self._u_now = u
        if seq is not None and self.applied is not None:
            self.applied.sent(seq, u)

    def check_response(self, t: float, y: float, u_applied: float, r: float) -> Trip | None:
        if self.response is None:
            return None
        return self.response.update(t, y, u_applied, r)

    def check_applied(self, t: float, last_cmd_seq: int, applied: float) -> Trip | None:
        if self.applied is None:
            return None
        return self.applied.check(t, last_cmd_seq, applied)

    def check_status(self, t: float, status: int, running: bool) -> Trip | None:
        if status & _FAULT:
            return Trip("device-fault", "the device reports a fault (status FAULT)", t=t, value=float(status))
        if running and status & _WATCHDOG:
            return Trip("device-watchdog", "the device's command watchdog expired; its output is safe",
                        t=t, value=float(status))
        return None

    def check_output(self, t: float, u: float) -> Trip | None:
        if not math.isfinite(u):
            return Trip("non-finite", f"the control law produced u = {u}", t=t, channel="u", value=u)
        return None

    # -- time-based checks ------------------------------------------------------------------
    def check_stale(self, t: float | None, silence_s: float) -> Trip | None:
        if silence_s > self.stale_s:
            return Trip("stale-data",
                        f"no fresh sample for {silence_s * 1000:.0f} ms (limit {self.stale_s * 1000:.0f} ms)",
                        t=t, value=silence_s, limit=self.stale_s)
        return None

    def check_link(self, t: float | None, rejected_total: int, now: float) -> Trip | None:
        new = rejected_total - self._last_rejected
        self._last_rejected = rejected_total
        if new > 0 and self._link.add(now, new):
            return Trip("link-errors",
                        f"more than {self._link.max_count} rejected frames within {self._link.window_s:g} s",
                        t=t, value=float(self._link.count(now)), limit=float(self._link.max_count))
        return None

    def check_overrun(self, t: float | None, now: float) -> Trip | None:
        if self._overruns.add(now):
            return Trip("overrun",
                        f"the host was late on more than {self._overruns.max_count} ticks within "
                        f"{self._overruns.window_s:g} s", t=t, value=float(self._overruns.count(now)),
                        limit=float(self._overruns.max_count))
        return None

    def check_duration(self, t: float | None, run_s: float) -> Trip | None:
        if self.max_duration_s is not None and run_s > self.max_duration_s:
            return Trip("max-duration", f"run time {run_s:.1f} s exceeded the maximum {self.max_duration_s:g} s",
                        t=t, value=run_s, limit=self.max_duration_s, stop="ramped")
        return None

    def margins(self) -> list[dict]:
        """Live distance of each guarded channel to its nearest limit, for the health panel."""
        out = []
        vals = self.last_values
        for g in self.guards:
            v = vals[g.index] if vals is not None else math.nan
            lo = v - g.min if g.min is not None else math.inf
            hi = g.max - v if g.max is not None else math.inf
            out.append({"channel": g.name, "unit": g.unit, "value": v, "min": g.min, "max": g.max,
                        "margin": min(lo, hi)})
        return out
