"""Frames on the wire: payload + CRC (UDP datagram), COBS + 0x00 (serial), and the decoders.

Receivers never raise: a bad frame is dropped and counted in :class:`RejectCounters` under the
reason of docs/protocol.md §3, so a noisy cable or a foreign sender shows up as numbers the
supervisor can trip on, not as an exception that kills the loop.
"""

from __future__ import annotations

import struct
from binascii import crc_hqx
from dataclasses import dataclass, fields
from typing import Callable

from rigloop.protocol.auth import reject_tagged
from rigloop.protocol.cobs import CobsError, cobs_encode, decode_zero_free
from rigloop.protocol.messages import REASONS, Message, ProtocolError, decode_payload, encode_payload
from rigloop.protocol.sequence import SequenceTracker, is_newer

__all__ = [
    "MAX_FRAME",
    "MAX_SERIAL_RUN",
    "DatagramDecoder",
    "RejectCounters",
    "SequenceTracker",
    "StreamDecoder",
    "decode_frame",
    "encode_frame",
    "encode_serial",
    "is_newer",
]

#: Largest frame: 254-byte payload + 2-byte CRC.
MAX_FRAME = 256
#: Largest COBS-encoded frame between two delimiters (256 + 2 code bytes).
MAX_SERIAL_RUN = 258

_CRC = struct.Struct("<H")
_CRC_PACK = _CRC.pack


def encode_frame(msg: Message, *, validate: bool = True, auth=None) -> bytes:
    """Payload followed by its CRC-16/CCITT-FALSE (little-endian): one UDP datagram.

    ``auth`` (a :mod:`rigloop.protocol.auth` end) seals the payload first when it has a session.
    """
    payload = encode_payload(msg, validate=validate)
    if auth is not None:
        payload = auth.seal(payload)
    return payload + _CRC_PACK(crc_hqx(payload, 0xFFFF))


def encode_serial(msg: Message, *, validate: bool = True, auth=None) -> bytes:
    """COBS-encoded frame followed by the 0x00 delimiter: what goes on a serial line."""
    return cobs_encode(encode_frame(msg, validate=validate, auth=auth)) + b"\x00"


def decode_frame(frame: bytes, auth=None) -> Message:
    """Check length and CRC, open the tag, then decode; raise ProtocolError naming the reason.

    Without ``auth`` a tagged frame (type byte with 0x80 set) is rejected under ``auth``: this
    receiver has no key to check it with.
    """
    size = len(frame)
    if size < 4:
        raise ProtocolError("short", f"frame is {size} bytes; at least 4 (version, type, CRC)")
    payload = frame[:-2]
    got = frame[-2] | (frame[-1] << 8)
    want = crc_hqx(payload, 0xFFFF)
    if got != want:
        raise ProtocolError("crc", f"CRC 0x{got:04x} in the frame, 0x{want:04x} computed")
    if auth is not None:
        payload = auth.open(payload)
    elif payload[1] & 0x80:
        reject_tagged(payload)
    return decode_payload(payload)


@dataclass(slots=True)
class RejectCounters:
    """Frames that passed the codec's checks (``accepted``) and rejections per reason.

    ``sequence`` is counted by :class:`SequenceTracker` on top of ``accepted``: a SAMPLE dropped
    for an old sequence number passed the codec first.
    """

    accepted: int = 0
    cobs: int = 0
    short: int = 0
    crc: int = 0
    version: int = 0
    type: int = 0
    auth: int = 0
    length: int = 0
    value: int = 0
    sequence: int = 0

    def count(self, reason: str) -> None:
        setattr(self, reason, getattr(self, reason) + 1)

    @property
    def total_rejected(self) -> int:
        return sum(getattr(self, reason) for reason in REASONS)

    def as_dict(self) -> dict[str, int]:
        out = {f.name: getattr(self, f.name) for f in fields(self)}
        out["total_rejected"] = self.total_rejected
        return out


RejectHook = Callable[[ProtocolError], None]


class DatagramDecoder:
    """One frame per datagram (UDP). ``decode`` returns the message or None, never raises.

    ``on_reject``, if given, is called with each rejection (reason, detail, type byte) after it
    was counted — for logs, or for a device that answers a rejected CONFIGURE with FAULT 4.
    """

    __slots__ = ("counters", "on_reject", "auth")

    def __init__(self, counters: RejectCounters | None = None, *, on_reject: RejectHook | None = None,
                 auth=None):
        self.counters = counters if counters is not None else RejectCounters()
        self.on_reject = on_reject
        self.auth = auth

    def decode(self, datagram: bytes) -> Message | None:
        try:
            msg = decode_frame(datagram, self.auth)
        except ProtocolError as exc:
            self.counters.count(exc.reason)
            if self.on_reject is not None:
                self.on_reject(exc)
            return None
        self.counters.accepted += 1
        return msg


class StreamDecoder:
    """Serial byte stream -> messages. Splits at 0x00, COBS-decodes, checks; never raises.

    Resynchronisation is free: every 0x00 starts a new run, so one bad run costs one frame. A run
    longer than ``max_frame`` bytes is counted once under ``length`` and the bytes up to the next
    0x00 are skipped. Empty runs (0x00 0x00) are padding and ignored. The bytes before the first
    0x00 seen may be the tail of a frame sent before we started listening: they are decoded if
    they happen to form a whole frame, and dropped *without* counting otherwise.
    ``skipped_bytes`` totals the bytes of such start-up runs and of overlong runs.
    ``on_reject`` works as for :class:`DatagramDecoder` (it must not raise).
    """

    __slots__ = ("counters", "max_frame", "on_reject", "skipped_bytes", "auth", "_buf", "_synced", "_overflow")

    def __init__(
        self,
        counters: RejectCounters | None = None,
        max_frame: int = MAX_SERIAL_RUN,
        *,
        on_reject: RejectHook | None = None,
        auth=None,
    ):
        self.auth = auth
        self.counters = counters if counters is not None else RejectCounters()
        self.max_frame = max_frame
        self.on_reject = on_reject
        self.skipped_bytes = 0
        self._buf = bytearray()
        self._synced = False
        self._overflow = False

    def feed(self, data: bytes) -> list[Message]:
        runs = bytes(data).split(b"\x00")
        if len(runs) == 1:  # no delimiter yet: keep collecting
            self._append(runs[0])
            return []
        out: list[Message] = []
        # The first run completes whatever was pending from earlier calls.
        head = runs[0]
        if self._overflow:
            self.skipped_bytes += len(head)
            self._overflow = False
        else:
            if self._buf:
                head = bytes(self._buf) + head
                self._buf.clear()
            if head:
                self._complete(head, out)
        self._synced = True
        for index in range(1, len(runs) - 1):
            run = runs[index]
            if run:
                self._complete(run, out)
        self._append(runs[-1])
        return out

    def _append(self, chunk: bytes) -> None:
        if self._overflow:
            self.skipped_bytes += len(chunk)
            return
        buf = self._buf
        buf += chunk
        if len(buf) > self.max_frame:
            self._too_long(len(buf))
            buf.clear()
            self._overflow = True

    def _too_long(self, size: int) -> None:
        self.skipped_bytes += size
        if self._synced:
            self._reject(ProtocolError("length", f"{size} bytes without a 0x00 delimiter; at most {self.max_frame}"))

    def _complete(self, run: bytes, out: list[Message]) -> None:
        if len(run) > self.max_frame:
            self._too_long(len(run))
        else:
            self._run(run, out)

    def _run(self, run: bytes, out: list[Message]) -> None:
        try:
            msg = decode_frame(decode_zero_free(run), self.auth)
        except CobsError as exc:
            error = ProtocolError("cobs", str(exc))
        except ProtocolError as exc:
            error = exc
        else:
            self.counters.accepted += 1
            out.append(msg)
            return
        if self._synced:
            self._reject(error)
        else:
            self.skipped_bytes += len(run)

    def _reject(self, error: ProtocolError) -> None:
        self.counters.count(error.reason)
        if self.on_reject is not None:
            self.on_reject(error)
