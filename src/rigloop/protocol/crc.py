"""CRC-16/CCITT-FALSE, the frame check of the wire protocol.

Parameters: polynomial 0x1021, initial value 0xFFFF, no reflection, final XOR 0x0000; the CRC
of ASCII ``123456789`` is 0x29B1. The standard library's ``binascii.crc_hqx`` computes exactly
this polynomial without reflection, so seeding it with 0xFFFF gives the variant in C speed.
"""

from __future__ import annotations

from binascii import crc_hqx

CRC_INIT = 0xFFFF


def crc16_ccitt_false(data: bytes) -> int:
    """Return the CRC-16/CCITT-FALSE of ``data`` as an int in [0, 0xFFFF]."""
    return crc_hqx(data, CRC_INIT)
