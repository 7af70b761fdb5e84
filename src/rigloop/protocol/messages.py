"""Message types of wire protocol version 1 (document revision 1.1) and their payload codec (no CRC, no framing, no I/O).

A payload is ``version (u8) | type (u8) | body``; all fields little-endian, floats IEEE-754
binary32. Layouts are those of docs/protocol.md §4; each is one precompiled ``struct.Struct`` so
that the hot pair (SAMPLE decode, COMMAND encode) costs a few microseconds.

Integer fields that carry open-ended codes (``status``, ``Fault.code``, ``Stop.reason``) are
kept as plain ``int`` so that reserved bits, vendor fault codes and unknown stop reasons survive
decoding (a STOP must act whatever its reason byte says). Compare them with the enums below,
e.g. ``sample.status & Status.ARMED``.
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass
from enum import IntEnum, IntFlag
from typing import Callable, ClassVar, Union

PROTOCOL_VERSION = 1
MAX_CHANNELS = 32
MAX_PAYLOAD = 254
NAME_SIZE = 16


class MsgType(IntEnum):
    """Message type byte: 0x01-0x0F device -> host, 0x10-0x1F host -> device."""

    HELLO = 0x01
    SAMPLE = 0x02
    FAULT = 0x03
    QUERY = 0x10
    ARM = 0x11
    CONFIGURE = 0x12
    COMMAND = 0x13
    STOP = 0x14


class Status(IntFlag):
    """Device status bits carried by SAMPLE, FAULT and (low byte) HELLO."""

    ARMED = 1
    STOP_LATCHED = 2
    WATCHDOG = 4
    CLAMPED = 8
    FAULT = 16
    CONFIGURED = 32
    RX_ERROR = 64
    OVERRUN = 128


class FaultCode(IntEnum):
    """FAULT codes defined by the protocol; 0x8000-0xFFFF are left to the device vendor."""

    WATCHDOG = 1
    SENSOR = 2
    HARDWARE = 3
    CONFIG_REJECTED = 4
    RX_OVERFLOW = 5


class StopReason(IntEnum):
    """Why the host sent STOP (informative only: the device stops whatever the reason)."""

    OPERATOR = 0
    ESTOP = 1
    TRIP = 2
    SHUTDOWN = 3


#: Rejection reasons in the order the checks apply (docs/protocol.md §3). ``auth`` (protocol 1.1):
#: a frame without a valid tag on a keyed link, a tagged frame on an unkeyed one, or a replay.
REASONS = ("cobs", "short", "crc", "version", "type", "auth", "length", "value", "sequence")

#: HELLO ``auth`` field (protocol 1.1): what the device demands of every frame.
AUTH_NONE = 0
AUTH_HMAC_SHA256_64 = 1
#: Bytes of the session nonces carried by QUERY and HELLO (protocol 1.1).
NONCE_SIZE = 8


class ProtocolError(Exception):
    """A frame or message was rejected; ``reason`` is one of :data:`REASONS`.

    ``msg_type`` is the type byte when the frame got far enough to have a known type (so a device
    can answer a CONFIGURE rejected for its ``value`` with FAULT code 4), else None.
    """

    def __init__(self, reason: str, detail: str, msg_type: int | None = None):
        if reason not in REASONS:
            raise ValueError(f"unknown rejection reason {reason!r}; expected one of {REASONS}")
        super().__init__(f"{reason}: {detail}")
        self.reason = reason
        self.detail = detail
        self.msg_type = msg_type


# --- message classes -------------------------------------------------------------------------


@dataclass(slots=True)
class Hello:
    """Device identity and the configuration in force (start-up, QUERY answer, CONFIGURE ack)."""

    proto_min: int
    proto_max: int
    fw_version: int
    n_channels: int
    status: int
    period_us: int
    watchdog_us: int
    safe: float
    u_min: float
    u_max: float
    name: str
    #: protocol 1.1 extension, sent in answer to a QUERY that carries a nonce (None: 1.0 form)
    min_period_us: int | None = None
    max_period_us: int | None = None
    auth: int = AUTH_NONE
    nonce: bytes | None = None
    TYPE: ClassVar[MsgType] = MsgType.HELLO

    @property
    def extended(self) -> bool:
        return self.min_period_us is not None


@dataclass(slots=True)
class Sample:
    """One device tick: measurement, the actuator value really applied, and status."""

    seq: int
    t_us: int
    status: int
    applied: float
    last_cmd_seq: int
    channels: tuple[float, ...]
    TYPE: ClassVar[MsgType] = MsgType.SAMPLE


@dataclass(slots=True)
class Fault:
    """A device fault, sent once when raised."""

    t_us: int
    code: int
    status: int
    value: float
    TYPE: ClassVar[MsgType] = MsgType.FAULT


@dataclass(slots=True)
class Query:
    """Asks the device for HELLO; a 1.1 host adds its session nonce (8 bytes)."""

    nonce: bytes | None = None
    TYPE: ClassVar[MsgType] = MsgType.QUERY


@dataclass(slots=True)
class Arm:
    """Clears the STOP and WATCHDOG latches and lets the device accept COMMANDs."""

    TYPE: ClassVar[MsgType] = MsgType.ARM


@dataclass(slots=True)
class Configure:
    """Sample period, command watchdog, safe value and clamp range for the device."""

    period_us: int
    watchdog_us: int
    safe: float
    u_min: float
    u_max: float
    TYPE: ClassVar[MsgType] = MsgType.CONFIGURE


@dataclass(slots=True)
class Command:
    """The actuator value answering SAMPLE ``answers``."""

    seq: int
    answers: int
    value: float
    TYPE: ClassVar[MsgType] = MsgType.COMMAND


@dataclass(slots=True)
class Stop:
    """Output safe at once and latch until ARM."""

    reason: int
    TYPE: ClassVar[MsgType] = MsgType.STOP


Message = Union[Hello, Sample, Fault, Query, Arm, Configure, Command, Stop]
MESSAGE_CLASSES: tuple[type, ...] = (Hello, Sample, Fault, Query, Arm, Configure, Command, Stop)
DEVICE_TO_HOST = frozenset({MsgType.HELLO, MsgType.SAMPLE, MsgType.FAULT})

# --- layouts (header "<BB" = version, type, then the body) -----------------------------------

_HEADER = struct.Struct("<BB")
_HELLO = struct.Struct("<BBBBHBBIIfff16s")
_HELLO_EXT = struct.Struct("<BBBBHBBIIfff16sIIB8s")
_QUERY_NONCE = struct.Struct("<BB8s")
_SAMPLE_HEAD = struct.Struct("<BBIQHfIB")
_FAULT = struct.Struct("<BBQHHf")
_CONFIGURE = struct.Struct("<BBIIfff")
_COMMAND = struct.Struct("<BBIIf")
_STOP = struct.Struct("<BBB")
_CHANNELS = tuple(struct.Struct(f"<{n}f") for n in range(MAX_CHANNELS + 1))

#: Body length per type (SAMPLE: SAMPLE_BODY_FIXED + 4*n); the 1.1 forms of HELLO and QUERY are
#: HELLO_EXT_BODY and NONCE_SIZE bytes.
BODY_LENGTH = {
    MsgType.HELLO: _HELLO.size - 2,
    MsgType.FAULT: _FAULT.size - 2,
    MsgType.QUERY: 0,          # 8 with a nonce (protocol 1.1)
    MsgType.ARM: 0,
    MsgType.CONFIGURE: _CONFIGURE.size - 2,
    MsgType.COMMAND: _COMMAND.size - 2,
    MsgType.STOP: _STOP.size - 2,
}
SAMPLE_BODY_FIXED = _SAMPLE_HEAD.size - 2
HELLO_EXT_BODY = _HELLO_EXT.size - 2
#: payload offset of the device nonce in a 1.1 HELLO
HELLO_NONCE_OFFSET = _HELLO_EXT.size - NONCE_SIZE
_SAMPLE_HEAD_SIZE = _SAMPLE_HEAD.size
_V = PROTOCOL_VERSION
_isfinite = math.isfinite

# --- value rules -----------------------------------------------------------------------------


def configure_problem(period_us: int, watchdog_us: int, safe: float, u_min: float, u_max: float) -> str | None:
    """Return why a CONFIGURE breaks the device-independent rules of §4.7, or None if it keeps them.

    Rules: all floats finite, ``u_min <= safe <= u_max``, ``period_us > 0``,
    ``watchdog_us >= period_us``. (What period a given device can do is for the device to judge.)
    """
    for field, value in (("safe", safe), ("u_min", u_min), ("u_max", u_max)):
        if not _isfinite(value):
            return f"CONFIGURE {field}={value} is not finite; send a finite number"
    if not u_min <= safe <= u_max:
        return (
            f"CONFIGURE needs u_min <= safe <= u_max, got u_min={u_min}, safe={safe}, u_max={u_max}; "
            "put the safe value inside the clamp range"
        )
    if period_us <= 0:
        return f"CONFIGURE period_us={period_us} must be > 0"
    if watchdog_us < period_us:
        return (
            f"CONFIGURE watchdog_us={watchdog_us} is shorter than period_us={period_us}; "
            "the watchdog must last at least one period"
        )
    return None


# --- encoders --------------------------------------------------------------------------------


def _enc_hello(m: Hello, validate: bool) -> bytes:
    try:
        name = m.name.encode("ascii")
    except UnicodeEncodeError:
        raise ProtocolError("value", f"HELLO name {m.name!r} must be ASCII") from None
    if len(name) > NAME_SIZE:
        raise ProtocolError("value", f"HELLO name {m.name!r} is {len(name)} bytes; at most {NAME_SIZE}")
    if m.min_period_us is None:
        return _HELLO.pack(
            _V, MsgType.HELLO, m.proto_min, m.proto_max, m.fw_version, m.n_channels, m.status,
            m.period_us, m.watchdog_us, m.safe, m.u_min, m.u_max, name,
        )
    nonce = bytes(m.nonce or bytes(NONCE_SIZE))
    if len(nonce) != NONCE_SIZE:
        raise ProtocolError("value", f"HELLO nonce is {len(nonce)} bytes; exactly {NONCE_SIZE}")
    return _HELLO_EXT.pack(
        _V, MsgType.HELLO, m.proto_min, m.proto_max, m.fw_version, m.n_channels, m.status,
        m.period_us, m.watchdog_us, m.safe, m.u_min, m.u_max, name,
        m.min_period_us, m.max_period_us if m.max_period_us is not None else 0, m.auth, nonce,
    )


def _enc_sample(m: Sample, validate: bool) -> bytes:
    channels = m.channels
    n = len(channels)
    if n > MAX_CHANNELS:
        raise ProtocolError("length", f"SAMPLE has {n} channels; at most {MAX_CHANNELS}")
    return _SAMPLE_HEAD.pack(
        _V, MsgType.SAMPLE, m.seq, m.t_us, m.status, m.applied, m.last_cmd_seq, n
    ) + _CHANNELS[n].pack(*channels)


def _enc_fault(m: Fault, validate: bool) -> bytes:
    return _FAULT.pack(_V, MsgType.FAULT, m.t_us, m.code, m.status, m.value)


def _enc_query(m: Query, validate: bool) -> bytes:
    if m.nonce is None:
        return b"\x01\x10"
    if len(m.nonce) != NONCE_SIZE:
        raise ProtocolError("value", f"QUERY nonce is {len(m.nonce)} bytes; exactly {NONCE_SIZE}")
    return _QUERY_NONCE.pack(_V, MsgType.QUERY, bytes(m.nonce))


def _enc_arm(m: Arm, validate: bool) -> bytes:
    return b"\x01\x11"


def _enc_configure(m: Configure, validate: bool) -> bytes:
    if validate:
        problem = configure_problem(m.period_us, m.watchdog_us, m.safe, m.u_min, m.u_max)
        if problem:
            raise ProtocolError("value", problem)
    return _CONFIGURE.pack(_V, MsgType.CONFIGURE, m.period_us, m.watchdog_us, m.safe, m.u_min, m.u_max)


def _enc_command(m: Command, validate: bool) -> bytes:
    if validate and not _isfinite(m.value):
        raise ProtocolError("value", f"COMMAND value={m.value} is not finite; the device would reject it")
    return _COMMAND.pack(_V, MsgType.COMMAND, m.seq, m.answers, m.value)


def _enc_stop(m: Stop, validate: bool) -> bytes:
    return _STOP.pack(_V, MsgType.STOP, m.reason)


_ENCODERS: dict[type, Callable[..., bytes]] = {
    Hello: _enc_hello,
    Sample: _enc_sample,
    Fault: _enc_fault,
    Query: _enc_query,
    Arm: _enc_arm,
    Configure: _enc_configure,
    Command: _enc_command,
    Stop: _enc_stop,
}


def encode_payload(msg: Message, *, validate: bool = True) -> bytes:
    """Return the payload (version, type, body) of ``msg``.

    With ``validate`` (the default) a COMMAND or CONFIGURE that the receiver would reject for its
    value raises :class:`ProtocolError` instead of going on the wire; ``validate=False`` exists
    only to build bad frames for tests. Out-of-range integers raise ``ProtocolError('value')``.
    """
    encoder = _ENCODERS.get(type(msg))
    if encoder is None:
        raise TypeError(f"not a protocol message: {msg!r}")
    try:
        return encoder(msg, validate)
    except struct.error as exc:
        raise ProtocolError("value", f"cannot encode {msg!r}: {exc}") from None


# --- decoders --------------------------------------------------------------------------------


def _wrong_length(kind: MsgType, body: int, expected: int | str) -> ProtocolError:
    return ProtocolError("length", f"{kind.name} body is {body} bytes; expected {expected}")


def _dec_hello(p: bytes) -> Hello:
    if len(p) == _HELLO_EXT.size:
        (_, _, pmin, pmax, fw, nch, status, period, wd, safe, umin, umax, raw,
         min_p, max_p, auth, nonce) = _HELLO_EXT.unpack(p)
        name = raw.split(b"\x00", 1)[0].decode("ascii", "replace")
        return Hello(pmin, pmax, fw, nch, status, period, wd, safe, umin, umax, name, min_p, max_p, auth, nonce)
    if len(p) != _HELLO.size:
        raise _wrong_length(MsgType.HELLO, len(p) - 2, f"{_HELLO.size - 2} or {_HELLO_EXT.size - 2}")
    (_, _, pmin, pmax, fw, nch, status, period, wd, safe, umin, umax, raw) = _HELLO.unpack(p)
    name = raw.split(b"\x00", 1)[0].decode("ascii", "replace")
    return Hello(pmin, pmax, fw, nch, status, period, wd, safe, umin, umax, name)


def _dec_sample(p: bytes) -> Sample:
    size = len(p)
    if size < _SAMPLE_HEAD_SIZE:
        raise _wrong_length(MsgType.SAMPLE, size - 2, f"at least {SAMPLE_BODY_FIXED}")
    _, _, seq, t_us, status, applied, last, n = _SAMPLE_HEAD.unpack_from(p)
    if n > MAX_CHANNELS or size != _SAMPLE_HEAD_SIZE + 4 * n:
        raise ProtocolError(
            "length",
            f"SAMPLE body is {size - 2} bytes with n={n} channels; expected "
            f"{SAMPLE_BODY_FIXED} + 4*n with n <= {MAX_CHANNELS}",
        )
    return Sample(seq, t_us, status, applied, last, _CHANNELS[n].unpack_from(p, _SAMPLE_HEAD_SIZE))


def _dec_fault(p: bytes) -> Fault:
    if len(p) != _FAULT.size:
        raise _wrong_length(MsgType.FAULT, len(p) - 2, _FAULT.size - 2)
    _, _, t_us, code, status, value = _FAULT.unpack(p)
    return Fault(t_us, code, status, value)


def _dec_query(p: bytes) -> Query:
    if len(p) == _QUERY_NONCE.size:
        return Query(bytes(p[2:]))
    if len(p) != 2:
        raise _wrong_length(MsgType.QUERY, len(p) - 2, f"0 or {NONCE_SIZE}")
    return Query()


def _dec_arm(p: bytes) -> Arm:
    if len(p) != 2:
        raise _wrong_length(MsgType.ARM, len(p) - 2, 0)
    return Arm()


def _dec_configure(p: bytes) -> Configure:
    if len(p) != _CONFIGURE.size:
        raise _wrong_length(MsgType.CONFIGURE, len(p) - 2, _CONFIGURE.size - 2)
    _, _, period, wd, safe, umin, umax = _CONFIGURE.unpack(p)
    problem = configure_problem(period, wd, safe, umin, umax)
    if problem:
        raise ProtocolError("value", problem)
    return Configure(period, wd, safe, umin, umax)


def _dec_command(p: bytes) -> Command:
    if len(p) != _COMMAND.size:
        raise _wrong_length(MsgType.COMMAND, len(p) - 2, _COMMAND.size - 2)
    _, _, seq, answers, value = _COMMAND.unpack(p)
    if not _isfinite(value):
        raise ProtocolError("value", f"COMMAND seq={seq} value={value} is not finite")
    return Command(seq, answers, value)


def _dec_stop(p: bytes) -> Stop:
    if len(p) != _STOP.size:
        raise _wrong_length(MsgType.STOP, len(p) - 2, _STOP.size - 2)
    return Stop(p[2])


_DECODERS: dict[int, Callable[[bytes], Message]] = {
    MsgType.HELLO: _dec_hello,
    MsgType.SAMPLE: _dec_sample,
    MsgType.FAULT: _dec_fault,
    MsgType.QUERY: _dec_query,
    MsgType.ARM: _dec_arm,
    MsgType.CONFIGURE: _dec_configure,
    MsgType.COMMAND: _dec_command,
    MsgType.STOP: _dec_stop,
}


def decode_payload(payload: bytes) -> Message:
    """Decode a payload (CRC already checked); raise :class:`ProtocolError` naming the reason.

    Checks in protocol order: ``short`` (under 2 bytes), ``version``, ``type``, ``length``,
    ``value`` (non-finite COMMAND value; CONFIGURE breaking §4.7). SAMPLE channels may be NaN.
    """
    if len(payload) < 2:
        raise ProtocolError("short", f"payload is {len(payload)} bytes; at least 2 (version, type)")
    version = payload[0]
    if version != PROTOCOL_VERSION:
        raise ProtocolError("version", f"version byte {version}; this host speaks {PROTOCOL_VERSION}")
    decoder = _DECODERS.get(payload[1])
    if decoder is None:
        raise ProtocolError("type", f"unknown message type 0x{payload[1]:02x}")
    try:
        return decoder(payload)
    except ProtocolError as exc:
        exc.msg_type = MsgType(payload[1])
        raise
