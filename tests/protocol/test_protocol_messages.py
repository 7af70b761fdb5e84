"""Message layouts against the offsets in docs/protocol.md §4, rejections, and round trips."""

from __future__ import annotations

import math
import struct

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigloop.protocol.framing import StreamDecoder, decode_frame, encode_frame, encode_serial
from rigloop.protocol.messages import (
    MAX_CHANNELS,
    PROTOCOL_VERSION,
    Arm,
    Command,
    Configure,
    Fault,
    FaultCode,
    Hello,
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


def u(data: bytes, offset: int, size: int) -> int:
    return int.from_bytes(data[offset : offset + size], "little")


def f32(data: bytes, offset: int) -> float:
    return struct.unpack("<f", data[offset : offset + 4])[0]


def test_enum_values_follow_the_document():
    assert PROTOCOL_VERSION == 1
    assert [int(t) for t in MsgType] == [0x01, 0x02, 0x03, 0x10, 0x11, 0x12, 0x13, 0x14]
    assert [int(s) for s in Status] == [1 << i for i in range(8)]
    assert [int(c) for c in FaultCode] == [1, 2, 3, 4, 5]
    assert [int(r) for r in StopReason] == [0, 1, 2, 3]


def test_sample_layout_offsets():
    msg = Sample(0x11223344, 0x0102030405060708, 0xA5C3, 37.5, 0x55667788, (1.5, -2.25, 8.0))
    p = encode_payload(msg)
    body = p[2:]
    assert p[0] == 1 and p[1] == 0x02
    assert len(body) == 23 + 4 * 3
    assert u(body, 0, 4) == 0x11223344
    assert u(body, 4, 8) == 0x0102030405060708
    assert u(body, 12, 2) == 0xA5C3
    assert f32(body, 14) == 37.5
    assert u(body, 18, 4) == 0x55667788
    assert body[22] == 3
    assert [f32(body, 23 + 4 * i) for i in range(3)] == [1.5, -2.25, 8.0]


def test_hello_layout_offsets():
    msg = Hello(1, 2, 0x0304, 5, 0x21, 1000, 50000, 0.5, -1.0, 2.0, "bench-fan")
    body = encode_payload(msg)[2:]
    assert len(body) == 42
    assert body[0] == 1 and body[1] == 2 and u(body, 2, 2) == 0x0304
    assert body[4] == 5 and body[5] == 0x21
    assert u(body, 6, 4) == 1000 and u(body, 10, 4) == 50000
    assert (f32(body, 14), f32(body, 18), f32(body, 22)) == (0.5, -1.0, 2.0)
    assert body[26:42] == b"bench-fan" + b"\x00" * 7


def test_fault_configure_command_stop_layouts():
    body = encode_payload(Fault(0x0102030405060708, 0x8001, 0x0012, -4.0))[2:]
    assert len(body) == 16
    assert u(body, 0, 8) == 0x0102030405060708 and u(body, 8, 2) == 0x8001
    assert u(body, 10, 2) == 0x12 and f32(body, 12) == -4.0

    body = encode_payload(Configure(1000, 20000, 0.0, -12.0, 12.0))[2:]
    assert len(body) == 20
    assert u(body, 0, 4) == 1000 and u(body, 4, 4) == 20000
    assert (f32(body, 8), f32(body, 12), f32(body, 16)) == (0.0, -12.0, 12.0)

    body = encode_payload(Command(0xDEADBEEF, 0x01020304, 0.25))[2:]
    assert len(body) == 12
    assert u(body, 0, 4) == 0xDEADBEEF and u(body, 4, 4) == 0x01020304 and f32(body, 8) == 0.25

    assert encode_payload(Stop(StopReason.ESTOP)) == b"\x01\x14\x01"
    assert encode_payload(Query()) == b"\x01\x10"
    assert encode_payload(Arm()) == b"\x01\x11"


def test_sample_with_nan_channel_is_delivered():
    msg = decode_frame(encode_frame(Sample(1, 2, 0, 0.0, 0, (float("nan"), 1.0))))
    assert math.isnan(msg.channels[0]) and msg.channels[1] == 1.0


def test_reserved_status_bits_and_vendor_codes_survive():
    sample = decode_frame(encode_frame(Sample(1, 2, 0xFF01, 0.0, 0, ())))
    assert sample.status == 0xFF01 and sample.status & Status.ARMED
    fault = decode_frame(encode_frame(Fault(1, 0x8123, 0, float("nan"))))
    assert fault.code == 0x8123 and math.isnan(fault.value)


def test_stop_with_unknown_reason_still_decodes():
    assert decode_frame(encode_frame(Stop(200))) == Stop(200)


def test_hello_name_is_cut_at_first_nul_and_non_ascii_is_replaced():
    payload = bytearray(encode_payload(Hello(1, 1, 1, 1, 0, 1, 1, 0.0, 0.0, 0.0, "fan")))
    payload[26 + 2 + 3 : 26 + 2 + 6] = b"\x00ab"  # garbage after the terminating NUL is ignored
    assert decode_payload(bytes(payload)).name == "fan"
    payload[26 + 2] = 0xE9
    assert decode_payload(bytes(payload)).name == "\ufffdan"


@pytest.mark.parametrize(
    "msg, reason, words",
    [
        (Command(1, 0, float("nan")), "value", "not finite"),
        (Command(1, 0, float("inf")), "value", "not finite"),
        (Configure(1000, 2000, 0.0, 1.0, -1.0), "value", "u_min <= safe <= u_max"),
        (Configure(1000, 999, 0.0, 0.0, 1.0), "value", "watchdog"),
        (Configure(0, 999, 0.0, 0.0, 1.0), "value", "period_us"),
        (Configure(1000, 2000, float("nan"), 0.0, 1.0), "value", "safe"),
        (Command(1 << 32, 0, 1.0), "value", "cannot encode"),
        (Sample(-1, 0, 0, 0.0, 0, ()), "value", "cannot encode"),
        (Sample(1, 0, 0, 0.0, 0, (0.0,) * (MAX_CHANNELS + 1)), "length", "at most 32"),
        (Hello(1, 1, 1, 1, 0, 1, 1, 0.0, 0.0, 0.0, "x" * 17), "value", "at most 16"),
        (Hello(1, 1, 1, 1, 0, 1, 1, 0.0, 0.0, 0.0, "ventilátor"), "value", "ASCII"),
    ],
)
def test_encode_refuses_what_a_receiver_would_reject(msg, reason, words):
    with pytest.raises(ProtocolError, match=words) as info:
        encode_payload(msg)
    assert info.value.reason == reason


def test_validate_false_builds_bad_frames_for_tests():
    frame = encode_frame(Command(1, 0, float("nan")), validate=False)
    with pytest.raises(ProtocolError) as info:
        decode_frame(frame)
    assert info.value.reason == "value"


def test_encode_rejects_non_messages():
    with pytest.raises(TypeError, match="not a protocol message"):
        encode_payload("COMMAND")  # type: ignore[arg-type]


def test_error_messages_name_the_problem():
    with pytest.raises(ProtocolError) as info:
        decode_payload(b"\x01\x13" + b"\x00" * 11)
    assert "COMMAND body is 11 bytes; expected 12" in str(info.value)


# --- round trips -----------------------------------------------------------------------------

f32s = st.floats(width=32, allow_nan=False)
finite32 = st.floats(width=32, allow_nan=False, allow_infinity=False)
u8 = st.integers(0, 0xFF)
u16 = st.integers(0, 0xFFFF)
u32 = st.integers(0, 0xFFFFFFFF)
u64 = st.integers(0, 0xFFFFFFFFFFFFFFFF)


@st.composite
def configures(draw):
    lo, hi = sorted((draw(finite32), draw(finite32)))
    safe = draw(st.sampled_from([lo, hi]))
    period = draw(st.integers(1, 0xFFFFFFFF))
    return Configure(period, draw(st.integers(period, 0xFFFFFFFF)), safe, lo, hi)


messages = st.one_of(
    st.builds(Hello, u8, u8, u16, u8, u8, u32, u32, f32s, f32s, f32s,
              st.text(alphabet=st.characters(min_codepoint=1, max_codepoint=127), max_size=16)),
    st.builds(Sample, u32, u64, u16, f32s, u32, st.lists(f32s, max_size=MAX_CHANNELS).map(tuple)),
    st.builds(Fault, u64, u16, u16, f32s),
    st.builds(Query), st.builds(Arm), configures(),
    st.builds(Command, u32, u32, finite32), st.builds(Stop, u8),
)


@settings(max_examples=400, deadline=None)
@given(messages)
def test_frame_and_serial_round_trip(msg):
    assert decode_frame(encode_frame(msg)) == msg
    assert StreamDecoder().feed(encode_serial(msg)) == [msg]


@settings(max_examples=100, deadline=None)
@given(messages)
def test_payload_never_exceeds_the_maximum(msg):
    assert len(encode_payload(msg)) <= 254
