"""Fault injection for the simulated device.

A fault is written ``KIND[:key=value[,key=value...]]`` (one ``--fault`` option, or one string in
the config's ``device.sim.faults`` list). Times (``at``) count from the **first ARM** the device
accepts, in device seconds: "a broken sensor 5 s into the run" means the same whether the host
connected at once or a minute after the simulated device started. Until that ARM, only faults
at ``at=0`` act (the default of ``drop`` and ``corrupt``: a bad cable is bad from the start). Random faults draw from their own generator seeded from ``--seed`` and the fault's
position in the list, so a run is repeatable and adding a fault does not change the draws of
another.

=============  ==========================================  ==========================================
kind           keys                                        effect
=============  ==========================================  ==========================================
drop           ``p`` (0..1), ``at`` (default 0)            each outgoing frame is lost with
                                                           probability p from ``at`` on
corrupt        ``p`` (0..1), ``at`` (default 0)            one byte of an outgoing frame is flipped
                                                           with probability p (the host counts a
                                                           ``crc`` rejection)
freeze         ``channel``, ``at``                         the channel repeats the value it read at
                                                           the first sample from ``at`` on
spike          ``channel``, ``at``, ``value``,             the channel reads ``value`` for
               ``samples`` (default 1)                     ``samples`` samples from ``at`` on
nan            ``channel``, ``at``                         the channel reads NaN from ``at`` on
silent         ``at``                                      nothing is sent from ``at`` on; the plant
                                                           and the watchdog keep running
deaf           ``at``                                      every incoming frame is ignored from
                                                           ``at`` on (provokes the device watchdog)
load           ``at``, ``torque``                          the plant's load torque steps to
                                                           ``torque`` [N·m] at ``at``
ignore-stop    (none)                                      STOP does nothing (only to prove that the
                                                           host stops the rig on its own; unsafe)
=============  ==========================================  ==========================================

Channel values are replaced in engineering units, before the device's raw scaling.
"""

from __future__ import annotations

import math
import random
import re
from dataclasses import dataclass, field
from typing import Callable, Iterable, Sequence

import numpy as np


class FaultSpecError(ValueError):
    """A fault specification that cannot be used; the message names the part and the fix."""


def _probability(text: str) -> float:
    value = float(text)
    if not 0.0 <= value <= 1.0:
        raise ValueError
    return value


def _seconds(text: str) -> float:
    value = float(text)
    if not (math.isfinite(value) and value >= 0.0):
        raise ValueError
    return value


def _finite(text: str) -> float:
    value = float(text)
    if not math.isfinite(value):
        raise ValueError
    return value


def _count(text: str) -> int:
    value = int(text)
    if value < 1:
        raise ValueError
    return value


_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_.-]*\Z")


def _channel(text: str) -> str:
    if not _NAME.match(text):
        raise ValueError
    return text


@dataclass(frozen=True)
class _KeyType:
    parse: Callable[[str], object]
    allowed: str                     # what to tell the user when parsing fails


_KEY_TYPES: dict[str, _KeyType] = {
    "p": _KeyType(_probability, "a probability between 0 and 1, e.g. p=0.05"),
    "at": _KeyType(_seconds, "seconds >= 0 after the first ARM, e.g. at=2.5"),
    "channel": _KeyType(_channel, "a channel name, e.g. channel=speed_rpm"),
    "value": _KeyType(_finite, "a finite number in the channel's units, e.g. value=5000"),
    "samples": _KeyType(_count, "a whole number >= 1, e.g. samples=3"),
    "torque": _KeyType(_finite, "a finite load torque in N·m, e.g. torque=0.02"),
}


@dataclass(frozen=True)
class _Kind:
    required: tuple[str, ...]
    optional: dict[str, object] = field(default_factory=dict)

    @property
    def keys(self) -> tuple[str, ...]:
        return self.required + tuple(self.optional)


#: Every fault kind with its required keys and its optional keys (with defaults).
FAULT_KINDS: dict[str, _Kind] = {
    "drop": _Kind(("p",), {"at": 0.0}),
    "corrupt": _Kind(("p",), {"at": 0.0}),
    "freeze": _Kind(("channel", "at")),
    "spike": _Kind(("channel", "at", "value"), {"samples": 1}),
    "nan": _Kind(("channel", "at")),
    "silent": _Kind(("at",)),
    "deaf": _Kind(("at",)),
    "load": _Kind(("at", "torque")),
    "ignore-stop": _Kind(()),
}


@dataclass(frozen=True)
class FaultSpec:
    """One parsed fault. ``at_s`` is 0 for kinds without a time."""

    kind: str
    text: str
    at_s: float = 0.0
    p: float = 0.0
    channel: str | None = None
    value: float = math.nan
    samples: int = 1
    torque: float = 0.0

    @property
    def at_us(self) -> int:
        return int(round(self.at_s * 1e6))


def fault_syntax() -> str:
    """One line per kind, for help texts and error messages."""
    lines = []
    for kind, spec in FAULT_KINDS.items():
        keys = [f"{k}=..." for k in spec.required] + [f"[{k}=...]" for k in spec.optional]
        lines.append(kind + (":" + ",".join(keys) if keys else ""))
    return "; ".join(lines)


def parse_fault(text: str) -> FaultSpec:
    """Parse ``KIND[:key=value[,key=value...]]``; raise :class:`FaultSpecError` naming the problem."""
    if not isinstance(text, str) or not text.strip():
        raise FaultSpecError(f"empty fault specification {text!r}; write KIND[:key=value,...], "
                             f"kinds: {', '.join(FAULT_KINDS)}")
    text = text.strip()
    kind, _, rest = text.partition(":")
    kind = kind.strip()
    if kind not in FAULT_KINDS:
        raise FaultSpecError(f"fault {text!r}: unknown kind {kind!r}; allowed kinds: "
                             f"{', '.join(FAULT_KINDS)}")
    spec = FAULT_KINDS[kind]
    values: dict[str, object] = dict(spec.optional)
    seen: set[str] = set()
    for item in (part.strip() for part in rest.split(",")) if rest.strip() else ():
        key, eq, raw = item.partition("=")
        key, raw = key.strip(), raw.strip()
        if not eq or not key:
            raise FaultSpecError(f"fault {text!r}: {item!r} is not key=value; keys of "
                                 f"{kind!r}: {', '.join(spec.keys) or '(none)'}")
        if key not in spec.keys:
            raise FaultSpecError(f"fault {text!r}: unknown key {key!r} for kind {kind!r}; allowed "
                                 f"keys: {', '.join(spec.keys) or '(none)'}")
        if key in seen:
            raise FaultSpecError(f"fault {text!r}: key {key!r} given twice; give it once")
        seen.add(key)
        key_type = _KEY_TYPES[key]
        try:
            values[key] = key_type.parse(raw)
        except ValueError:
            raise FaultSpecError(f"fault {text!r}: {key}={raw!r} is not valid; use "
                                 f"{key_type.allowed}") from None
    missing = [k for k in spec.required if k not in seen]
    if missing:
        raise FaultSpecError(f"fault {text!r}: missing key {', '.join(missing)}; kind {kind!r} "
                             f"needs {', '.join(spec.required)}"
                             + (f" (optional: {', '.join(spec.optional)})" if spec.optional else ""))
    at = values.pop("at", 0.0)
    return FaultSpec(kind=kind, text=text, at_s=float(at), **values)  # type: ignore[arg-type]


def parse_faults(texts: Iterable[str]) -> list[FaultSpec]:
    return [parse_fault(t) for t in texts]


class FaultInjector:
    """Applies parsed faults. Pure: every method gets the device time; nothing here sleeps.

    The device asks it about incoming frames (:meth:`is_deaf`), STOP (:attr:`ignore_stop`),
    plant load steps (:meth:`due_load_steps`) and channel values (:meth:`shape_channels`); the
    server passes every outgoing frame through :meth:`outgoing`. :attr:`counters` says how often
    each fault acted, for logs and tests.
    """

    def __init__(self, specs: Iterable[FaultSpec | str] = (), *, seed: int = 0,
                 channel_names: Sequence[str] | None = None):
        self.specs: list[FaultSpec] = [s if isinstance(s, FaultSpec) else parse_fault(s)
                                       for s in specs]
        names = list(channel_names) if channel_names is not None else None
        self._index: dict[str, int] = {n: i for i, n in enumerate(names or ())}
        for spec in self.specs:
            if spec.channel is not None and names is not None and spec.channel not in self._index:
                raise FaultSpecError(f"fault {spec.text!r}: channel {spec.channel!r} is not sent "
                                     f"by the device; sent channels: {', '.join(names)}")
        # One generator per fault, seeded by (seed, position): repeatable and independent.
        self._rng = [random.Random(f"rigloop-sim-fault:{seed}:{i}") for i in range(len(self.specs))]
        self._frozen: dict[int, float] = {}
        self._spike_left: dict[int, int] = {i: s.samples for i, s in enumerate(self.specs)
                                            if s.kind == "spike"}
        self._load_done: set[int] = set()
        self.origin_us: int | None = None      # device time of the first ARM: fault time zero
        self.last_corrupted = False
        self.counters: dict[str, int] = {"dropped": 0, "corrupted": 0, "silenced": 0,
                                         "deaf_ignored": 0, "stop_ignored": 0, "frozen": 0,
                                         "spiked": 0, "nan": 0, "load_steps": 0}
        self._by_kind = {k: [(i, s) for i, s in enumerate(self.specs) if s.kind == k]
                         for k in FAULT_KINDS}

    def __bool__(self) -> bool:
        return bool(self.specs)

    def note_arm(self, now_us: int) -> None:
        """The device accepted ARM: the first one starts the faults' clock."""
        if self.origin_us is None:
            self.origin_us = int(now_us)

    def _due(self, spec: FaultSpec, now_us: int) -> bool:
        """Has the fault's time come? ``at`` counts from the first ARM; at=0 acts from start-up."""
        if spec.at_us <= 0:
            return True
        return self.origin_us is not None and now_us - self.origin_us >= spec.at_us

    @property
    def ignore_stop(self) -> bool:
        return bool(self._by_kind["ignore-stop"])

    def is_deaf(self, now_us: int) -> bool:
        return any(self._due(s, now_us) for _, s in self._by_kind["deaf"])

    def is_silent(self, now_us: int) -> bool:
        return any(self._due(s, now_us) for _, s in self._by_kind["silent"])

    def outgoing(self, frame: bytes, now_us: int) -> bytes | None:
        """The frame as it leaves the device: unchanged, corrupted, or ``None`` when lost.

        :attr:`last_corrupted` tells whether the frame returned was corrupted.
        """
        self.last_corrupted = False
        if self.is_silent(now_us):
            self.counters["silenced"] += 1
            return None
        for i, spec in self._by_kind["drop"]:
            if self._due(spec, now_us) and self._rng[i].random() < spec.p:
                self.counters["dropped"] += 1
                return None
        for i, spec in self._by_kind["corrupt"]:
            rng = self._rng[i]
            if self._due(spec, now_us) and frame and rng.random() < spec.p:
                # One flipped byte: a CRC-16 detects every error burst of up to 16 bits, so the
                # receiver always rejects this frame (and never takes it for another message).
                data = bytearray(frame)
                data[rng.randrange(len(data))] ^= rng.randrange(1, 256)
                frame = bytes(data)
                self.counters["corrupted"] += 1
                self.last_corrupted = True
        return frame

    def note_deaf(self) -> None:
        self.counters["deaf_ignored"] += 1

    def note_stop_ignored(self) -> None:
        self.counters["stop_ignored"] += 1

    def due_load_steps(self, now_us: int) -> list[float]:
        """Load torques whose time has come and that were not applied yet, in spec order."""
        due = []
        for i, spec in self._by_kind["load"]:
            if i not in self._load_done and self._due(spec, now_us):
                self._load_done.add(i)
                self.counters["load_steps"] += 1
                due.append(spec.torque)
        return due

    def shape_channels(self, values: np.ndarray, now_us: int) -> np.ndarray:
        """Apply freeze / spike / NaN faults in place to ``values`` (sent-channel order)."""
        for i, spec in enumerate(self.specs):
            if spec.channel is None or not self._due(spec, now_us):
                continue
            k = self._index[spec.channel]
            if spec.kind == "freeze":
                if i not in self._frozen:
                    self._frozen[i] = float(values[k])
                values[k] = self._frozen[i]
                self.counters["frozen"] += 1
            elif spec.kind == "spike":
                if self._spike_left[i] > 0:
                    self._spike_left[i] -= 1
                    values[k] = spec.value
                    self.counters["spiked"] += 1
            elif spec.kind == "nan":
                values[k] = math.nan
                self.counters["nan"] += 1
        return values
