"""The simulated device's protocol state machine (docs/protocol.md §6), pure: no I/O, no clock.

Every entry point takes the device time ``now_us`` (microseconds since device start), so the
same object runs under the realtime server, the lockstep server and unit tests that step time
by hand. Entry points return the messages the device sends in response; the caller frames and
transmits them.

Timing (docs/architecture.md, protocol §6.6): the plant is integrated lazily with the output in
force (zero-order hold). A tick at ``t_k`` first brings the plant to ``t_k`` under the old
output, then checks the watchdog, applies the newest accepted COMMAND (clamped), reads and
measures the channels, and reports in SAMPLE k the value in force on ``[t_k, t_k+1)``. A STOP,
a watchdog expiry or an accepted CONFIGURE switches the output to ``safe`` at ``now_us`` itself
(the plant is first brought to ``now_us`` under the old output), not at the next tick.

Choices the protocol leaves to the device, made here:

- Sequence checks apply to every COMMAND, armed or not; a COMMAND arriving while disarmed or
  latched passes the checks and is then ignored (counted in ``ignored['command']``).
- The watchdog fires at the first tick where the silence since the last accepted COMMAND (or
  since ARM) is strictly longer than ``watchdog_us``, so a loop that answers every sample never
  trips it even when ``watchdog_us`` equals the period. Latency: at most watchdog + 1 period.
- After a STOP or a watchdog expiry ``last_cmd_seq`` keeps the sequence of the last COMMAND that
  was applied; ``applied`` says ``safe``.
- CONFIGURE clamps must also lie inside the plant's physical actuator range (a PWM stage cannot
  give 150 % duty); the period must lie in [MIN_PERIOD_US, MAX_PERIOD_US].
- FAULT code 4 (CONFIGURE rejected) carries the offending field's value.
- ARM while not CONFIGURED is ignored and counted in ``ignored['arm']``.
- The device raises no sensor or hardware fault of its own (the injected faults of
  :mod:`.faults` change what the host sees instead), so the FAULT status bit stays clear.

Binding (protocol 1.1, §6.7): a valid CONFIGURE binds the device to its sender; while bound the
transport hands over only that sender's frames (others count in ``foreign``). The binding ends
when the device is not ARMED and its host has been silent for RELEASE_US. With a key
(:class:`~rigloop.protocol.auth.DeviceAuth`) every frame must carry a valid tag; a QUERY with a
nonce starts a session only while the device is not bound.
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass
from typing import Any, Callable, Mapping, Sequence

import numpy as np

from rigloop.protocol.auth import TRAILER_SIZE, DeviceAuth
from rigloop.protocol.cobs import CobsError, cobs_decode
from rigloop.protocol.framing import MAX_SERIAL_RUN, RejectCounters, decode_frame
from rigloop.protocol.messages import (
    AUTH_NONE,
    MAX_CHANNELS,
    NAME_SIZE,
    PROTOCOL_VERSION,
    Arm,
    Command,
    Configure,
    Fault,
    FaultCode,
    Hello,
    Message,
    MsgType,
    ProtocolError,
    Query,
    Sample,
    Status,
    Stop,
    configure_problem,
)
from rigloop.protocol.sequence import MAX_JUMP, is_newer
from rigloop.sim.binding import RELEASE_US, HostBinding  # noqa: F401 - RELEASE_US is public here
from rigloop.sim.faults import FaultInjector

#: Firmware version the simulated device reports in HELLO (major*256 + minor).
FW_VERSION = 0x0100
#: Shortest and longest sample period the simulated device accepts (20 kHz .. 0.1 Hz).
MIN_PERIOD_US = 50
MAX_PERIOD_US = 10_000_000
#: Command watchdog in force before the first CONFIGURE (the "compiled-in" default).
DEFAULT_WATCHDOG_US = 100_000

#: CONFIGURE body (docs/protocol.md §4.7): period_us, watchdog_us, safe, u_min, u_max.
_CONFIGURE_FIELDS = struct.Struct("<IIfff")

_ARMED = int(Status.ARMED)
_STOP_LATCHED = int(Status.STOP_LATCHED)
_WATCHDOG = int(Status.WATCHDOG)
_CLAMPED = int(Status.CLAMPED)
_FAULT = int(Status.FAULT)
_CONFIGURED = int(Status.CONFIGURED)
_RX_ERROR = int(Status.RX_ERROR)
_OVERRUN = int(Status.OVERRUN)


@dataclass(frozen=True)
class SentChannel:
    """A channel the device sends: ``raw = (value - offset) / scale`` on the wire, so that the
    host's ``raw * scale + offset`` gives the engineering value back."""

    name: str
    scale: float = 1.0
    offset: float = 0.0


@dataclass(frozen=True)
class Truth:
    """What the plant really is at the present operating point (for tests, never on the wire)."""

    channel: str
    order: int
    u: float
    alpha: float          # quasi-static d(y^(order))/du (Plant.true_alpha)
    static_gain: float    # dy_ss/du at the equilibrium for u (Plant.static_gain)


class SimDevice(HostBinding):
    """A device speaking protocol version 1 in front of a plant model.

    ``plant`` follows :class:`rigloop.plants.base.Plant`; ``sensor`` maps true channel values
    (plant order) to readings, e.g. :class:`rigloop.plants.sensors.SensorModel`; ``channels``
    lists the channels sent, in order (names, or :class:`SentChannel` with raw scaling; default
    all of the plant's). ``rx_observer`` receives one dict per incoming frame (for the rx log).
    """

    def __init__(self, plant: Any, *, sensor: Any = None,
                 channels: Sequence[str | SentChannel] | None = None,
                 period_us: int = 10_000, watchdog_us: int | None = None,
                 faults: FaultInjector | None = None, name: str | None = None,
                 rx_observer: Callable[[dict], None] | None = None,
                 key: bytes | None = None, nonce_source: Callable[[], bytes] | None = None):
        self.plant = plant
        self.sensor = sensor
        sent = [c if isinstance(c, SentChannel) else SentChannel(str(c))
                for c in (channels if channels is not None else plant.channel_names)]
        self.channels: tuple[SentChannel, ...] = tuple(_check_channels(sent, plant))
        names = [c.name for c in self.channels]
        self._pick = np.array([plant.channel_names.index(n) for n in names], dtype=int)
        self._scale = np.array([c.scale for c in self.channels], dtype=float)
        self._offset = np.array([c.offset for c in self.channels], dtype=float)
        self._identity_scaling = bool(np.all(self._scale == 1.0) and np.all(self._offset == 0.0))
        self.faults = faults if faults is not None else FaultInjector(channel_names=names)
        period_us = int(period_us)
        if not MIN_PERIOD_US <= period_us <= MAX_PERIOD_US:
            raise ValueError(f"period_us={period_us} is outside what the simulated device can do; "
                             f"use {MIN_PERIOD_US}..{MAX_PERIOD_US} us (rate "
                             f"{1e6 / MAX_PERIOD_US:g}..{1e6 / MIN_PERIOD_US:g} Hz)")
        self.name = (name or f"sim-{plant.kind}")[:NAME_SIZE]
        self.rx_observer = rx_observer

        # Configuration in force (firmware defaults until the first CONFIGURE).
        self.period_us = period_us
        self.watchdog_us = int(watchdog_us) if watchdog_us is not None else max(
            DEFAULT_WATCHDOG_US, 2 * period_us)
        self.safe = float(plant.u_safe)
        self.u_min = float(plant.u_min)
        self.u_max = float(plant.u_max)

        # State.
        self.armed = False
        self.stop_latched = False
        self.watchdog_latched = False
        self.fault_active = False            # FAULT bit: never raised here (module doc)
        self.configured = False
        self.clamped = False
        self._rx_error = False
        self._overrun = False
        self.output = self.safe              # value driving the plant now
        self.last_cmd_seq = 0                # COMMAND that produced the applied value
        self._pending: tuple[int, float] | None = None   # newest accepted COMMAND (seq, value)
        self._last_accepted_cmd: int | None = None       # for the sequence rule
        self._last_cmd_us = 0                # watchdog reference (ARM or last accepted COMMAND)
        self.seq = 0                         # seq of the next SAMPLE
        self.last_sample_seq: int | None = None          # the SAMPLE awaiting its answer
        self.last_sample: Sample | None = None
        self.answered = False                # the COMMAND answering last_sample_seq arrived
        self.configure_count = 0             # CONFIGUREs accepted (each restarts the clock)
        self.next_tick_us = 0
        self._plant_us = 0                   # time the plant state belongs to
        self.ticks = 0
        self.overruns = 0

        self.auth: DeviceAuth | None = DeviceAuth(key, nonce_source) if key is not None else None
        self._hello_ext = False             # the host's QUERY carried a nonce: answer in the 1.1 form
        self.bound = False                  # a CONFIGURE bound the device to its sender (§6.7)
        self._bound_rx_us = 0               # last accepted frame from the bound host
        self.bind_count = 0                 # accepted CONFIGUREs (each binds to its sender)
        self.releases = 0
        self.foreign = 0                    # frames from others while bound (counted, dropped)

        self.rejects = RejectCounters()
        self.ignored: dict[str, int] = {"command": 0, "arm": 0, "stop": 0, "deaf": 0,
                                        "device_message": 0}
        self._rx_buf = bytearray()          # serial: bytes of the run being received
        self._rx_synced = False             # a 0x00 has been seen
        self._rx_skipping = False           # inside an over-long run

    # ------------------------------------------------------------------ status
    @property
    def status(self) -> int:
        """Status bits now (docs/protocol.md §4.3), as an int."""
        s = 0
        if self.armed:
            s |= _ARMED
        if self.stop_latched:
            s |= _STOP_LATCHED
        if self.watchdog_latched:
            s |= _WATCHDOG
        if self.clamped:
            s |= _CLAMPED
        if self.fault_active:
            s |= _FAULT
        if self.configured:
            s |= _CONFIGURED
        if self._rx_error:
            s |= _RX_ERROR
        if self._overrun:
            s |= _OVERRUN
        return s

    def hello(self) -> Hello:
        if not self._hello_ext:
            return Hello(PROTOCOL_VERSION, PROTOCOL_VERSION, FW_VERSION, len(self.channels),
                         self.status & 0xFF, self.period_us, self.watchdog_us, self.safe,
                         self.u_min, self.u_max, self.name)
        auth = self.auth
        return Hello(PROTOCOL_VERSION, PROTOCOL_VERSION, FW_VERSION, len(self.channels),
                     self.status & 0xFF, self.period_us, self.watchdog_us, self.safe,
                     self.u_min, self.u_max, self.name, MIN_PERIOD_US, MAX_PERIOD_US,
                     auth.auth_mode if auth is not None else AUTH_NONE,
                     auth.device_nonce if auth is not None else bytes(8))

    def truth(self, channel: str | None = None, order: int = 1) -> Truth:
        """True alpha and static gain of the plant at the present state and output."""
        channel = channel or self.channels[0].name
        u = self.output
        return Truth(channel, order, u, float(self.plant.true_alpha(channel, order, u)),
                     float(self.plant.static_gain(channel, u)))

    # ------------------------------------------------------------------ start-up
    def start(self, now_us: int = 0) -> list[Message]:
        """Power-on: output safe, not armed, not configured; the first tick is at ``now_us``."""
        self._plant_us = int(now_us)
        self.next_tick_us = int(now_us)
        return [self.hello()]

    # ------------------------------------------------------------------ receiving
    def feed_datagram(self, data: bytes, now_us: int) -> list[Message]:
        """One UDP datagram (one frame). Rejections are counted, logged, and flag RX_ERROR."""
        if self._deaf(now_us):
            return []
        return self._on_frame(bytes(data), now_us)

    def feed_stream(self, data: bytes, now_us: int) -> list[Message]:
        """Bytes from the serial line: COBS frames, each followed by a 0x00 delimiter.

        As protocol §2 asks, bytes before the first 0x00 are discarded uncounted (start-up
        resynchronisation); a run longer than MAX_SERIAL_RUN is counted once under ``length``
        and skipped up to the next delimiter.
        """
        if self._deaf(now_us):
            return []
        out: list[Message] = []
        buf = self._rx_buf
        start = 0
        while True:
            end = data.find(0, start)
            chunk = data[start:] if end < 0 else data[start:end]
            if not self._rx_skipping:
                buf += chunk
                if len(buf) > MAX_SERIAL_RUN:
                    if self._rx_synced:
                        self._reject("length", now_us, f"serial run longer than {MAX_SERIAL_RUN} bytes")
                    buf.clear()
                    self._rx_skipping = True
            if end < 0:
                return out
            if buf and self._rx_synced and not self._rx_skipping:
                try:
                    frame = cobs_decode(bytes(buf))
                except CobsError as exc:
                    self._reject("cobs", now_us, str(exc))
                else:
                    out += self._on_frame(frame, now_us)
            buf.clear()
            self._rx_synced = True
            self._rx_skipping = False
            start = end + 1

    def _on_frame(self, frame: bytes, now_us: int) -> list[Message]:
        try:
            msg = decode_frame(frame, self.auth)
        except ProtocolError as exc:
            if exc.reason == "value" and exc.msg_type == MsgType.CONFIGURE:
                # A CONFIGURE breaking §4.7 still deserves its FAULT code 4 (and is counted
                # under `value` there), so decode its fields without the codec's value check
                # (its tag, if any, was good: value comes after auth).
                end = -2 - (TRAILER_SIZE if frame[1] & 0x80 else 0)
                fields = _CONFIGURE_FIELDS.unpack(frame[2:end])
                return self._on_configure(Configure(*fields), now_us)
            self._reject(exc.reason, now_us, exc.detail)
            return []
        self.rejects.accepted += 1
        rejected = self.rejects.total_rejected
        out = self.handle(msg, now_us)
        if self.bound and self.rejects.total_rejected == rejected:
            self._bound_rx_us = now_us      # only frames acted on keep the binding (§6.7)
        return out

    def handle(self, msg: Message, now_us: int) -> list[Message]:
        """Act on one decoded message from the host; return what the device sends back."""
        now_us = int(now_us)
        if self._deaf(now_us):
            return []
        kind = type(msg)
        if kind is Command:
            return self._on_command(msg, now_us)
        if kind is Stop:
            return self._on_stop(msg, now_us)
        if kind is Arm:
            return self._on_arm(msg, now_us)
        if kind is Configure:
            return self._on_configure(msg, now_us)
        if kind is Query:
            return self._on_query(msg, now_us)
        # HELLO / SAMPLE / FAULT travel the other way (protocol 1.1 §3: rejected under `type`).
        self.ignored["device_message"] += 1
        self._reject("type", now_us, "a device-to-host message sent to the device", msg)
        return []

    def _on_command(self, msg: Command, now_us: int) -> list[Message]:
        if not math.isfinite(msg.value):
            self._reject("value", now_us, f"COMMAND value {msg.value} is not finite", msg)
            return []
        last = self._last_accepted_cmd
        if last is not None and not (is_newer(msg.seq, last) and ((msg.seq - last) & 0xFFFFFFFF) <= MAX_JUMP):
            self._reject("sequence", now_us, f"COMMAND seq {msg.seq} is not newer than {last}, "
                                             f"or more than {MAX_JUMP} ahead", msg)
            return []
        self._last_accepted_cmd = msg.seq
        if msg.answers == self.last_sample_seq:
            self.answered = True
        if not self.armed or self.stop_latched or self.watchdog_latched:
            self.ignored["command"] += 1
            self._observe(now_us, msg, "ignored", note="not armed")
            return []
        self._pending = (msg.seq, float(msg.value))
        self._last_cmd_us = now_us
        self._observe(now_us, msg, "accepted")
        return []

    def _on_stop(self, msg: Stop, now_us: int) -> list[Message]:
        if self.faults.ignore_stop:
            self.ignored["stop"] += 1
            self.faults.note_stop_ignored()
            self._observe(now_us, msg, "ignored", note="ignore-stop fault")
            return []
        self._to_safe(now_us)
        self.stop_latched = True
        self._observe(now_us, msg, "accepted")
        return []

    def _on_arm(self, msg: Arm, now_us: int) -> list[Message]:
        if not self.configured:
            self.ignored["arm"] += 1
            self._observe(now_us, msg, "ignored", note="not configured")
            return []
        self.stop_latched = False
        self.watchdog_latched = False
        self.fault_active = False
        self.armed = True
        self._pending = None            # output stays safe until the first COMMAND after ARM
        self._last_cmd_us = now_us
        self.faults.note_arm(now_us)    # fault times count from the first ARM
        self._observe(now_us, msg, "accepted")
        return []

    def _on_configure(self, msg: Configure, now_us: int) -> list[Message]:
        problem, value = self._configure_problem(msg)
        if problem is not None:
            self._reject("value", now_us, problem, msg)
            return [Fault(now_us, int(FaultCode.CONFIG_REJECTED), self.status, value)]
        self._to_safe(now_us)
        self.period_us = int(msg.period_us)
        self.watchdog_us = int(msg.watchdog_us)
        self.safe = float(msg.safe)
        self.u_min = float(msg.u_min)
        self.u_max = float(msg.u_max)
        self.output = self.safe
        self.configured = True
        self.configure_count += 1
        self._pending = None
        self._last_accepted_cmd = None
        self.last_sample_seq = None                     # no SAMPLE awaits an answer now
        self.answered = False
        self.next_tick_us = now_us + self.period_us     # restart the sample clock
        self.bound = True                               # the sender is now the host (§6.7)
        self._bound_rx_us = now_us
        self.bind_count += 1
        self._observe(now_us, msg, "accepted")
        return [self.hello()]

    def _configure_problem(self, m: Configure) -> tuple[str | None, float]:
        problem = configure_problem(m.period_us, m.watchdog_us, m.safe, m.u_min, m.u_max)
        if problem is not None:
            for value in (m.safe, m.u_min, m.u_max):
                if not math.isfinite(value):
                    return problem, value
            if not m.u_min <= m.safe <= m.u_max:
                return problem, m.safe
            return problem, float(m.period_us if m.period_us <= 0 else m.watchdog_us)
        if not MIN_PERIOD_US <= m.period_us <= MAX_PERIOD_US:
            return (f"CONFIGURE period_us={m.period_us} is outside what the simulated device can do "
                    f"({MIN_PERIOD_US}..{MAX_PERIOD_US} us)"), float(m.period_us)
        lo, hi = float(self.plant.u_min), float(self.plant.u_max)
        if m.u_min < lo:
            return (f"CONFIGURE u_min={m.u_min} is below the actuator's range {lo}..{hi} "
                    f"{self.plant.actuator_unit}"), m.u_min
        if m.u_max > hi:
            return (f"CONFIGURE u_max={m.u_max} is above the actuator's range {lo}..{hi} "
                    f"{self.plant.actuator_unit}"), m.u_max
        return None, math.nan

    # ------------------------------------------------------------------ ticking
    def note_overrun(self, missed: int = 1) -> None:
        """The server missed ``missed`` ticks: flag OVERRUN in the next SAMPLE."""
        if missed > 0:
            self._overrun = True
            self.overruns += missed

    def tick(self, now_us: int | None = None) -> list[Message]:
        """One sampling instant at ``now_us`` (default :attr:`next_tick_us`): SAMPLE (+ FAULT)."""
        now_us = self.next_tick_us if now_us is None else int(now_us)
        out: list[Message] = []
        self._advance_plant(now_us)
        for torque in self.faults.due_load_steps(now_us):
            self.plant.set_load(torque)
        if self.armed and now_us - self._last_cmd_us > self.watchdog_us:
            silence = now_us - self._last_cmd_us
            self._to_safe(now_us)
            self.watchdog_latched = True
            out.append(Fault(now_us, int(FaultCode.WATCHDOG), self.status, math.nan))
            self._observe(now_us, None, "watchdog", note=f"no COMMAND for {silence} us")
        # Apply the newest accepted COMMAND (zero-order hold until the next one).
        if self.armed and self._pending is not None:
            seq, value = self._pending
            applied = min(max(value, self.u_min), self.u_max)
            self.clamped = applied != value
            self.output = applied
            self.last_cmd_seq = seq
        else:
            self.output = self.safe
            self.clamped = False
        sample = Sample(self.seq, now_us, self.status, self.output, self.last_cmd_seq,
                        self._measure(now_us))
        out.append(sample)
        self.last_sample = sample
        self.last_sample_seq = self.seq
        self.answered = False
        self.seq = (self.seq + 1) & 0xFFFFFFFF
        self._rx_error = False
        self._overrun = False
        self.ticks += 1
        self.next_tick_us = now_us + self.period_us
        return out

    def _measure(self, now_us: int) -> tuple[float, ...]:
        true_values = self.plant.read()
        plant_order = self.sensor.measure(true_values) if self.sensor is not None else true_values
        values = np.array(plant_order, dtype=float)[self._pick]
        if self.faults:
            self.faults.shape_channels(values, now_us)
        if not self._identity_scaling:
            values = (values - self._offset) / self._scale
        return tuple(values.tolist())

    def _advance_plant(self, now_us: int) -> None:
        dt_us = now_us - self._plant_us
        if dt_us > 0:
            self.plant.advance(self.output, dt_us * 1e-6)
            self._plant_us = now_us

    def _to_safe(self, now_us: int) -> None:
        """Output safe from ``now_us`` on (not at the next tick); disarm."""
        self._advance_plant(now_us)
        self.output = self.safe
        self.clamped = False
        self.armed = False
        self._pending = None

    # ------------------------------------------------------------------ internals
    def _deaf(self, now_us: int) -> bool:
        if self.faults and self.faults.is_deaf(now_us):
            self.ignored["deaf"] += 1
            self.faults.note_deaf()
            self._observe(now_us, None, "ignored", note="deaf fault")
            return True
        return False

    def _reject(self, reason: str, now_us: int, detail: str = "", msg: Message | None = None) -> None:
        self.rejects.count(reason)
        self._rx_error = True
        self._observe(now_us, msg, "rejected", reason=reason, note=detail)

    def _observe(self, now_us: int, msg: Message | None, result: str, **extra: Any) -> None:
        if self.rx_observer is None:
            return
        record: dict[str, Any] = {"t_us": now_us, "type": type(msg).__name__.upper() if msg else None}
        if msg is not None:
            for field_name in getattr(msg, "__slots__", ()):
                record[field_name] = _json_value(getattr(msg, field_name))
        record["result"] = result
        record.update({k: v for k, v in extra.items() if v not in (None, "")})
        self.rx_observer(record)


def _json_value(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)       # strict JSON has no NaN/inf
    if isinstance(value, tuple):
        return [_json_value(v) for v in value]
    if isinstance(value, bytes):
        return value.hex()
    return value


def _check_channels(sent: list[SentChannel], plant: Any) -> list[SentChannel]:
    if not sent:
        raise ValueError("the device must send at least one channel; allowed: "
                         + ", ".join(plant.channel_names))
    if len(sent) > MAX_CHANNELS:
        raise ValueError(f"{len(sent)} channels asked; a SAMPLE carries at most {MAX_CHANNELS}")
    seen: set[str] = set()
    for c in sent:
        if c.name not in plant.channel_names:
            raise ValueError(f"channel {c.name!r} is not a channel of the {plant.kind} plant; "
                             f"allowed: {', '.join(plant.channel_names)}")
        if c.name in seen:
            raise ValueError(f"channel {c.name!r} is listed twice; list each channel once")
        seen.add(c.name)
        if not (math.isfinite(c.scale) and c.scale != 0.0):
            raise ValueError(f"channel {c.name!r}: scale={c.scale} must be a finite non-zero number")
        if not math.isfinite(c.offset):
            raise ValueError(f"channel {c.name!r}: offset={c.offset} must be a finite number")
    return sent


def build_device(plant_kind: str, *, params: Mapping[str, Any] | None = None,
                 channels: Sequence[str | SentChannel] | None = None, rate_hz: float = 100.0,
                 noise: float = 1.0, seed: int = 0, faults: Sequence[str] = (),
                 rx_observer: Callable[[dict], None] | None = None,
                 rig: Mapping[str, Any] | None = None,
                 sensors: Mapping[str, Any] | None = None,
                 key: bytes | None = None) -> SimDevice:
    """A device with the plant's nominal sensors (noise std scaled by ``noise``; 0 = none).

    ``rig`` and ``sensors`` are the ``device.sim.rig`` / ``device.sim.sensors`` mappings
    (:mod:`rigloop.plants.rig_config`): imperfection layers around the plant, sensor overrides.
    Raises ValueError (plant kind/params, rig, channels, rate) or FaultSpecError with a message
    that names the bad item. The sensor noise, the load's random walk and each random fault
    have their own seeded streams.
    """
    from rigloop.plants import SensorModel, make_plant

    if not (isinstance(rate_hz, (int, float)) and math.isfinite(rate_hz) and rate_hz > 0):
        raise ValueError(f"rate {rate_hz!r} Hz: give a positive number of samples per second")
    if rig or sensors:
        from rigloop.plants.rig_config import build_rig, sensor_model

        plant = build_rig(plant_kind, params, rig, seed)
        sensor = sensor_model(plant, noise, sensors, seed)
    else:
        plant = make_plant(plant_kind, dict(params or {}))
        sensor = SensorModel.nominal(plant, scale=noise, seed=seed)
    names = [c.name if isinstance(c, SentChannel) else str(c)
             for c in (channels if channels is not None else plant.channel_names)]
    _check_channels([SentChannel(n) for n in names], plant)
    injector = FaultInjector(faults, seed=seed, channel_names=names)
    return SimDevice(plant, sensor=sensor, channels=channels, period_us=round(1e6 / rate_hz),
                     faults=injector, rx_observer=rx_observer, key=key)
