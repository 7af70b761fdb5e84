#!/usr/bin/env python3
"""Turn docs/protocol-vectors.json into a C header for the firmware stub's unit tests.

Why generate instead of hand-copying: the Python codec and the C stub must agree on the exact
bytes, so both are tested against the same file; this script makes that file usable from C.

Standard library only. Unknown keys are ignored; a message field this script does not know is
reported on stderr and left out of the field checks (the byte-exact re-encode check still runs).

Usage: vectors_to_c.py INPUT.json OUTPUT.h
"""

from __future__ import annotations

import json
import math
import struct
import sys

TYPES = {
    "HELLO": 0x01, "SAMPLE": 0x02, "FAULT": 0x03,
    "QUERY": 0x10, "ARM": 0x11, "CONFIGURE": 0x12, "COMMAND": 0x13, "STOP": 0x14,
}

# Field kinds: "u" unsigned integer, "f" binary32 float, "t" 16-byte NUL-padded text, "fa" float array,
# "n" 8-byte nonce given as hex (compared as a little-endian u64).
FIELDS = {
    "HELLO": {"proto_min": "u", "proto_max": "u", "fw_version": "u", "n_channels": "u", "status": "u",
              "period_us": "u", "watchdog_us": "u", "safe": "f", "u_min": "f", "u_max": "f", "name": "t",
              "min_period_us": "u", "max_period_us": "u", "auth": "u", "nonce": "n"},
    "SAMPLE": {"seq": "u", "t_us": "u", "status": "u", "applied": "f", "last_cmd_seq": "u", "n": "u",
               "channels": "fa"},
    "FAULT": {"t_us": "u", "code": "u", "status": "u", "value": "f"},
    "QUERY": {"nonce": "n"},
    "ARM": {},
    "CONFIGURE": {"period_us": "u", "watchdog_us": "u", "safe": "f", "u_min": "f", "u_max": "f"},
    "COMMAND": {"seq": "u", "answers": "u", "value": "f"},
    "STOP": {"reason": "u"},
}

SPECIAL_FLOATS = {"nan": math.nan, "infinity": math.inf, "+infinity": math.inf, "-infinity": -math.inf,
                  "inf": math.inf, "+inf": math.inf, "-inf": -math.inf}


class VectorError(Exception):
    """A vector this script cannot represent; the message names the vector and the key."""


def as_float(value, where: str) -> float:
    if isinstance(value, bool):
        raise VectorError(f"{where}: expected a number, got {value!r}")
    if isinstance(value, (int, float)):
        return float(value)
    if isinstance(value, str) and value.strip().lower() in SPECIAL_FLOATS:
        return SPECIAL_FLOATS[value.strip().lower()]
    raise VectorError(f"{where}: expected a number or NaN/Infinity/-Infinity, got {value!r}")


def f32_bits(x: float) -> int:
    return struct.unpack("<I", struct.pack("<f", x))[0]


def c_string(text: str) -> str:
    out = []
    for ch in text:
        code = ord(ch)
        if ch in "\"\\" or code < 0x20 or code > 0x7E:
            out.append(f"\\{code & 0xFF:03o}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def c_bytes(name: str, data: bytes) -> str:
    body = ", ".join(f"0x{b:02x}" for b in data) if data else "0x00"
    return f"static const uint8_t {name}[] = {{{body}}};"


def hex_bytes(value, where: str) -> bytes | None:
    if value is None:
        return None
    if not isinstance(value, str):
        raise VectorError(f"{where}: expected a hex string, got {value!r}")
    try:
        return bytes.fromhex(value)
    except ValueError as exc:
        raise VectorError(f"{where}: not valid hex ({exc})") from None


def field_rows(vname: str, message: dict) -> tuple[str, list[str]]:
    """C initialisers for the expected fields of one message, and its type name."""
    mtype = message.get("type")
    if isinstance(mtype, int):
        names = {v: k for k, v in TYPES.items()}
        mtype = names.get(mtype, mtype)
    if mtype not in FIELDS:
        raise VectorError(f"vector {vname!r}: message type {mtype!r} is not one of {sorted(TYPES)}")
    known = FIELDS[mtype]
    rows: list[str] = []
    for key, value in message.items():
        if key == "type":
            continue
        kind = known.get(key)
        where = f"vector {vname!r} message.{key}"
        if kind is None:
            print(f"vectors_to_c: note: {where} is not a field this script knows; not checked field by field",
                  file=sys.stderr)
            continue
        if kind == "n":
            raw = hex_bytes(value, where)
            if raw is None or len(raw) != 8:
                raise VectorError(f"{where}: expected 8 bytes of hex")
            rows.append(f'{{"{key}", -1, RLV_UINT, {int.from_bytes(raw, "little")}ull, 0u, 0, 0}}')
        elif kind == "u":
            if isinstance(value, bool) or not isinstance(value, int) or value < 0:
                print(f"vectors_to_c: note: {where}={value!r} is not a non-negative integer; not checked",
                      file=sys.stderr)
                continue
            rows.append(f'{{"{key}", -1, RLV_UINT, {value}ull, 0u, 0, 0}}')
        elif kind == "f":
            x = as_float(value, where)
            rows.append(f'{{"{key}", -1, RLV_FLOAT, 0ull, 0x{f32_bits(x):08x}u, {int(math.isnan(x))}, 0}}')
        elif kind == "t":
            if not isinstance(value, str):
                raise VectorError(f"{where}: expected a string, got {value!r}")
            rows.append(f'{{"{key}", -1, RLV_TEXT, 0ull, 0u, 0, {c_string(value)}}}')
        elif kind == "fa":
            if not isinstance(value, list):
                raise VectorError(f"{where}: expected a list of numbers, got {value!r}")
            for i, item in enumerate(value):
                x = as_float(item, f"{where}[{i}]")
                rows.append(f'{{"{key}", {i}, RLV_FLOAT, 0ull, 0x{f32_bits(x):08x}u, {int(math.isnan(x))}, 0}}')
            if "n" not in message:
                rows.append(f'{{"n", -1, RLV_UINT, {len(value)}ull, 0u, 0, 0}}')
    return mtype, rows


def generate(doc: dict) -> str:
    out: list[str] = [
        "/* Generated by firmware_stub/tools/vectors_to_c.py from docs/protocol-vectors.json. Do not edit. */",
        "#ifndef RL_VECTORS_H",
        "#define RL_VECTORS_H",
        "#include <stddef.h>",
        "#include <stdint.h>",
        "",
        "enum { RLV_UINT = 0, RLV_FLOAT = 1, RLV_TEXT = 2 };",
        "typedef struct rlv_field { const char *name; int index; int kind; uint64_t u; uint32_t f_bits;"
        " int is_nan; const char *text; } rlv_field;",
        "typedef struct rlv_vector { const char *name; const char *direction; int type;"
        " const uint8_t *frame; size_t frame_len; int has_frame;"
        " const uint8_t *serial; size_t serial_len; int has_serial;"
        " const char *expect_error; const rlv_field *fields; size_t n_fields; } rlv_vector;",
        "typedef struct rlv_crc_case { const uint8_t *data; size_t len; uint16_t crc; } rlv_crc_case;",
        "typedef struct rlv_cobs_case { const uint8_t *data; size_t len; const uint8_t *enc; size_t enc_len; }"
        " rlv_cobs_case;",
        "typedef struct rlv_seq_case { uint32_t last; uint32_t seq; int newer; } rlv_seq_case;",
        "",
    ]
    vectors = doc.get("vectors")
    if not isinstance(vectors, list):
        raise VectorError("top-level key 'vectors' must be a list")

    table: list[str] = []
    for i, vec in enumerate(vectors):
        if not isinstance(vec, dict):
            raise VectorError(f"vectors[{i}] must be an object")
        vname = str(vec.get("name", f"vector_{i}"))
        frame = hex_bytes(vec.get("frame_hex"), f"vector {vname!r} frame_hex")
        serial = hex_bytes(vec.get("serial_hex"), f"vector {vname!r} serial_hex")
        expect = vec.get("expect_error")
        mtype_code = -1
        rows: list[str] = []
        message = vec.get("message")
        if isinstance(message, dict) and expect is None:
            mtype, rows = field_rows(vname, message)
            mtype_code = TYPES[mtype]
        elif expect is None:
            raise VectorError(f"vector {vname!r}: has neither 'message' nor 'expect_error'")
        if frame is None and serial is None:
            raise VectorError(f"vector {vname!r}: has neither 'frame_hex' nor 'serial_hex'")
        out.append(c_bytes(f"rlv_frame_{i}", frame or b""))
        out.append(c_bytes(f"rlv_serial_{i}", serial or b""))
        fields_name = "0"
        if rows:
            out.append(f"static const rlv_field rlv_fields_{i}[] = {{")
            out.extend(f"    {row}," for row in rows)
            out.append("};")
            fields_name = f"rlv_fields_{i}"
        table.append(
            f"    {{{c_string(vname)}, {c_string(str(vec.get('direction', '')))}, {mtype_code}, "
            f"rlv_frame_{i}, {len(frame or b'')}u, {int(frame is not None)}, "
            f"rlv_serial_{i}, {len(serial or b'')}u, {int(serial is not None)}, "
            f"{c_string(str(expect)) if expect is not None else '0'}, {fields_name}, {len(rows)}u}},"
        )
    out.append("static const rlv_vector rlv_vectors[] = {")
    out.extend(table or ["    {0, 0, -1, 0, 0u, 0, 0, 0u, 0, 0, 0, 0u},"])
    out.append("};")
    out.append(f"#define RLV_VECTOR_COUNT {len(table)}u")
    out.append("")

    crc_rows = []
    for i, case in enumerate(doc.get("crc_cases", []) or []):
        data = hex_bytes(case.get("data_hex"), f"crc_cases[{i}].data_hex") or b""
        out.append(c_bytes(f"rlv_crc_{i}", data))
        crc_rows.append(f"    {{rlv_crc_{i}, {len(data)}u, 0x{int(case['crc']):04x}u}},")
    out.append("static const rlv_crc_case rlv_crc_cases[] = {")
    out.extend(crc_rows or ["    {0, 0u, 0u},"])
    out.append("};")
    out.append(f"#define RLV_CRC_COUNT {len(crc_rows)}u")

    cobs_rows = []
    for i, case in enumerate(doc.get("cobs_cases", []) or []):
        data = hex_bytes(case.get("data_hex"), f"cobs_cases[{i}].data_hex") or b""
        enc = hex_bytes(case.get("encoded_hex"), f"cobs_cases[{i}].encoded_hex") or b""
        out.append(c_bytes(f"rlv_cobs_d{i}", data))
        out.append(c_bytes(f"rlv_cobs_e{i}", enc))
        cobs_rows.append(f"    {{rlv_cobs_d{i}, {len(data)}u, rlv_cobs_e{i}, {len(enc)}u}},")
    out.append("static const rlv_cobs_case rlv_cobs_cases[] = {")
    out.extend(cobs_rows or ["    {0, 0u, 0, 0u},"])
    out.append("};")
    out.append(f"#define RLV_COBS_COUNT {len(cobs_rows)}u")

    seq_rows = []
    for case in doc.get("sequence_cases", []) or []:
        seq_rows.append(f"    {{{int(case['last'])}u, {int(case['seq'])}u, {int(bool(case['newer']))}}},")
    out.append("static const rlv_seq_case rlv_seq_cases[] = {")
    out.extend(seq_rows or ["    {0u, 0u, 0},"])
    out.append("};")
    out.append(f"#define RLV_SEQ_COUNT {len(seq_rows)}u")
    out.append("")
    out.extend(auth_section(doc.get("auth")))
    out.append("#endif /* RL_VECTORS_H */")
    return "\n".join(out) + "\n"


def auth_section(auth) -> list[str]:
    """Authenticated-frame vectors (docs/protocol.md section 14): key, nonces, tagged frames."""
    out = ["typedef struct rlv_auth_case { const char *name; int to_device; uint32_t counter;"
           " const uint8_t *frame; size_t len; int bad; } rlv_auth_case;"]
    if not isinstance(auth, dict):
        out += ["static const uint8_t rlv_auth_key[] = {0x00};", "#define RLV_AUTH_KEY_LEN 0u",
                "static const uint8_t rlv_auth_host_nonce[8] = {0};", "static const uint8_t rlv_auth_device_nonce[8] = {0};",
                "static const rlv_auth_case rlv_auth_cases[] = {{0, 0, 0u, 0, 0u, 0}};", "#define RLV_AUTH_COUNT 0u"]
        return out
    key = hex_bytes(auth.get("key_hex"), "auth.key_hex") or b""
    out.append(c_bytes("rlv_auth_key", key))
    out.append(f"#define RLV_AUTH_KEY_LEN {len(key)}u")
    out.append(c_bytes("rlv_auth_host_nonce", hex_bytes(auth.get("host_nonce_hex"), "auth.host_nonce_hex") or b""))
    out.append(c_bytes("rlv_auth_device_nonce", hex_bytes(auth.get("device_nonce_hex"), "auth.device_nonce_hex") or b""))
    rows = []
    for i, vec in enumerate(auth.get("vectors", []) or []):
        frame = hex_bytes(vec.get("frame_hex"), f"auth vector {i} frame_hex") or b""
        out.append(c_bytes(f"rlv_auth_frame_{i}", frame))
        bad = "expect_error" in vec
        rows.append(f"    {{{c_string(str(vec.get('name', i)))}, {int(vec.get('direction') == 'host_to_device')}, "
                    f"{int(vec.get('counter', 0))}u, rlv_auth_frame_{i}, {len(frame)}u, {int(bad)}}},")
    out.append("static const rlv_auth_case rlv_auth_cases[] = {")
    out.extend(rows or ["    {0, 0, 0u, 0, 0u, 0},"])
    out.append("};")
    out.append(f"#define RLV_AUTH_COUNT {len(rows)}u")
    out.append("")
    return out


def main(argv: list[str]) -> int:
    if len(argv) != 3:
        print("usage: vectors_to_c.py INPUT.json OUTPUT.h", file=sys.stderr)
        return 2
    src, dst = argv[1], argv[2]
    try:
        with open(src, encoding="utf-8") as fh:
            doc = json.load(fh)
    except FileNotFoundError:
        print(f"vectors_to_c: {src} not found; the shared protocol vectors live in docs/protocol-vectors.json "
              "(regenerate them with the project's vector tool)", file=sys.stderr)
        return 1
    except json.JSONDecodeError as exc:
        print(f"vectors_to_c: {src} is not valid JSON: {exc}", file=sys.stderr)
        return 1
    if not isinstance(doc, dict):
        print(f"vectors_to_c: {src}: the top level must be an object with a 'vectors' list", file=sys.stderr)
        return 1
    version = doc.get("protocol_version", 1)
    if version != 1:
        print(f"vectors_to_c: {src}: protocol_version {version!r}; this stub speaks version 1", file=sys.stderr)
        return 1
    try:
        text = generate(doc)
    except (VectorError, KeyError, TypeError, ValueError) as exc:
        print(f"vectors_to_c: {src}: {exc}", file=sys.stderr)
        return 1
    with open(dst, "w", encoding="utf-8") as fh:
        fh.write(text)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
