"""What the host's link refuses and how it is told: implausible sequence jumps (protocol 1.1 §5),
frames with a wrong or missing tag on a keyed link (§14), foreign senders — counted, never
delivered, and reported as rate-limited events (engine/link_events.py)."""

from __future__ import annotations

import socket

import pytest

from rigloop.engine.link_events import REPORT_EVERY_S, RejectionReporter
from rigloop.link.udp import UdpLink
from rigloop.protocol.auth import DeviceAuth
from rigloop.protocol.framing import encode_frame
from rigloop.protocol.messages import Hello, Query, Sample

WAIT = 10.0
KEY = bytes(range(32))


@pytest.fixture()
def device():
    sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    sock.bind(("127.0.0.1", 0))
    sock.settimeout(WAIT)
    yield sock
    sock.close()


def sample(seq: int) -> Sample:
    return Sample(seq, seq * 1000, 0, 0.5, 0, (float(seq),))


def drain(link, until) -> list:
    got = []
    for _ in range(200):
        got += link.recv(0.05)
        if until():
            return got
    raise AssertionError("the datagrams never arrived")


def test_an_implausible_jump_is_a_rejected_frame_not_lost_samples(device):
    with UdpLink("127.0.0.1", device.getsockname()[1]) as link:
        to = link.local_address
        for seq in (10, 11, 11 + 0x40000000, 12, 14):     # a forged jump of 2^30 in the middle
            device.sendto(encode_frame(sample(seq)), to)
        got = drain(link, lambda: link.counters.rx_frames + link.counters.rejected.sequence >= 5)
        assert [m.seq for m in got] == [10, 11, 12, 14]
        assert link.counters.lost_samples == 1                 # only 13, not a billion
        assert link.counters.rejected.sequence == 1


def test_a_keyed_link_drops_untagged_and_wrongly_tagged_samples(device):
    with UdpLink("127.0.0.1", device.getsockname()[1], key=KEY) as link:
        link.send(Query(link.auth.host_nonce))
        data, host_addr = device.recvfrom(2048)
        dev = DeviceAuth(KEY)
        dev.start_session(link.auth.host_nonce)
        hello = Hello(1, 1, 1, 1, 0, 1000, 10000, 0.0, 0.0, 1.0, "d", 100, 10**6, 1, dev.device_nonce)
        device.sendto(encode_frame(hello, auth=dev), host_addr)
        drain(link, lambda: link.auth.ready)
        forger = DeviceAuth(bytes(32))                      # another key
        forger.start_session(link.auth.host_nonce)
        forger.device_nonce = dev.device_nonce
        device.sendto(encode_frame(sample(1)), host_addr)                  # no tag
        device.sendto(encode_frame(sample(2), auth=forger), host_addr)     # wrong key
        good = encode_frame(sample(3), auth=dev)
        device.sendto(good, host_addr)
        device.sendto(good, host_addr)                                      # replayed
        got = drain(link, lambda: link.counters.rejected.auth >= 3 and link.counters.rx_frames >= 2)
        assert [m.seq for m in got if isinstance(m, Sample)] == [3]
        assert link.counters.rejected.auth == 3


class _Counters:
    def __init__(self):
        from rigloop.protocol.framing import RejectCounters

        self.foreign = 0
        self.rejected = RejectCounters()


def test_rejections_are_reported_first_then_as_counts_at_most_every_few_seconds():
    c = _Counters()
    rep = RejectionReporter(c)
    assert rep.poll(0.0) == []
    c.foreign += 1000                                   # a flood arrives at once
    (first,) = rep.poll(0.1)
    assert first[0] == "foreign" and first[1].startswith("first") and first[2] == 1000
    c.foreign += 5000
    assert rep.poll(0.2) == [] and rep.poll(REPORT_EVERY_S) == []          # rate-limited
    (later,) = rep.poll(0.1 + REPORT_EVERY_S)
    assert later[1].startswith("5999 more") and later[2] == 6000        # nothing is lost from the count
    c.rejected.auth += 2
    (auth,) = rep.poll(0.2 + REPORT_EVERY_S)
    assert auth[0] == "auth" and auth[1].startswith("first")
    (rest,) = rep.poll(0.3 + REPORT_EVERY_S, final=True)               # the session's end says the rest
    assert rest[0] == "auth" and rest[1].startswith("1 more")
    assert rep.poll(99.0, final=True) == []


@pytest.mark.slow
def test_a_flood_at_the_host_is_counted_in_the_session_and_logged_rate_limited(tmp_path):
    """A foreign local process sends forged SAMPLEs (a huge sequence jump, 100 % applied) to the
    engine's own UDP port during a run: nothing of it is recorded as a reading, the session
    summary counts it, and events.csv tells of it in a few rows, not one per datagram."""
    import threading
    import time
    from pathlib import Path

    import pandas as pd
    import yaml

    from rigloop.config import load_config
    from rigloop.engine.loop import Engine

    demo = Path(__file__).resolve().parents[2] / "configs" / "demo_fan.yaml"
    cfg = load_config(demo, ["device.sim.clock=lockstep", f"recording.dir={tmp_path}"])
    engine = Engine(cfg, duration_s=4.0)
    result = {}
    runner = threading.Thread(target=lambda: result.setdefault("r", engine.run()))
    runner.start()
    forger = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    sent = 0
    try:
        deadline = time.monotonic() + 60
        while engine.t_last is None:                       # wait for the first recorded sample
            assert time.monotonic() < deadline and runner.is_alive(), "the run did not start"
            time.sleep(0.01)
        target = engine.link.local_address
        forged = encode_frame(Sample(0x40000000, 0, 0x21, 100.0, 1, (99999.0, 9.0, 9.0, 99.0)))
        while runner.is_alive() and sent < 20000:
            forger.sendto(forged, target)
            sent += 1
            if sent % 100 == 0:
                time.sleep(0.002)          # a pace, not a synchronisation
    finally:
        forger.close()
        runner.join(240)
    res = result["r"]
    assert res.outcome == "completed", res.stop_reason
    meta = yaml.safe_load((res.session_dir / "session.yaml").read_text())
    assert meta["summary"]["foreign_frames"] >= 100
    samples = pd.read_csv(res.session_dir / "samples.csv")
    assert samples.speed_rpm.max() < 99999.0 and samples.u.max() <= samples.u_cmd.max() + 1e-4   # f32 on the wire
    events = pd.read_csv(res.session_dir / "events.csv")
    rows = events[events.kind == "link_rejected"]
    assert 1 <= len(rows) <= 2 + 4.0 / REPORT_EVERY_S * 3      # first, a few counts, the end
    assert rows.detail.iloc[0].startswith("foreign: first")
    assert rows.value.max() == meta["summary"]["foreign_frames"]
