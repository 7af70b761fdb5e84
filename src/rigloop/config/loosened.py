"""Protections loosened or switched off: one table, read by ``rigloop check`` and every command.

A protection that a config quietly weakens is as good as absent, so each entry below names the
key, says when its value counts as loosened, and says what the rig loses. ``rigloop check`` prints
each finding as a line starting ``WARNING`` with the key; ``rigloop run`` and the desktop app
print it as ``config warning: ...`` and carry on (the hard bounds in the schema stop what has no
sane use at all).

To add a check that can be switched off (a plausibility or stale check, say), add one
:class:`Loosening` to :data:`LOOSENINGS`: ``find(cfg)`` yields ``(key, value)`` for each place
the config loosens it. :func:`switched_off` builds the common "this key is false/null/0" case.
The thresholds are judgement, marked as common practice, and never tuned to the simulator.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass

from rigloop.config.model import Config

Finding = tuple[str, object]

#: A device watchdog longer than this (and longer than 10 sample periods) holds the last command
#: too long when the host dies: a second is long for a spinning rig (common practice).
WATCHDOG_WARN_MS = 1000.0
WATCHDOG_WARN_PERIODS = 10
#: More rejected frames than this per window is a link that no longer carries the loop.
LINK_ERRORS_WARN = 100
#: A run longer than a working shift without a person watching is a forgotten rig (common practice).
MAX_DURATION_WARN_S = 8 * 3600.0
#: No fresh sample for this long (and 10 periods) before the stale-data trip is long (common practice).
STALE_WARN_S = 1.0
STALE_WARN_PERIODS = 10


@dataclass(frozen=True)
class Loosening:
    label: str                                   # short name shown in the check table
    find: Callable[[Config], Iterable[Finding]]  # (key, value) for each loosened place
    why: str                                     # what the rig loses; {value} and {key} filled in


def switched_off(key: str, get: Callable[[Config], object], label: str, why: str) -> Loosening:
    """An entry for a check that a false/null/0 value switches off."""
    def find(cfg: Config) -> Iterator[Finding]:
        value = get(cfg)
        if value in (False, None, 0, 0.0):
            yield key, value
    return Loosening(label, find, why)


def _watchdog(cfg: Config) -> Iterator[Finding]:
    ms = cfg.device.watchdog_ms
    if ms > max(WATCHDOG_WARN_MS, WATCHDOG_WARN_PERIODS * cfg.device.period_s * 1000.0):
        yield "device.watchdog_ms", ms


def _link_errors(cfg: Config) -> Iterator[Finding]:
    if cfg.limits.link_errors_max > LINK_ERRORS_WARN:
        yield "limits.link_errors.max", cfg.limits.link_errors_max


#: The schema's default of limits.overruns.max; only values above it count as loosened.
OVERRUNS_DEFAULT = 50


def _overruns(cfg: Config) -> Iterator[Finding]:
    ticks = cfg.device.rate_hz * cfg.limits.overruns_window_s
    if cfg.limits.overruns_max > OVERRUNS_DEFAULT and cfg.limits.overruns_max >= ticks:
        yield "limits.overruns.max", cfg.limits.overruns_max


def _max_duration(cfg: Config) -> Iterator[Finding]:
    if cfg.limits.max_duration_s > MAX_DURATION_WARN_S:
        yield "limits.max_duration_s", cfg.limits.max_duration_s


def _stale(cfg: Config) -> Iterator[Finding]:
    if cfg.limits.stale_periods > max(STALE_WARN_PERIODS, STALE_WARN_S / cfg.device.period_s):
        yield "limits.stale_periods", cfg.limits.stale_periods


LOOSENINGS: list[Loosening] = [
    Loosening("device watchdog", _watchdog,
              "{key} = {value:g} ms: if the host dies or hangs, the rig holds its last command that "
              "long before the device stops it; keep it to a few sample periods (default "
              "max(100 ms, 3 periods))"),
    Loosening("link error trip", _link_errors,
              "{key} = {value}: that many rejected frames per window pass without a trip; a link "
              "that bad no longer carries the loop (default 10)"),
    Loosening("overrun trip", _overruns,
              "{key} = {value}: at least every tick of the window may be late, so the overrun trip "
              "can never fire; lower it (default 50)"),
    Loosening("run length cap", _max_duration,
              "{key} = {value:g} s: a forgotten run keeps the rig moving for more than 8 hours; "
              "lower it to the longest run you attend (default 600 s)"),
    Loosening("stale-data trip", _stale,
              "{key} = {value}: the loop runs on an old sample for more than 1 s "
              "(and 10 periods) before the stale-data trip; lower it (default 5 periods)"),
]


def loosened(cfg: Config) -> list[tuple[str, str, object, str]]:
    """Every finding as ``(label, key, value, message)``, in table order."""
    out = []
    for entry in LOOSENINGS:
        for key, value in entry.find(cfg):
            out.append((entry.label, key, value, entry.why.format(key=key, value=value)))
    return out
