"""The frames docs/protocol.md §10 works out by hand: each decodes to the message the document
names, and its CRC agrees with Python's own ``binascii.crc_hqx`` (CRC-16/CCITT-FALSE with initial
value 0xFFFF), an implementation independent of rigloop's encoder."""

from __future__ import annotations

import binascii
import re
from pathlib import Path

from rigloop.protocol.framing import decode_frame
from rigloop.protocol.messages import Arm, Command, Query, Stop

DOC = Path(__file__).resolve().parents[2] / "docs" / "protocol.md"
EXPECTED = {
    "arm": Arm(),
    "stop_estop": Stop(1),
    "command_50": Command(2, 1, 50.0),
    "query_nonce": Query(bytes.fromhex("0011223344556677")),
}


def hand_frames() -> dict[str, bytes]:
    text = DOC.read_text(encoding="utf-8")
    return {m.group(1): bytes.fromhex(m.group(2).replace("\n", " "))
            for m in re.finditer(r"hand: (\w+)\n((?:[0-9a-f]{2}(?: [0-9a-f]{2})*\n)+)", text)}


def test_every_hand_frame_is_in_the_document():
    assert set(hand_frames()) == set(EXPECTED)


def test_hand_frames_decode_and_their_crc_is_independent():
    for name, frame in hand_frames().items():
        payload, crc = frame[:-2], int.from_bytes(frame[-2:], "little")
        assert binascii.crc_hqx(payload, 0xFFFF) == crc, name
        assert decode_frame(frame) == EXPECTED[name], name


def test_the_bitwise_crc_steps_in_the_document():
    # §10 lists the register after every bit for the ARM frame; recompute them bit by bit.
    reg, steps = 0xFFFF, []
    for byte in (0x01, 0x11):
        reg ^= byte << 8
        for _ in range(8):
            reg = ((reg << 1) ^ 0x1021) & 0xFFFF if reg & 0x8000 else (reg << 1) & 0xFFFF
            steps.append(f"{reg:04X}")
    text = DOC.read_text(encoding="utf-8")
    assert " ".join(steps[:8]) in text and " ".join(steps[8:]) in text
    assert reg == 0x2C2E
