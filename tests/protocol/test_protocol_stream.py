"""Frame decoders: never raise, count every bad frame, recover every good one after garbage."""

from __future__ import annotations

import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from rigloop.protocol.cobs import CobsError, cobs_decode, cobs_encode
from rigloop.protocol.framing import (
    MAX_SERIAL_RUN,
    DatagramDecoder,
    RejectCounters,
    StreamDecoder,
    decode_frame,
    encode_frame,
    encode_serial,
)
from rigloop.protocol.messages import REASONS, Command, Configure, MsgType, ProtocolError, Query, Sample, Stop

finite32 = st.floats(width=32, allow_nan=False, allow_infinity=False)
samples = st.builds(
    Sample, st.integers(0, 2**32 - 1), st.integers(0, 2**64 - 1), st.integers(0, 0xFFFF), finite32,
    st.integers(0, 2**32 - 1), st.lists(finite32, max_size=32).map(tuple),
)
good_messages = st.one_of(samples, st.builds(Command, st.integers(0, 2**32 - 1), st.integers(0, 2**32 - 1), finite32))


def feed_in_chunks(decoder: StreamDecoder, stream: bytes, cuts: list[int]) -> list:
    out = []
    points = sorted({c % (len(stream) + 1) for c in cuts})
    start = 0
    for point in points + [len(stream)]:
        out += decoder.feed(stream[start:point])
        start = point
    return out


def is_bad_run(run: bytes) -> bool:
    try:
        decode_frame(cobs_decode(run))
    except (CobsError, ProtocolError):
        return True
    return False


@settings(max_examples=100, deadline=None)
@given(st.lists(good_messages, max_size=12), st.lists(st.integers(0, 10_000), max_size=30))
def test_good_stream_any_chunking(msgs, cuts):
    stream = b"".join(encode_serial(m) for m in msgs)
    decoder = StreamDecoder()
    assert feed_in_chunks(decoder, stream, cuts) == msgs
    assert decoder.counters.accepted == len(msgs)
    assert decoder.counters.total_rejected == 0


garbage_runs = st.binary(min_size=1, max_size=280).map(lambda b: b.replace(b"\x00", b"\x5a"))


@settings(max_examples=100, deadline=None)
@given(
    st.lists(st.tuples(st.lists(garbage_runs, max_size=3), good_messages), min_size=1, max_size=6),
    st.lists(st.integers(0, 20_000), max_size=40),
)
def test_every_good_frame_after_garbage_is_recovered(parts, cuts):
    stream = b"\x00"  # receiver in sync from the start
    expected, bad = [], 0
    for garbage, msg in parts:
        for run in garbage:
            assume(len(run) > MAX_SERIAL_RUN or is_bad_run(run))
            stream += run + b"\x00"
            bad += 1
        stream += encode_serial(msg)
        expected.append(msg)
    decoder = StreamDecoder()
    assert feed_in_chunks(decoder, stream, cuts) == expected
    assert decoder.counters.total_rejected == bad
    assert decoder.counters.accepted == len(expected)


def count_runs(stream: bytes, max_frame: int) -> int:
    """Independent count of what the decoder must report once: every completed non-empty run,
    plus an unfinished run already longer than max_frame."""
    pieces = stream.split(b"\x00")
    completed, tail = pieces[:-1], pieces[-1]
    return sum(1 for p in completed if p) + (1 if len(tail) > max_frame else 0)


@settings(max_examples=300, deadline=None)
@given(st.binary(max_size=2000), st.lists(st.integers(0, 5000), max_size=40), st.integers(8, 300))
def test_random_bytes_never_raise_and_every_run_is_accounted_for(data, cuts, max_frame):
    stream = b"\x00" + data
    decoder = StreamDecoder(max_frame=max_frame)
    one_shot = StreamDecoder(max_frame=max_frame)
    msgs = feed_in_chunks(decoder, stream, cuts)
    assert msgs == one_shot.feed(stream)
    assert decoder.counters == one_shot.counters
    c = decoder.counters
    assert c.accepted == len(msgs)
    assert c.accepted + c.total_rejected == count_runs(stream, max_frame)


@settings(max_examples=200, deadline=None)
@given(good_messages, st.integers(0, 200), st.integers(0, 7), st.lists(st.integers(0, 500), max_size=5))
def test_single_bit_error_is_rejected_and_the_next_frame_survives(msg, position, bit, cuts):
    frame = bytearray(encode_serial(msg))
    index = position % (len(frame) - 1)  # any byte but the delimiter
    frame[index] ^= 1 << bit
    follower = Query()
    stream = b"\x00" + bytes(frame) + encode_serial(follower)
    decoder = StreamDecoder()
    got = feed_in_chunks(decoder, stream, cuts)
    assert got[-1] == follower
    # A flipped bit either breaks COBS/CRC (one rejection) or, if it made a 0x00, splits the
    # frame in two bad runs; it never yields a wrong message (CRC-16 catches every 1-bit error).
    assert got == [follower]
    assert 1 <= decoder.counters.total_rejected <= 2


def test_overlong_run_is_counted_once_then_resynchronises():
    decoder = StreamDecoder()
    junk = b"\x42" * (MAX_SERIAL_RUN + 50)
    assert decoder.feed(b"\x00" + junk[:100]) == []
    assert decoder.feed(junk[100:]) == []
    assert decoder.counters.length == 1
    assert decoder.feed(b"\x42\x42\x00" + encode_serial(Stop(1))) == [Stop(1)]
    assert decoder.counters.length == 1 and decoder.counters.accepted == 1


def test_empty_runs_are_padding():
    decoder = StreamDecoder()
    assert decoder.feed(b"\x00\x00\x00" + encode_serial(Query()) + b"\x00\x00") == [Query()]
    assert decoder.counters.total_rejected == 0


def test_partial_frame_at_start_is_skipped_without_counting():
    frame = encode_serial(Sample(1, 2, 3, 4.0, 5, (6.0,)))
    decoder = StreamDecoder()
    assert decoder.feed(frame[7:] + frame) == [Sample(1, 2, 3, 4.0, 5, (6.0,))]
    assert decoder.counters.total_rejected == 0
    assert decoder.skipped_bytes == len(frame) - 8


def test_whole_frame_at_start_is_not_lost():
    assert StreamDecoder().feed(encode_serial(Query())) == [Query()]


def test_bad_run_after_sync_is_counted_by_reason():
    decoder = StreamDecoder()
    bad_crc = bytearray(encode_frame(Command(1, 0, 1.0)))
    bad_crc[-1] ^= 0xFF
    decoder.feed(b"\x00" + cobs_encode(bytes(bad_crc)) + b"\x00" + b"\x05\x11\x00" + b"\x01\x00")
    assert (decoder.counters.crc, decoder.counters.cobs, decoder.counters.short) == (1, 1, 1)


def test_shared_counters_and_as_dict():
    counters = RejectCounters()
    DatagramDecoder(counters).decode(b"\x01")
    StreamDecoder(counters).feed(b"\x00\x03\x01\x10\x00")
    d = counters.as_dict()
    assert d["short"] == 2 and d["total_rejected"] == 2 and d["accepted"] == 0
    assert set(REASONS) <= set(d)


def test_datagram_decoder_never_raises():
    decoder = DatagramDecoder()
    assert decoder.decode(encode_frame(Query())) == Query()
    assert decoder.decode(b"") is None
    assert decoder.decode(b"\x02\x10\xff\xff") is None
    assert decoder.counters.accepted == 1
    assert decoder.counters.short == 1 and decoder.counters.crc == 1


@settings(max_examples=300, deadline=None)
@given(st.binary(max_size=400))
def test_datagram_decoder_random_input(data):
    decoder = DatagramDecoder()
    result = decoder.decode(data)
    assert (result is None) == (decoder.counters.total_rejected == 1)


@pytest.mark.parametrize("reason", REASONS)
def test_counter_exists_for_every_reason(reason):
    counters = RejectCounters()
    counters.count(reason)
    assert getattr(counters, reason) == 1 and counters.total_rejected == 1


def test_reject_hook_sees_reason_and_type():
    seen = []
    bad_configure = encode_frame(Configure(1000, 2000, 0.0, 1.0, -1.0), validate=False)
    decoder = StreamDecoder(on_reject=seen.append)
    decoder.feed(b"\x00" + cobs_encode(bad_configure) + b"\x00\x05\x11\x00" + b"\x42" * 300 + b"\x00")
    assert [(e.reason, e.msg_type) for e in seen] == [("value", MsgType.CONFIGURE), ("cobs", None), ("length", None)]
    assert "u_min <= safe <= u_max" in seen[0].detail

    seen.clear()
    datagrams = DatagramDecoder(on_reject=seen.append)
    assert datagrams.decode(bad_configure) is None
    assert datagrams.decode(b"\x01\x7f\x00\x00") is None
    assert [(e.reason, e.msg_type) for e in seen] == [("value", MsgType.CONFIGURE), ("crc", None)]
