"""CRC-16/CCITT-FALSE against published check values and against its textbook definition."""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from rigloop.protocol.crc import crc16_ccitt_false


def _bitwise_reference(data: bytes) -> int:
    """The definition, bit by bit: poly 0x1021, init 0xFFFF, MSB first, no reflection, xorout 0."""
    crc = 0xFFFF
    for byte in data:
        crc ^= byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ 0x1021) if crc & 0x8000 else (crc << 1)
            crc &= 0xFFFF
    return crc


def test_check_value_of_123456789():
    # Check value of CRC-16/CCITT-FALSE: 0x29B1 — "Catalogue of parametrised CRC algorithms"
    # (reveng project) (from memory).
    assert crc16_ccitt_false(b"123456789") == 0x29B1


def test_single_letter_and_empty():
    # "A" -> 0xB915 with the 0xFFFF-initialised CCITT CRC (from memory); empty input gives the
    # initial value by definition.
    assert crc16_ccitt_false(b"A") == 0xB915
    assert crc16_ccitt_false(b"") == 0xFFFF


def test_reference_agrees_on_check_value():
    assert _bitwise_reference(b"123456789") == 0x29B1


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=300))
def test_matches_bitwise_definition(data):
    assert crc16_ccitt_false(data) == _bitwise_reference(data)


@settings(max_examples=100, deadline=None)
@given(st.binary(min_size=1, max_size=100), st.integers(min_value=0), st.integers(min_value=0, max_value=7))
def test_detects_every_single_bit_error(data, position, bit):
    # Any CRC whose generator has more than one term detects all single-bit errors (common practice).
    index = position % len(data)
    corrupted = bytearray(data)
    corrupted[index] ^= 1 << bit
    assert crc16_ccitt_false(bytes(corrupted)) != crc16_ccitt_false(data)
