"""SerialLink over a real pseudo-terminal (the test plays the device on the master side) and over
pyserial's loop:// port."""

from __future__ import annotations

import os
import select
import sys

import pytest

from rigloop.link.base import Link, LinkError
from rigloop.link.serial_link import SerialLink
from rigloop.protocol.framing import StreamDecoder, encode_serial
from rigloop.protocol.messages import Command, Query, Sample, Stop

WAIT = 10.0

posix_only = pytest.mark.skipif(not hasattr(os, "openpty") or sys.platform == "win32", reason="needs POSIX pty")


def sample(seq: int, n: int = 2) -> Sample:
    return Sample(seq, seq * 1000, 33, 1.5, seq, tuple(float(i) for i in range(n)))


def recv_until(link, count: int) -> list:
    got = []
    while len(got) < count:
        batch = link.recv(timeout=WAIT)
        assert batch, "timed out waiting for bytes written to the pty"
        got += batch
    return got


def read_master(fd: int, size: int) -> bytes:
    data = b""
    while len(data) < size:
        readable, _, _ = select.select([fd], [], [], WAIT)
        assert readable, "timed out reading the pty master"
        data += os.read(fd, size - len(data))
    return data


@pytest.fixture()
def pty():
    master, slave = os.openpty()
    yield master, os.ttyname(slave)
    for fd in (master, slave):
        try:
            os.close(fd)
        except OSError:
            pass


@pytest.fixture()
def pty_link(pty):
    master, path = pty
    link = SerialLink(path, 115200)
    assert read_master(master, 1) == b"\x00"  # the sync byte sent on open
    yield master, link
    link.close()


@posix_only
def test_pty_link_basics(pty_link, pty):
    master, link = pty_link
    assert isinstance(link, Link)
    assert link.url == f"serial://{pty[1]}?baud=115200"
    assert isinstance(link.fileno(), int)


@posix_only
def test_pty_receives_frames_written_in_pieces(pty_link):
    master, link = pty_link
    stream = b"".join(encode_serial(sample(seq)) for seq in range(1, 4))
    for start in range(0, len(stream), 7):
        os.write(master, stream[start : start + 7])
    assert recv_until(link, 3) == [sample(1), sample(2), sample(3)]
    assert link.counters.rx_frames == 3 and link.counters.rx_bytes == len(stream)


@posix_only
def test_pty_send_writes_cobs_frames(pty_link):
    master, link = pty_link
    link.send(Command(9, 8, -2.0))
    link.send(Stop(1))
    expected = encode_serial(Command(9, 8, -2.0)) + encode_serial(Stop(1))
    data = read_master(master, len(expected))
    assert data == expected
    assert StreamDecoder().feed(data) == [Command(9, 8, -2.0), Stop(1)]
    assert link.counters.tx_frames == 2 and link.counters.tx_bytes == 1 + len(expected)


@posix_only
def test_pty_garbage_is_counted_and_resynchronised(pty_link):
    master, link = pty_link
    # A device starts with a 0x00 so the host is in sync; then a bad COBS run, a bad CRC run.
    os.write(master, b"\x00\x05\x11\x00" + b"\x06\x01\x10\xaa\xbb\xcc\x00" + encode_serial(sample(1)))
    assert recv_until(link, 1) == [sample(1)]
    assert link.counters.rejected.cobs == 1 and link.counters.rejected.crc == 1


@posix_only
def test_pty_partial_frame_before_first_delimiter_is_not_an_error(pty_link):
    master, link = pty_link
    frame = encode_serial(sample(1))
    os.write(master, frame[5:] + frame)  # joined mid-frame: the tail is skipped silently
    assert recv_until(link, 1) == [sample(1)]
    assert link.counters.rejected.total_rejected == 0


@posix_only
def test_pty_sequence_check(pty_link):
    master, link = pty_link
    os.write(master, b"".join(encode_serial(sample(s)) for s in (5, 4, 9)))
    assert [m.seq for m in recv_until(link, 2)] == [5, 9]
    assert link.counters.rejected.sequence == 1 and link.counters.lost_samples == 3


@posix_only
def test_pty_timeout_returns_empty(pty_link):
    _, link = pty_link
    assert link.recv(timeout=0.01) == []
    assert link.recv(timeout=0) == []


@posix_only
def test_pty_other_side_gone_raises_link_error(pty):
    master, path = pty
    link = SerialLink(path, 115200)
    try:
        os.close(master)
        with pytest.raises(LinkError, match="unplugged"):
            link.recv(timeout=WAIT)
    finally:
        link.close()


@posix_only
def test_port_is_held_exclusively(pty_link, pty):
    with pytest.raises(LinkError, match="no other program holds the port"):
        SerialLink(pty[1], 115200)


def test_missing_port_is_explained():
    with pytest.raises(LinkError, match="rigloop ports"):
        SerialLink("/dev/rigloop-no-such-port", 115200)


@pytest.mark.parametrize("baud", [0, -9600, "fast", True])
def test_bad_baud_is_explained(baud):
    with pytest.raises(LinkError, match="baud="):
        SerialLink("loop://", baud)  # type: ignore[arg-type]


def test_loop_port_round_trip():
    link = SerialLink("loop://", 921600)
    try:
        assert link.fileno() is None  # no descriptor: pyserial timeouts are used
        link.send(Query())
        link.send(sample(1, n=32))
        # the loop port echoes both; the QUERY travels the wrong way for a host (protocol 1.1 §3)
        assert recv_until(link, 1) == [sample(1, n=32)]
        assert link.recv(timeout=0.01) == []
        assert link.counters.rejected.total_rejected == 1 and link.counters.rejected.type == 1
    finally:
        link.close()
    with pytest.raises(LinkError, match="closed"):
        link.send(Query())


@posix_only
def test_pty_long_burst_arrives_complete_and_in_order(pty_link):
    master, link = pty_link
    burst = b"".join(encode_serial(sample(seq, n=32)) for seq in range(1, 201))  # ~32 kB
    written = 0
    got = []
    while written < len(burst):  # the pty buffer is small: write as the link reads
        written += os.write(master, burst[written : written + 2048])
        got += link.recv(timeout=0)
    got += recv_until(link, 200 - len(got)) if len(got) < 200 else []
    assert [s.seq for s in got] == list(range(1, 201))
    assert link.counters.rejected.total_rejected == 0
