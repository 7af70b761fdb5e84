"""COBS against the method's paper, the widely published table of test cases, and properties."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigloop.protocol.cobs import CobsError, cobs_decode, cobs_encode

H = bytes.fromhex

# The well-known public table of COBS examples (encoded form shown with its 0x00 delimiter),
# as recalled (from memory); each row is also checked by reasoning in the comment.
TABLE = [
    (H("00"), H("010100")),  # empty piece, zero, empty piece: code 01 twice
    (H("0000"), H("01010100")),  # three empty pieces
    (H("001100"), H("0102110100")),  # "", "11", "" -> 01 | 02 11 | 01
    (H("11220033"), H("031122023300")),  # "11 22" -> 03 11 22 ; "33" -> 02 33
    (H("11223344"), H("051122334400")),  # one piece of four bytes -> 05 ...
    (H("11000000"), H("021101010100")),  # "11" then three empty pieces
    # 254 non-zero bytes 01..FE: one full block, code FF, nothing after it (shorter form).
    (bytes(range(1, 255)), b"\xff" + bytes(range(1, 255)) + b"\x00"),
    # 00 01..FE: empty piece (01) then a full block.
    (bytes(range(0, 255)), b"\x01\xff" + bytes(range(1, 255)) + b"\x00"),
    # 01..FF (255 bytes): full block 01..FE, then the piece "FF" -> 02 FF.
    (bytes(range(1, 256)), b"\xff" + bytes(range(1, 255)) + b"\x02\xff\x00"),
    # 02..FF 00 (254 non-zero, then zero): full block, then 01 for the zero, 01 for the empty end.
    (bytes(range(2, 256)) + b"\x00", b"\xff" + bytes(range(2, 256)) + b"\x01\x01\x00"),
    # 03..FF 00 01: piece of 253 bytes -> FE ..., then "01" -> 02 01.
    (bytes(range(3, 256)) + b"\x00\x01", b"\xfe" + bytes(range(3, 256)) + b"\x02\x01\x00"),
]


@pytest.mark.parametrize("data, encoded", TABLE, ids=[f"case{i}" for i in range(len(TABLE))])
def test_public_table(data, encoded):
    assert cobs_encode(data) + b"\x00" == encoded
    assert cobs_decode(encoded[:-1]) == data


def test_paper_example():
    # "Consistent Overhead Byte Stuffing", IEEE/ACM Transactions on Networking, 1999 — its
    # worked example stuffs a short IP-like header (from memory). Checked by reasoning: pieces
    # "45" | "" | "2C 4C 79" | "" | "40 06 4F 37" get codes 02, 01, 04, 01, 05.
    data = H("45 00 00 2C 4C 79 00 00 40 06 4F 37".replace(" ", ""))
    assert cobs_encode(data) == H("02 45 01 04 2C 4C 79 01 05 40 06 4F 37".replace(" ", ""))


def test_decoder_accepts_paper_reference_form_for_full_final_block():
    # The paper's reference encoder ends 254 non-zero bytes with an extra code 01 (from memory);
    # both forms must decode to the same data.
    data = bytes(range(1, 255))
    assert cobs_decode(b"\xff" + data + b"\x01") == data
    assert cobs_decode(b"\xff" + data) == data


@pytest.mark.parametrize(
    "run, where",
    [
        (H("051122"), "past the end"),
        (H("ff01"), "past the end"),
        (H("021100"), "zero byte"),
        (b"", "empty"),
    ],
)
def test_invalid_runs_raise_cobs_error(run, where):
    with pytest.raises(CobsError, match=where):
        cobs_decode(run)


@settings(max_examples=300, deadline=None)
@given(st.binary(max_size=1200))
def test_round_trip_and_overhead(data):
    encoded = cobs_encode(data)
    assert 0 not in encoded
    # Overhead: at least one code byte, at most one per 254 bytes plus one (the paper's bound).
    assert len(data) + 1 <= len(encoded) <= len(data) + 1 + len(data) // 254
    assert cobs_decode(encoded) == data


@settings(max_examples=200, deadline=None)
@given(st.lists(st.sampled_from([0, 1, 0xFE, 0xFF, 0x42]), max_size=600).map(bytes))
def test_round_trip_zero_heavy_and_block_edges(data):
    assert cobs_decode(cobs_encode(data)) == data
