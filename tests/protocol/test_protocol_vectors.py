"""docs/protocol-vectors.json: every vector decodes and encodes exactly; the file is current."""

from __future__ import annotations

import importlib.util
import json
import math
import re
from pathlib import Path

import pytest

from rigloop.protocol.cobs import cobs_decode, cobs_encode
from rigloop.protocol.crc import crc16_ccitt_false
from rigloop.protocol.framing import DatagramDecoder, StreamDecoder, decode_frame, encode_frame, encode_serial
from rigloop.protocol.messages import (
    MESSAGE_CLASSES,
    REASONS,
    MsgType,
    ProtocolError,
)
from rigloop.protocol.sequence import SequenceTracker, is_newer

ROOT = Path(__file__).resolve().parents[2]
VECTORS_FILE = ROOT / "docs" / "protocol-vectors.json"
DOC_FILE = ROOT / "docs" / "protocol.md"
DATA = json.loads(VECTORS_FILE.read_text(encoding="utf-8"))
GOOD = [v for v in DATA["vectors"] if "expect_error" not in v]
BAD = [v for v in DATA["vectors"] if "expect_error" in v]
CLASSES = {cls.TYPE.name: cls for cls in MESSAGE_CLASSES}
AUTH = DATA["auth"]
AUTH_GOOD = [v for v in AUTH["vectors"] if "expect_error" not in v]
AUTH_BAD = [v for v in AUTH["vectors"] if "expect_error" in v]


def from_json(value):
    if isinstance(value, str) and value in ("NaN", "Infinity", "-Infinity"):
        return float(value.replace("Infinity", "inf"))
    return value


def message_from(spec: dict):
    cls = CLASSES[spec["type"]]
    kwargs = {}
    for key, value in spec.items():
        if key == "type":
            continue
        if key == "nonce":
            kwargs[key] = bytes.fromhex(value)
            continue
        kwargs[key] = tuple(from_json(v) for v in value) if isinstance(value, list) else from_json(value)
    return cls(**kwargs)


def same(a, b) -> bool:
    """Message equality where NaN equals NaN (the vectors carry NaN channels and fault values)."""
    if type(a) is not type(b):
        return False
    for name in a.__dataclass_fields__:
        x, y = getattr(a, name), getattr(b, name)
        xs, ys = (x, y) if isinstance(x, tuple) else ((x,), (y,))
        if len(xs) != len(ys):
            return False
        for p, q in zip(xs, ys):
            if not (p == q or (isinstance(p, float) and math.isnan(p) and math.isnan(q))):
                return False
    return True


def load_generator():
    spec = importlib.util.spec_from_file_location("make_vectors", ROOT / "tools" / "make_vectors.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_file_is_what_the_generator_writes():
    assert VECTORS_FILE.read_text(encoding="utf-8") == load_generator().render(), (
        "docs/protocol-vectors.json is stale: run .venv/bin/python tools/make_vectors.py"
    )


def test_file_is_strict_json_with_the_documented_keys():
    json.loads(VECTORS_FILE.read_text(encoding="utf-8"), parse_constant=lambda c: pytest.fail(f"non-JSON constant {c}"))
    assert DATA["protocol_version"] == 1 and DATA["crc"] == "CRC-16/CCITT-FALSE"
    names = [v["name"] for v in DATA["vectors"]]
    assert len(names) == len(set(names))
    for v in DATA["vectors"]:
        assert v["direction"] in ("device_to_host", "host_to_device")
        assert {"name", "frame_hex", "serial_hex"} <= set(v)
        assert ("message" in v) != ("expect_error" in v)


def test_coverage_of_the_vectors():
    types = {v["message"]["type"] for v in GOOD}
    assert types == {t.name for t in MsgType}
    counts = {len(v["message"]["channels"]) for v in GOOD if v["message"]["type"] == "SAMPLE"}
    assert {0, 1, 2, 4, 8, 32} <= counts
    assert any("NaN" in v["message"].get("channels", []) for v in GOOD)
    assert any(v["message"].get("seq") == 0xFFFFFFFF for v in GOOD if v["message"]["type"] == "SAMPLE")
    reasons = {v["expect_error"] for v in BAD}
    # sequence needs history (see sequence_cases); auth needs a key and a session (see the auth section)
    assert reasons == set(REASONS) - {"sequence", "auth"}
    assert {v["expect_error"] for v in AUTH_BAD} == {"auth"}


@pytest.mark.parametrize("vector", GOOD, ids=[v["name"] for v in GOOD])
def test_good_vector(vector):
    msg = message_from(vector["message"])
    frame = bytes.fromhex(vector["frame_hex"])
    serial = bytes.fromhex(vector["serial_hex"])
    assert encode_frame(msg) == frame
    assert encode_serial(msg) == serial
    assert same(decode_frame(frame), msg)
    assert serial.endswith(b"\x00") and 0 not in serial[:-1]
    assert cobs_decode(serial[:-1]) == frame
    (streamed,) = StreamDecoder().feed(serial)
    assert same(streamed, msg)
    assert same(DatagramDecoder().decode(frame), msg)


@pytest.mark.parametrize("vector", BAD, ids=[v["name"] for v in BAD])
def test_bad_vector(vector):
    reason = vector["expect_error"]
    serial = bytes.fromhex(vector["serial_hex"])
    if vector["frame_hex"] is not None:
        frame = bytes.fromhex(vector["frame_hex"])
        with pytest.raises(ProtocolError) as info:
            decode_frame(frame)
        assert info.value.reason == reason
        assert cobs_encode(frame) + b"\x00" == serial
        datagrams = DatagramDecoder()
        assert datagrams.decode(frame) is None
        assert getattr(datagrams.counters, reason) == 1 and datagrams.counters.total_rejected == 1
    else:
        assert reason == "cobs"
    stream = StreamDecoder()
    assert stream.feed(b"\x00" + serial) == []
    assert getattr(stream.counters, reason) == 1 and stream.counters.total_rejected == 1


@pytest.mark.parametrize("case", DATA["sequence_cases"], ids=lambda c: f"{c['last']}->{c['seq']}")
def test_sequence_case(case):
    assert is_newer(case["seq"], case["last"]) is case["newer"]
    tracker = SequenceTracker()
    tracker.accept(case["last"])
    assert tracker.accept(case["seq"]) is case["accept"]
    assert tracker.lost == case["lost"]
    assert not case["accept"] or case["newer"]     # an accepted number is always a newer one


def test_crc_and_cobs_cases():
    for case in DATA["crc_cases"]:
        assert crc16_ccitt_false(bytes.fromhex(case["data_hex"])) == case["crc"]
    assert {"data_hex": "313233343536373839", "crc": 0x29B1} in DATA["crc_cases"]
    for case in DATA["cobs_cases"]:
        data, encoded = bytes.fromhex(case["data_hex"]), bytes.fromhex(case["encoded_hex"])
        assert cobs_encode(data) == encoded and cobs_decode(encoded) == data


def _doc_hex_blocks() -> dict[str, bytes]:
    """Hex dumps in docs/protocol.md introduced by a line `vector: NAME (frame|serial)`."""
    text = DOC_FILE.read_text(encoding="utf-8")
    blocks = {}
    for match in re.finditer(r"vector: (\w+) \((frame|serial)\)\n((?:[0-9a-f]{2}(?: [0-9a-f]{2})*\n)+)", text):
        blocks[f"{match.group(1)}:{match.group(2)}"] = bytes.fromhex(match.group(3).replace("\n", " "))
    return blocks


def test_worked_examples_in_the_document_match_the_vectors():
    blocks = _doc_hex_blocks()
    assert {"sample_2ch:frame", "sample_2ch:serial", "command_first:frame", "command_first:serial"} <= set(blocks)
    by_name = {v["name"]: v for v in DATA["vectors"]}
    for key, data in blocks.items():
        name, kind = key.split(":")
        assert data.hex() == by_name[name][f"{kind}_hex"], f"worked example {key} in docs/protocol.md is stale"


# --- authenticated frames (docs/protocol.md §14) ---------------------------------------------


def _device_end(counter_before: int = 0):
    from rigloop.protocol.auth import DeviceAuth

    end = DeviceAuth(bytes.fromhex(AUTH["key_hex"]), nonce_source=lambda: bytes.fromhex(AUTH["device_nonce_hex"]))
    end.start_session(bytes.fromhex(AUTH["host_nonce_hex"]))
    end.rx_counter = counter_before
    return end


def _host_end():
    from rigloop.protocol.auth import HostAuth

    end = HostAuth(bytes.fromhex(AUTH["key_hex"]))
    end.host_nonce = bytes.fromhex(AUTH["host_nonce_hex"])
    return end


@pytest.mark.parametrize("vector", AUTH_GOOD, ids=[v["name"] for v in AUTH_GOOD])
def test_auth_vector_opens_and_seals(vector):
    msg = message_from(vector["message"])
    frame = bytes.fromhex(vector["frame_hex"])
    assert frame[1] == msg.TYPE | 0x80
    if vector["direction"] == "host_to_device":
        end = _device_end(vector["counter"] - 1)
        assert same(decode_frame(frame, end), msg)
        assert end.rx_counter == vector["counter"]
        with pytest.raises(ProtocolError) as info:   # the same frame again: a replay
            decode_frame(frame, end)
        assert info.value.reason == "auth"
        sender = _host_end()
        sender.open(bytes.fromhex(AUTH_GOOD[0]["frame_hex"])[:-2])   # the session's HELLO
        sender.tx_counter = vector["counter"] - 1
        assert encode_frame(msg, auth=sender) == frame
    else:
        end = _host_end()
        if msg.TYPE is not MsgType.HELLO:
            end.open(bytes.fromhex(AUTH_GOOD[0]["frame_hex"])[:-2])
        assert same(decode_frame(frame, end), msg)
        sender = _device_end()
        sender.tx_counter = vector["counter"] - 1
        assert encode_frame(msg, auth=sender) == frame
    assert cobs_encode(frame) + b"\x00" == bytes.fromhex(vector["serial_hex"])


@pytest.mark.parametrize("vector", AUTH_BAD, ids=[v["name"] for v in AUTH_BAD])
def test_auth_bad_vector_is_rejected(vector):
    frame = bytes.fromhex(vector["frame_hex"])
    with pytest.raises(ProtocolError) as info:
        decode_frame(frame, _device_end(2))
    assert info.value.reason == "auth"
    decoder = StreamDecoder(auth=_device_end(2))
    assert decoder.feed(b"\x00" + bytes.fromhex(vector["serial_hex"])) == []
    assert decoder.counters.auth == 1 and decoder.counters.total_rejected == 1


def test_an_unkeyed_receiver_rejects_tagged_frames_under_auth():
    with pytest.raises(ProtocolError) as info:
        decode_frame(bytes.fromhex(AUTH_GOOD[1]["frame_hex"]))
    assert info.value.reason == "auth"
