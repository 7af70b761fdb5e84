"""Authenticated frames (docs/protocol.md §14): the MAC against published values, sealing and
opening, replay, and the stream and datagram decoders fuzzed with authentication on."""

from __future__ import annotations

import hashlib
import hmac

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigloop.link.key_file import KeyFileError, load_key
from rigloop.protocol.auth import TAG_SIZE, DeviceAuth, HostAuth, SessionMac
from rigloop.protocol.framing import DatagramDecoder, StreamDecoder, decode_frame, encode_frame, encode_serial
from rigloop.protocol.messages import Command, Hello, ProtocolError, Query, Sample

# RFC 4231 ("Identifiers and Test Vectors for HMAC-SHA-224, HMAC-SHA-256, HMAC-SHA-384, and
# HMAC-SHA-512", IETF, 2005), section 4, HMAC-SHA-256 of test cases 1-7. Values recalled from
# memory; each is also checked below against Python's hmac/hashlib (a reference implementation),
# and test case 1 was compared with a published copy of the RFC's table.
RFC4231 = [
    (b"\x0b" * 20, b"Hi There", "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7"),
    (b"Jefe", b"what do ya want for nothing?", "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"),
    (b"\xaa" * 20, b"\xdd" * 50, "773ea91e36800e46854db8ebd09181a72959098b3ef8c122d9635514ced565fe"),
    (bytes(range(1, 26)), b"\xcd" * 50, "82558a389a443c0ea4cc819899f2083a85f0faa3e578f8077a2e3ff46729665b"),
    (b"\x0c" * 20, b"Test With Truncation", "a3b6167473100ee06e0c796c2955552b"),      # truncated to 128 bits
    (b"\xaa" * 131, b"Test Using Larger Than Block-Size Key - Hash Key First",
     "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54"),
    (b"\xaa" * 131, b"This is a test using a larger than block-size key and a larger than block-size data. "
                    b"The key needs to be hashed before being used by the HMAC algorithm.",
     "9b09ffa71b942fcb27635fbcd5b0e944bfdc63644f0713938a7f51535c3a35e2"),
]
KEY = bytes(range(32))


@pytest.mark.parametrize("key,data,want", RFC4231, ids=[f"tc{i + 1}" for i in range(len(RFC4231))])
def test_session_mac_is_hmac_sha256_truncated(key, data, want):
    # With an empty session the tag is the RFC's HMAC-SHA-256, cut to its first 8 bytes.
    assert SessionMac(key, b"").tag(data) == bytes.fromhex(want)[:TAG_SIZE]
    assert hmac.new(key, data, hashlib.sha256).hexdigest().startswith(want)   # the reference agrees


def test_the_session_nonces_are_part_of_the_tag():
    a = SessionMac(KEY, b"A" * 16).tag(b"payload")
    assert a == hmac.new(KEY, b"A" * 16 + b"payload", hashlib.sha256).digest()[:8]
    assert a != SessionMac(KEY, b"B" * 16).tag(b"payload")


def _pair():
    host, device = HostAuth(KEY), DeviceAuth(KEY)
    device.start_session(host.host_nonce)
    hello = Hello(1, 1, 1, 1, 0, 1000, 10000, 0.0, 0.0, 1.0, "x", 100, 10**6, 1, device.device_nonce)
    assert decode_frame(encode_frame(hello, auth=device), host) == hello
    return host, device


def test_seal_open_both_ways_and_replays_are_refused():
    host, device = _pair()
    cmd = Command(1, 0, 0.5)
    frame = encode_frame(cmd, auth=host)
    assert frame[1] == 0x93 and len(frame) == len(encode_frame(cmd)) + 12
    assert decode_frame(frame, device) == cmd
    with pytest.raises(ProtocolError) as info:
        decode_frame(frame, device)
    assert info.value.reason == "auth" and "replay" in info.value.detail
    sample = Sample(3, 30, 33, 0.5, 1, (1.0, 2.0))
    assert decode_frame(encode_frame(sample, auth=device), host) == sample


def test_the_query_stays_plain_and_a_keyed_device_refuses_other_plain_frames():
    host, device = _pair()
    assert encode_frame(Query(host.host_nonce), auth=host)[1] == 0x10
    for msg in (Command(9, 0, 1.0), Query()):
        with pytest.raises(ProtocolError) as info:
            decode_frame(encode_frame(msg), device)
        assert info.value.reason == "auth"


finite32 = st.floats(width=32, allow_nan=False, allow_infinity=False)
commands = st.builds(Command, st.integers(0, 2**32 - 1), st.integers(0, 2**32 - 1), finite32)


@settings(max_examples=60, deadline=None)
@given(st.lists(commands, min_size=1, max_size=10),
       st.lists(st.binary(min_size=1, max_size=200).map(lambda b: b.replace(b"\x00", b"\x5a")), max_size=10),
       st.randoms(use_true_random=False))
def test_stream_with_auth_recovers_every_good_frame_after_garbage(msgs, garbage, rnd):
    host, device = _pair()
    stream, expected = b"\x00", []
    for i, msg in enumerate(msgs):
        if i < len(garbage):
            stream += garbage[i] + b"\x00"
        stream += encode_serial(msg, auth=host)
        expected.append(msg)
    decoder = StreamDecoder(auth=device)
    got = []
    cut = 0
    while cut < len(stream):                      # arbitrary chunking
        step = rnd.randint(1, 64)
        got += decoder.feed(stream[cut:cut + step])
        cut += step
    assert got == expected
    assert decoder.counters.accepted == len(msgs)


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=300))
def test_datagram_decoder_with_auth_never_raises_on_random_input(data):
    host, device = _pair()
    decoder = DatagramDecoder(auth=device)
    result = decoder.decode(data)
    assert (result is None) == (decoder.counters.total_rejected == 1)


@settings(max_examples=200, deadline=None)
@given(commands, st.integers(0, 10_000), st.integers(0, 7))
def test_any_bit_flip_in_a_tagged_frame_is_rejected(cmd, position, bit):
    host, device = _pair()
    frame = bytearray(encode_frame(cmd, auth=host))
    frame[position % len(frame)] ^= 1 << bit
    decoder = DatagramDecoder(auth=device)
    assert decoder.decode(bytes(frame)) is None
    follower = encode_frame(Command(cmd.seq, 0, 1.0), auth=host)
    assert decoder.decode(follower) == Command(cmd.seq, 0, 1.0)      # the next good frame opens


def test_key_file_rules(tmp_path):
    path = tmp_path / "rig.key"
    path.write_text(KEY.hex() + "\n")
    path.chmod(0o600)
    assert load_key(path) == KEY
    path.chmod(0o640)
    with pytest.raises(KeyFileError, match=f"chmod 600 {path}"):
        load_key(path)
    path.chmod(0o600)
    for text, what in (("abc", "hex"), ("00" * 8, "16..64"), ("zz" * 16, "hex")):
        path.write_text(text)
        with pytest.raises(KeyFileError, match=what):
            load_key(path)
    with pytest.raises(KeyFileError, match="not found"):
        load_key(tmp_path / "missing.key")

