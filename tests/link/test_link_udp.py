"""UdpLink on loopback against a plain socket standing in for the device."""

from __future__ import annotations

import socket
import threading

import pytest

from rigloop.link.base import Link, LinkError
from rigloop.link.udp import UdpLink
from rigloop.protocol.framing import decode_frame, encode_frame
from rigloop.protocol.messages import Command, Hello, Query, Sample, Stop

WAIT = 10.0  # generous upper bound for a message that is already on its way


@pytest.fixture()
def device():
    sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    sock.bind(("127.0.0.1", 0))
    sock.settimeout(WAIT)
    yield sock
    sock.close()


@pytest.fixture()
def link(device):
    link = UdpLink("127.0.0.1", device.getsockname()[1])
    yield link
    link.close()


def sample(seq: int) -> Sample:
    return Sample(seq, seq * 1000, 0, 0.5, 0, (float(seq),))


def recv_until(link: UdpLink, count: int) -> list:
    got = []
    while len(got) < count:
        batch = link.recv(timeout=WAIT)
        assert batch, "timed out waiting for a datagram sent on loopback"
        got += batch
    return got


def test_is_a_link_and_binds_loopback_only(link):
    assert isinstance(link, Link)
    host, port = link.local_address
    assert host == "127.0.0.1" and port > 0
    assert link.url.startswith("udp://127.0.0.1:")
    assert isinstance(link.fileno(), int)


def test_send_reaches_the_device_as_one_frame(link, device):
    link.send(Command(7, 6, 0.25))
    data, addr = device.recvfrom(2048)
    assert data == encode_frame(Command(7, 6, 0.25))
    assert addr == link.local_address
    assert link.counters.tx_frames == 1 and link.counters.tx_bytes == len(data)


def test_recv_returns_everything_available(link, device):
    for seq in range(5):
        device.sendto(encode_frame(sample(seq)), link.local_address)
    assert recv_until(link, 5) == [sample(seq) for seq in range(5)]
    assert link.counters.rx_frames == 5
    assert link.counters.rejected.accepted == 5


def test_recv_waits_for_a_late_datagram(link, device):
    ready = threading.Event()

    def late_sender():
        ready.wait(WAIT)
        device.sendto(encode_frame(sample(7)), link.local_address)

    thread = threading.Thread(target=late_sender)
    thread.start()
    ready.set()
    try:
        assert link.recv(timeout=WAIT) == [sample(7)]
    finally:
        thread.join(WAIT)


def test_recv_timeout_returns_empty(link):
    assert link.recv(timeout=0.01) == []
    assert link.recv(timeout=0) == []


def test_foreign_sender_is_dropped_and_counted(link, device):
    stranger = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    stranger.bind(("127.0.0.1", 0))
    try:
        stranger.sendto(encode_frame(Stop(1)), link.local_address)
        device.sendto(encode_frame(sample(1)), link.local_address)
        assert recv_until(link, 1) == [sample(1)]
        assert link.counters.foreign == 1
        assert link.counters.rejected.total_rejected == 0
    finally:
        stranger.close()


def test_bad_frames_are_counted_never_raised(link, device):
    bad = bytearray(encode_frame(sample(1)))
    bad[-1] ^= 0xFF
    device.sendto(bytes(bad), link.local_address)
    device.sendto(b"\x01", link.local_address)
    device.sendto(encode_frame(sample(2)), link.local_address)
    assert recv_until(link, 1) == [sample(2)]
    assert link.counters.rejected.crc == 1 and link.counters.rejected.short == 1


def test_out_of_order_samples_are_dropped_and_gaps_counted(link, device):
    for seq in (10, 12, 11, 12, 15):
        device.sendto(encode_frame(sample(seq)), link.local_address)
    got = recv_until(link, 3)
    assert [s.seq for s in got] == [10, 12, 15]
    assert link.counters.rejected.sequence == 2
    assert link.counters.lost_samples == 1 + 2


def test_hello_restarts_the_sample_sequence(link, device):
    hello = Hello(1, 1, 1, 1, 0, 1000, 2000, 0.0, 0.0, 1.0, "fan")
    for msg in (sample(500), hello, sample(0)):
        device.sendto(encode_frame(msg), link.local_address)
    assert recv_until(link, 3) == [sample(500), hello, sample(0)]
    assert link.counters.rejected.sequence == 0


def test_closed_link_raises(link):
    link.close()
    link.close()  # idempotent
    with pytest.raises(LinkError, match="closed"):
        link.send(Query())
    with pytest.raises(LinkError, match="closed"):
        link.recv(timeout=0)
    assert link.fileno() is None


def test_refuses_to_send_a_non_finite_command(link, device):
    with pytest.raises(LinkError, match="not finite"):
        link.send(Command(1, 0, float("nan")))
    assert link.counters.tx_frames == 0


@pytest.mark.parametrize(
    "kwargs, words",
    [
        ({"device_host": "127.0.0.1", "device_port": 70000}, "device_port=70000"),
        ({"device_host": "127.0.0.1", "device_port": 0}, "device_port=0"),
        ({"device_host": "127.0.0.1", "device_port": 5, "local_port": -1}, "local_port=-1"),
        # 192.0.2.0/24 is reserved for documentation (RFC 5737): only the config is checked, no traffic.
        ({"device_host": "192.0.2.10", "device_port": 5}, "local_host"),
    ],
)
def test_bad_arguments_are_explained(kwargs, words):
    with pytest.raises(LinkError, match=words):
        UdpLink(**kwargs)


def test_local_port_in_use_is_explained(device):
    taken = device.getsockname()[1]
    with pytest.raises(LinkError, match="choose a free local_port"):
        UdpLink("127.0.0.1", 9, local_port=taken)


def test_round_trip_through_a_device_that_echoes_commands(link, device):
    link.send(Command(1, 0, 2.5))
    data, addr = device.recvfrom(2048)
    cmd = decode_frame(data)
    device.sendto(encode_frame(Sample(0, 0, 0, cmd.value, cmd.seq, ())), addr)
    (reply,) = recv_until(link, 1)
    assert reply.applied == 2.5 and reply.last_cmd_seq == 1


def test_kernel_receive_stamps_accompany_each_message():
    """Where the OS stamps datagrams on arrival (Linux), each received message carries the
    arrival time; the engine measures sample-to-command latency from it."""
    import socket as _socket
    import sys
    import time

    from rigloop.link.udp import UdpLink
    from rigloop.protocol.framing import encode_frame
    from rigloop.protocol.messages import Sample

    peer = _socket.socket(_socket.AF_INET, _socket.SOCK_DGRAM)
    peer.bind(("127.0.0.1", 0))
    link = UdpLink("127.0.0.1", peer.getsockname()[1])
    try:
        before = time.time()
        for seq in (1, 2):
            peer.sendto(encode_frame(Sample(seq, 0, 0, 0.0, 0, (1.0,))), link.local_address)
        msgs, stamps = [], []
        deadline = time.monotonic() + 5
        while len(msgs) < 2 and time.monotonic() < deadline:
            msgs += link.recv(0.5)
            stamps += link.last_rx_times
        after = time.time()
        assert [m.seq for m in msgs] == [1, 2]
        if sys.platform.startswith("linux"):
            assert len(stamps) == 2
            assert all(before - 0.01 <= t <= after + 0.01 for t in stamps)
    finally:
        link.close()
        peer.close()
