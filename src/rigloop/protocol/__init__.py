"""The wire protocol (docs/protocol.md): CRC, COBS, messages, frames and decoders. No I/O."""

from __future__ import annotations

from rigloop.protocol.cobs import CobsError, cobs_decode, cobs_encode
from rigloop.protocol.crc import crc16_ccitt_false
from rigloop.protocol.framing import (
    MAX_FRAME,
    MAX_SERIAL_RUN,
    DatagramDecoder,
    RejectCounters,
    StreamDecoder,
    decode_frame,
    encode_frame,
    encode_serial,
)
from rigloop.protocol.messages import (
    MAX_CHANNELS,
    PROTOCOL_VERSION,
    REASONS,
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
    StopReason,
    decode_payload,
    encode_payload,
)
from rigloop.protocol.sequence import SequenceTracker, is_newer

__all__ = [
    "MAX_CHANNELS", "MAX_FRAME", "MAX_SERIAL_RUN", "PROTOCOL_VERSION", "REASONS",
    "Arm", "CobsError", "Command", "Configure", "DatagramDecoder", "Fault", "FaultCode", "Hello",
    "Message", "MsgType", "ProtocolError", "Query", "RejectCounters", "Sample", "SequenceTracker",
    "Status", "Stop", "StopReason", "StreamDecoder", "cobs_decode", "cobs_encode",
    "crc16_ccitt_false", "decode_frame", "decode_payload", "encode_frame", "encode_payload",
    "encode_serial", "is_newer",
]
