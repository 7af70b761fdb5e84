"""Consistent Overhead Byte Stuffing (COBS): removes every 0x00 from a frame so that 0x00 can
delimit frames on a serial byte stream.

Method: "Consistent Overhead Byte Stuffing", IEEE/ACM Transactions on Networking, 1999. The
data is cut at each zero byte; each piece is sent as a code byte ``len(piece) + 1`` followed by
the piece, and the zero is implied. A piece longer than 254 bytes is cut into blocks of 254
bytes with code 0xFF, which means "254 bytes, no zero follows".

Why a codec of our own instead of a package: no maintained COBS package is installed in this
project's environment, the algorithm is forty lines, and owning it lets us pin the one detail
implementations disagree on. When the data *ends* with a full 254-byte block, this encoder emits
nothing after that block (the shorter form); the paper's reference code emits a final ``01``.
The decoder accepts both forms, so a device may use either.
"""

from __future__ import annotations

_MAX_BLOCK = 254


class CobsError(ValueError):
    """The bytes are not a valid COBS encoding (message says where and why)."""


_CODE = tuple(bytes((length + 1,)) for length in range(_MAX_BLOCK))


def cobs_encode(data: bytes) -> bytes:
    """Encode ``data`` (may contain zeros) into bytes that contain no zero. No delimiter is added."""
    pieces = bytes(data).split(b"\x00")
    try:  # fast path: every piece shorter than a full block (always so for protocol frames)
        return b"".join([_CODE[len(piece)] + piece for piece in pieces])
    except IndexError:
        return _encode_long(pieces)


def _encode_long(pieces: list[bytes]) -> bytes:
    out = bytearray()
    last = len(pieces) - 1
    for index, piece in enumerate(pieces):
        length = len(piece)
        start = 0
        while length - start >= _MAX_BLOCK:
            out.append(0xFF)
            out += piece[start : start + _MAX_BLOCK]
            start += _MAX_BLOCK
        rest = length - start
        if index == last and rest == 0 and length > 0:
            break  # data ended on a full block: the 0xFF code already says "no zero follows"
        out.append(rest + 1)
        out += piece[start:]
    return bytes(out)


def cobs_decode(data: bytes) -> bytes:
    """Decode one COBS-encoded run (without its 0x00 delimiter); raise :class:`CobsError`."""
    if not data:
        raise CobsError("empty COBS run: the shortest valid encoding is one code byte")
    zero_at = data.find(0)
    if zero_at >= 0:
        raise CobsError(f"zero byte inside the run at offset {zero_at}")
    return decode_zero_free(data)


def decode_zero_free(data: bytes) -> bytes:
    """Decode a non-empty run already known to hold no zero byte (the stream decoder's fast path)."""
    pieces = []
    size = len(data)
    i = 0
    while i < size:
        code = data[i]
        end = i + code
        if end > size:
            raise CobsError(
                f"code byte 0x{code:02x} at offset {i} points past the end of the {size}-byte run"
            )
        if code == 0xFF:
            return _decode_with_full_blocks(data)
        pieces.append(data[i + 1 : end])
        i = end
    return b"\x00".join(pieces)  # every piece but the last was followed by a zero


def _decode_with_full_blocks(data: bytes) -> bytes:
    out = bytearray()
    size = len(data)
    i = 0
    while i < size:
        code = data[i]
        end = i + code
        if end > size:
            raise CobsError(
                f"code byte 0x{code:02x} at offset {i} points past the end of the {size}-byte run"
            )
        out += data[i + 1 : end]
        i = end
        if code != 0xFF and i < size:
            out.append(0)
    return bytes(out)
