"""The safety supervisor: decides, sample by sample, whether the rig must stop.

It only *decides*; the loop acts (sends STOP at once, shapes the ramp, records the trip). Every
check returns ``None`` or a :class:`~rigloop.engine.records.Trip` naming the cause, the device
time, the channel, the offending value and the limit, so the recording says exactly why.
"""

from __future__ import annotations

import math
from collections import deque

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
    __slots__ = ("name", "unit", "index", "min", "max", "rate_max", "frozen_s", "stop",
                 "_last_v", "_last_t", "_same_since")

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


def _opt(x):
    return None if x is None else float(x)


def _fmt(x: float) -> str:
    return f"{x:.6g}"


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

    # -- per-sample checks -----------------------------------------------------------------
    def check_sample(self, t: float, values, running: bool) -> Trip | None:
        """Non-finite channels, min/max, rate of change and frozen sensors, in that order."""
        self.last_values = values
        for i, v in enumerate(values):
            if not math.isfinite(v):
                name = self.channel_names[i]
                return Trip("non-finite", f"channel {name} reported {v}", t=t, channel=name, value=v)
        for g in self.guards:
            v = values[g.index]
            if g.max is not None and v > g.max:
                return Trip("limit", f"{g.name} {_fmt(v)} {g.unit} above its maximum {_fmt(g.max)} {g.unit}",
                            t=t, channel=g.name, value=v, limit=g.max, stop=g.stop)
            if g.min is not None and v < g.min:
                return Trip("limit", f"{g.name} {_fmt(v)} {g.unit} below its minimum {_fmt(g.min)} {g.unit}",
                            t=t, channel=g.name, value=v, limit=g.min, stop=g.stop)
            if g._last_t is not None and t > g._last_t:
                if g.rate_max is not None:
                    rate = (v - g._last_v) / (t - g._last_t)
                    if abs(rate) > g.rate_max:
                        g._last_v, g._last_t = v, t
                        return Trip("rate-limit",
                                    f"{g.name} changing at {_fmt(rate)} {g.unit}/s, limit ±{_fmt(g.rate_max)} {g.unit}/s",
                                    t=t, channel=g.name, value=rate, limit=g.rate_max, stop=g.stop)
                if g.frozen_s is not None:
                    if v == g._last_v:
                        if g._same_since is None:
                            g._same_since = g._last_t
                        if running and t - g._same_since >= g.frozen_s:
                            return Trip("frozen-sensor",
                                        f"{g.name} stuck at {_fmt(v)} {g.unit} for {_fmt(t - g._same_since)} s "
                                        f"(limit {_fmt(g.frozen_s)} s)",
                                        t=t, channel=g.name, value=t - g._same_since, limit=g.frozen_s, stop=g.stop)
                    else:
                        g._same_since = None
            g._last_v, g._last_t = v, t
        return None

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
