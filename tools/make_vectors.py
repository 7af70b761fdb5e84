#!/usr/bin/env python3
"""Write docs/protocol-vectors.json: encoded examples both the Python codec and the C firmware
stub are tested against. The format is described in docs/protocol.md §12.

Usage:  python tools/make_vectors.py            # rewrite the file
        python tools/make_vectors.py --check    # exit 1 if the file differs from what we'd write
"""

from __future__ import annotations

import argparse
import json
import math
import struct
import sys
from dataclasses import fields
from pathlib import Path

from rigloop.protocol.cobs import cobs_encode
from rigloop.protocol.crc import crc16_ccitt_false
from rigloop.protocol.auth import AUTH_FLAG, DeviceAuth, HostAuth, SessionMac
from rigloop.protocol.framing import encode_frame
from rigloop.protocol.messages import (
    DEVICE_TO_HOST,
    PROTOCOL_VERSION,
    Arm,
    Command,
    Configure,
    Fault,
    FaultCode,
    Hello,
    MsgType,
    Query,
    Sample,
    Status,
    Stop,
    StopReason,
    encode_payload,
)

OUTPUT = Path(__file__).resolve().parent.parent / "docs" / "protocol-vectors.json"
NAN = float("nan")
INF = float("inf")
U32 = 0xFFFFFFFF
U64 = 0xFFFFFFFFFFFFFFFF


def json_float(x: float) -> float | str:
    """Finite floats stay numbers; non-finite become the strings NaN, Infinity, -Infinity."""
    if math.isnan(x):
        return "NaN"
    if math.isinf(x):
        return "Infinity" if x > 0 else "-Infinity"
    return x


_HELLO_EXTENSION = ("min_period_us", "max_period_us", "auth", "nonce")


def message_json(msg) -> dict:
    """Fields by name; the 1.1 extensions (HELLO's, QUERY's nonce) only where the message has them."""
    out: dict = {"type": msg.TYPE.name}
    for f in fields(msg):
        value = getattr(msg, f.name)
        if isinstance(msg, Hello) and not msg.extended and f.name in _HELLO_EXTENSION:
            continue
        if isinstance(msg, Query) and value is None:
            continue
        if isinstance(value, bytes):
            value = value.hex()
        elif isinstance(value, float):
            value = json_float(value)
        elif isinstance(value, tuple):
            value = [json_float(v) for v in value]
        out[f.name] = value
    return out


def with_crc(payload: bytes) -> bytes:
    return payload + struct.pack("<H", crc16_ccitt_false(payload))


def good(name: str, msg, note: str) -> dict:
    frame = encode_frame(msg)
    direction = "device_to_host" if msg.TYPE in DEVICE_TO_HOST else "host_to_device"
    return {
        "name": name,
        "direction": direction,
        "note": note,
        "message": message_json(msg),
        "frame_hex": frame.hex(),
        "serial_hex": (cobs_encode(frame) + b"\x00").hex(),
    }


def bad(name: str, frame: bytes, reason: str, note: str, direction: str) -> dict:
    return {
        "name": name,
        "direction": direction,
        "note": note,
        "frame_hex": frame.hex(),
        "serial_hex": (cobs_encode(frame) + b"\x00").hex(),
        "expect_error": reason,
    }


def _flip_last(frame: bytes) -> bytes:
    return frame[:-1] + bytes([frame[-1] ^ 0xFF])


def first_seq_with_zero_crc_byte() -> int:
    """Smallest COMMAND seq whose frame has a 0x00 in its CRC (exercises COBS on the CRC)."""
    seq = 1
    while True:
        crc = crc16_ccitt_false(encode_payload(Command(seq, seq - 1, 0.5)))
        if crc & 0xFF == 0 or crc >> 8 == 0:
            return seq
        seq += 1


def good_vectors() -> list[dict]:
    S = Status
    crc_seq = first_seq_with_zero_crc_byte()
    return [
        good("hello_startup", Hello(1, 1, 0x0102, 2, 0, 10000, 100000, 0.0, 0.0, 100.0, "bench-fan"),
             "start-up HELLO of a fan rig: 100 Hz default, not configured"),
        good("hello_configured_full_name",
             Hello(1, 1, 0x0300, 3, int(S.CONFIGURED), 1000, 20000, 0.0, -12.0, 12.0, "bench-motor-0123"),
             "HELLO after CONFIGURE; the name fills all 16 bytes (no NUL)"),
        good("hello_multi_version", Hello(1, 3, 0xFFFF, 32, 0xFF, 500, 500, 1.5, -2.5, 4.0, "m"),
             "a device speaking versions 1..3, every status bit set in the low byte"),
        good("sample_0ch", Sample(0, 0, 0, 0.0, 0, ()), "no channels, all fields zero: many zero bytes for COBS"),
        good("sample_1ch", Sample(1, 10000, int(S.CONFIGURED), 0.0, 0, (1500.0,)),
             "one channel (speed in rpm), idle"),
        good("sample_2ch",
             Sample(42, 420000, int(S.ARMED | S.CONFIGURED), 37.5, 41, (1234.5, 0.75)),
             "armed fan rig: speed_rpm, current_a; duty 37.5 % applied from command 41"),
        good("sample_4ch",
             Sample(1000, 10_000_000, int(S.ARMED | S.CONFIGURED | S.CLAMPED), 100.0, 999,
                    (2950.0, 1.25, 180.5, 31.0)),
             "fan rig, four channels, clamped at the top of the range"),
        good("sample_8ch",
             Sample(7, 7000, int(S.CONFIGURED), -3.0, 6, tuple(float(i) - 3.5 for i in range(8))),
             "eight channels with negative values"),
        good("sample_32ch",
             Sample(123456789, 987654321012, int(S.ARMED | S.CONFIGURED), 12.0, 123456788,
                    tuple(i * 0.25 for i in range(32))),
             "the largest SAMPLE: 32 channels"),
        good("sample_extremes",
             Sample(U32, U64, 0x00FF, -12.0, U32, (3.4028234663852886e38, -1.1754943508222875e-38)),
             "largest seq, t_us and last_cmd_seq; all defined status bits; largest f32 and the negative of the smallest normal f32"),
        good("sample_seq_after_wrap", Sample(0, 1 << 40, int(S.ARMED | S.CONFIGURED), 0.5, U32, (2.0,)),
             "seq 0 right after 0xFFFFFFFF"),
        good("sample_nan_channel",
             Sample(5, 50000, int(S.ARMED | S.CONFIGURED), 10.0, 4, (NAN, 0.5)),
             "a NaN sensor value must reach the host (which trips on it): not a rejection"),
        good("sample_inf_channel",
             Sample(6, 60000, int(S.ARMED | S.CONFIGURED | S.FAULT), 0.0, 5, (-INF, INF)),
             "infinite sensor values are delivered too"),
        good("sample_status_latched",
             Sample(77, 770000, int(S.STOP_LATCHED | S.WATCHDOG | S.CONFIGURED | S.RX_ERROR | S.OVERRUN),
                    0.0, 70, (0.0,)),
             "stopped and watchdog-latched, with an rx error and an overrun since the last sample"),
        good("fault_watchdog",
             Fault(1_500_000, int(FaultCode.WATCHDOG), int(S.WATCHDOG | S.CONFIGURED), NAN),
             "command watchdog expired; no offending value (NaN)"),
        good("fault_sensor", Fault(2_000_000, int(FaultCode.SENSOR), int(S.FAULT | S.CONFIGURED), 1234.5),
             "sensor fault with the offending reading"),
        good("fault_config_rejected", Fault(3, int(FaultCode.CONFIG_REJECTED), 0, 0.0),
             "CONFIGURE rejected"),
        good("fault_vendor", Fault(U64, 0x8001, int(S.FAULT), -1.0), "vendor-specific fault code 0x8001"),
        good("query", Query(), "ask for HELLO"),
        good("query_nonce", Query(bytes.fromhex("0011223344556677")),
             "protocol 1.1: ask for HELLO and give the host's session nonce"),
        good("hello_1_1", Hello(1, 1, 0x0101, 2, int(S.CONFIGURED), 10000, 100000, 0.0, 0.0, 100.0, "bench-fan",
                                 100, 1_000_000, 0, bytes(8)),
             "protocol 1.1 HELLO of an unkeyed device: supported periods 100 us .. 1 s, auth 0"),
        good("arm", Arm(), "arm the device"),
        good("configure_fan_100hz", Configure(10000, 100000, 0.0, 0.0, 100.0),
             "fan rig: 100 Hz, 100 ms watchdog, duty 0..100 %, safe 0"),
        good("configure_motor_1khz", Configure(1000, 20000, 0.0, -12.0, 12.0),
             "motor rig: 1 kHz, 20 ms watchdog, -12..12 V"),
        good("configure_watchdog_one_period", Configure(500, 500, 2.5, 2.5, 2.5),
             "edge: watchdog equal to the period, safe = u_min = u_max"),
        good("command_first", Command(1, 0, 0.25), "first command, answers sample 0"),
        good("command_zero", Command(0, 0, 0.0), "all-zero body: stresses COBS"),
        good("command_negative", Command(1001, 1000, -3.5), "negative actuator value"),
        good("command_wrap", Command(U32, U32 - 1, 100.0), "largest sequence numbers"),
        good("command_crc_zero_byte", Command(crc_seq, crc_seq - 1, 0.5),
             "a CRC with a 0x00 byte, which COBS must stuff"),
        good("stop_operator", Stop(int(StopReason.OPERATOR)), "operator stop"),
        good("stop_estop", Stop(int(StopReason.ESTOP)), "emergency stop"),
        good("stop_trip", Stop(int(StopReason.TRIP)), "host trip"),
        good("stop_shutdown", Stop(int(StopReason.SHUTDOWN)), "host shutting down"),
        good("stop_unknown_reason", Stop(0xFE), "a STOP with an unknown reason byte still stops: not a rejection"),
    ]


def bad_vectors() -> list[dict]:
    v = PROTOCOL_VERSION
    sample = encode_frame(Sample(42, 420000, 33, 37.5, 41, (1234.5, 0.75)))
    flipped_crc = sample[:-1] + bytes([sample[-1] ^ 0x01])
    flipped_body = sample[:10] + bytes([sample[10] ^ 0x80]) + sample[11:]
    command = struct.pack("<BBIIf", v, MsgType.COMMAND, 5, 4, 1.0)
    h2d, d2h = "host_to_device", "device_to_host"
    return [
        bad("bad_crc", flipped_crc, "crc", "sample_2ch with one bit of the CRC flipped", d2h),
        bad("bad_crc_body_bit", flipped_body, "crc", "sample_2ch with one bit of the body flipped", d2h),
        bad("bad_crc_swapped", sample[:-2] + sample[-1:] + sample[-2:-1], "crc",
            "CRC bytes in big-endian order (the CRC is little-endian)", d2h),
        bad("short_empty", b"", "short", "an empty frame (serial: a lone code byte 01)", d2h),
        bad("short_3", bytes([v, MsgType.QUERY, 0xAA]), "short", "three bytes cannot hold version, type and CRC", h2d),
        bad("bad_version_0", with_crc(bytes([0, MsgType.QUERY])), "version", "version 0 with a valid CRC", h2d),
        bad("bad_version_2", with_crc(bytes([2]) + command[1:]), "version", "version 2 COMMAND with a valid CRC", h2d),
        bad("bad_version_and_type", with_crc(bytes([9, 0x7F])), "version", "version is checked before type", h2d),
        bad("bad_crc_and_version", _flip_last(with_crc(bytes([2, MsgType.QUERY]))), "crc",
            "CRC is checked before version", h2d),
        bad("unknown_type_0x00", with_crc(bytes([v, 0x00])), "type", "type 0 is not defined", d2h),
        bad("unknown_type_0x7f", with_crc(bytes([v, 0x7F, 1, 2, 3])), "type", "type 0x7F is not defined", h2d),
        bad("unknown_type_0x15", with_crc(bytes([v, 0x15])), "type", "type 0x15 is not defined (yet)", h2d),
        bad("length_command_short", with_crc(command[:-1]), "length", "COMMAND body of 11 bytes", h2d),
        bad("length_command_long", with_crc(command + b"\x00"), "length", "COMMAND body of 13 bytes", h2d),
        bad("length_query_body", with_crc(bytes([v, MsgType.QUERY, 0])), "length", "QUERY with a 1-byte body", h2d),
        bad("length_arm_body", with_crc(bytes([v, MsgType.ARM, 1, 2])), "length", "ARM with a 2-byte body", h2d),
        bad("length_stop_empty", with_crc(bytes([v, MsgType.STOP])), "length", "STOP without its reason byte", h2d),
        bad("length_hello_41", with_crc(encode_frame(Hello(1, 1, 1, 1, 0, 1000, 1000, 0.0, 0.0, 1.0, "x"))[:-3]),
            "length", "HELLO body of 41 bytes", d2h),
        bad("length_fault_15", with_crc(encode_frame(Fault(1, 2, 0, 0.0))[:-3]), "length", "FAULT body of 15 bytes", d2h),
        bad("length_configure_19", with_crc(encode_frame(Configure(1000, 2000, 0.0, 0.0, 1.0))[:-3]),
            "length", "CONFIGURE body of 19 bytes", h2d),
        bad("length_sample_head_only", with_crc(sample[:20]), "length", "SAMPLE cut inside its fixed part", d2h),
        bad("length_sample_n_mismatch", with_crc(sample[:-6]), "length",
            "SAMPLE says n=2 but carries one channel", d2h),
        bad("length_sample_extra_byte", with_crc(sample[:-2] + b"\x00"), "length",
            "SAMPLE with a byte after its channels", d2h),
        bad("length_sample_33ch",
            with_crc(struct.pack("<BBIQHfIB", v, MsgType.SAMPLE, 1, 1, 0, 0.0, 0, 33) + b"\x00" * 132),
            "length", "SAMPLE with 33 channels (at most 32)", d2h),
        bad("value_command_nan", with_crc(struct.pack("<BBIIf", v, MsgType.COMMAND, 5, 4, NAN)), "value",
            "COMMAND value NaN", h2d),
        bad("value_command_inf", with_crc(struct.pack("<BBIIf", v, MsgType.COMMAND, 5, 4, INF)), "value",
            "COMMAND value +Infinity", h2d),
        bad("value_command_neg_inf", with_crc(struct.pack("<BBIIf", v, MsgType.COMMAND, 5, 4, -INF)), "value",
            "COMMAND value -Infinity", h2d),
        bad("value_configure_nan_safe",
            with_crc(struct.pack("<BBIIfff", v, MsgType.CONFIGURE, 1000, 20000, NAN, 0.0, 1.0)), "value",
            "CONFIGURE safe NaN", h2d),
        bad("value_configure_inf_max",
            with_crc(struct.pack("<BBIIfff", v, MsgType.CONFIGURE, 1000, 20000, 0.0, 0.0, INF)), "value",
            "CONFIGURE u_max +Infinity", h2d),
        bad("value_configure_min_above_max",
            with_crc(struct.pack("<BBIIfff", v, MsgType.CONFIGURE, 1000, 20000, 0.0, 1.0, -1.0)), "value",
            "CONFIGURE u_min > u_max", h2d),
        bad("value_configure_safe_outside",
            with_crc(struct.pack("<BBIIfff", v, MsgType.CONFIGURE, 1000, 20000, 5.0, 0.0, 1.0)), "value",
            "CONFIGURE safe outside [u_min, u_max]", h2d),
        bad("value_configure_period_zero",
            with_crc(struct.pack("<BBIIfff", v, MsgType.CONFIGURE, 0, 20000, 0.0, 0.0, 1.0)), "value",
            "CONFIGURE period_us = 0", h2d),
        bad("value_configure_watchdog_short",
            with_crc(struct.pack("<BBIIfff", v, MsgType.CONFIGURE, 1000, 999, 0.0, 0.0, 1.0)), "value",
            "CONFIGURE watchdog_us < period_us", h2d),
    ]


def bad_cobs_vectors() -> list[dict]:
    """Serial-only rejections: the run between delimiters is not valid COBS."""
    runs = [
        ("cobs_code_past_end", bytes.fromhex("051122") + b"\x00",
         "code 05 promises 4 bytes, only 2 follow before the delimiter"),
        ("cobs_last_code_past_end", cobs_encode(encode_frame(Query()))[:-1] + b"\x00",
         "a valid QUERY frame with its last byte lost: the code byte points past the end"),
        ("cobs_code_ff_short", b"\xff" + bytes(range(1, 100)) + b"\x00",
         "code FF promises 254 bytes, only 99 follow"),
    ]
    return [
        {"name": name, "direction": "host_to_device", "note": note, "frame_hex": None,
         "serial_hex": serial.hex(), "expect_error": "cobs"}
        for name, serial, note in runs
    ]


# Authenticated frames (docs/protocol.md §14). Key and nonces are arbitrary test values.
AUTH_KEY = bytes(range(0x20, 0x40))                  # 32 bytes 20 21 .. 3f
HOST_NONCE = bytes.fromhex("a0a1a2a3a4a5a6a7")
DEVICE_NONCE = bytes.fromhex("d0d1d2d3d4d5d6d7")


def _sealed(msg, counter: int) -> bytes:
    return with_crc(SessionMac(AUTH_KEY, HOST_NONCE + DEVICE_NONCE).seal(encode_payload(msg), counter))


def auth_vectors() -> list[dict]:
    """Tagged frames of one session (key AUTH_KEY, nonces HOST_NONCE | DEVICE_NONCE)."""
    S = Status
    cases = [
        ("auth_hello", Hello(1, 1, 0x0101, 2, 0, 10000, 100000, 0.0, 0.0, 100.0, "bench-fan", 100, 1_000_000,
                             1, DEVICE_NONCE), 1, "keyed device's HELLO answering QUERY nonce a0..a7"),
        ("auth_configure", Configure(10000, 100000, 0.0, 0.0, 100.0), 1, "host's first tagged frame"),
        ("auth_arm", Arm(), 2, "ARM, counter 2"),
        ("auth_command", Command(1, 0, 0.25), 3, "COMMAND, counter 3"),
        ("auth_stop", Stop(int(StopReason.OPERATOR)), 4, "STOP, counter 4"),
        ("auth_sample_2ch", Sample(42, 420000, int(S.ARMED | S.CONFIGURED), 37.5, 41, (1234.5, 0.75)), 2,
         "SAMPLE, device counter 2"),
    ]
    out = []
    for name, msg, counter, note in cases:
        frame = _sealed(msg, counter)
        out.append({"name": name, "direction": "device_to_host" if msg.TYPE in DEVICE_TO_HOST else "host_to_device",
                    "note": note, "counter": counter, "message": message_json(msg), "frame_hex": frame.hex(),
                    "serial_hex": (cobs_encode(frame) + b"\x00").hex()})
    command = _sealed(Command(1, 0, 0.25), 3)
    bad_tag = command[:-3] + bytes([command[-3] ^ 0x01])
    other = with_crc(SessionMac(AUTH_KEY, HOST_NONCE + bytes(8)).seal(encode_payload(Command(1, 0, 0.25)), 3))
    other_key = with_crc(SessionMac(bytes(32), HOST_NONCE + DEVICE_NONCE).seal(encode_payload(Command(1, 0, 0.25)), 3))
    plain = encode_frame(Command(1, 0, 0.25))
    truncated = with_crc(_sealed(Command(1, 0, 0.25), 3)[:-6])
    for name, frame, note in (
        ("auth_bad_tag", with_crc(bad_tag[:-2]), "auth_command with one bit of the tag flipped (CRC redone)"),
        ("auth_other_session", other, "auth_command sealed under another device nonce: a frame of an earlier session"),
        ("auth_other_key", other_key, "auth_command sealed with another key"),
        ("auth_plain_on_keyed", plain, "command_first without a tag, sent to a keyed device"),
        ("auth_truncated_tag", truncated, "auth_command with its last 4 tag bytes cut (CRC redone)"),
    ):
        out.append({"name": name, "direction": "host_to_device", "note": note, "frame_hex": frame.hex(),
                    "serial_hex": (cobs_encode(frame) + b"\x00").hex(), "expect_error": "auth"})
    return out


def auth_section() -> dict:
    return {"mac": "HMAC-SHA-256 truncated to 8 bytes", "key_hex": AUTH_KEY.hex(),
            "host_nonce_hex": HOST_NONCE.hex(), "device_nonce_hex": DEVICE_NONCE.hex(),
            "flag": AUTH_FLAG, "vectors": auth_vectors()}


def sequence_cases() -> list[dict]:
    """Serial-number arithmetic (docs/protocol.md §5): is `seq` newer than `last`, and the gap."""
    pairs = [
        (0, 1), (1, 0), (5, 5), (0xFFFFFFFF, 0), (0, 0xFFFFFFFF), (0xFFFFFFFE, 2),
        (100, 0x8000_0063), (100, 0x8000_0064), (100, 0x8000_0065), (0, 0x7FFF_FFFF), (0, 0x8000_0000),
        (10, 10 + 0x10000), (10, 11 + 0x10000), (0xFFFFFFF0, 0xFFF0), (0x40000000, 0x7FFFFFFF),
    ]
    out = []
    for last, seq in pairs:
        gap = (seq - last) & 0xFFFFFFFF
        newer = 0 < gap < 0x8000_0000
        accept = 0 < gap <= 0x10000
        out.append({"last": last, "seq": seq, "newer": newer, "accept": accept, "lost": gap - 1 if accept else 0})
    return out


def crc_cases() -> list[dict]:
    datas = [b"123456789", b"", b"\x00", b"\xff" * 4, bytes(range(256))]
    return [{"data_hex": d.hex(), "crc": crc16_ccitt_false(d)} for d in datas]


def cobs_cases() -> list[dict]:
    datas = [
        b"", b"\x00", b"\x00\x00", b"\x11\x22\x00\x33", b"\x11\x22\x33\x44", b"\x11\x00\x00\x00",
        bytes(range(1, 255)), bytes(range(0, 255)), bytes(range(1, 256)),
        bytes(range(2, 256)) + b"\x00", bytes(range(3, 256)) + b"\x00\x01",
    ]
    return [{"data_hex": d.hex(), "encoded_hex": cobs_encode(d).hex()} for d in datas]


def build() -> dict:
    return {
        "protocol_version": PROTOCOL_VERSION,
        "document_revision": "1.1",
        "crc": "CRC-16/CCITT-FALSE",
        "generated_by": "tools/make_vectors.py",
        "vectors": good_vectors() + bad_vectors() + bad_cobs_vectors(),
        "sequence_cases": sequence_cases(),
        "crc_cases": crc_cases(),
        "cobs_cases": cobs_cases(),
        "auth": auth_section(),
    }


def render() -> str:
    """The exact text of the vectors file (allow_nan=False: the file is strict JSON)."""
    return json.dumps(build(), indent=1, allow_nan=False) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true", help="compare instead of writing")
    parser.add_argument("--output", type=Path, default=OUTPUT)
    args = parser.parse_args(argv)
    text = render()
    if args.check:
        current = args.output.read_text(encoding="utf-8") if args.output.exists() else ""
        if current != text:
            print(f"{args.output} is out of date: run python tools/make_vectors.py", file=sys.stderr)
            return 1
        print(f"{args.output} is up to date")
        return 0
    args.output.write_text(text, encoding="utf-8")
    print(f"wrote {args.output} ({len(build()['vectors'])} vectors)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
