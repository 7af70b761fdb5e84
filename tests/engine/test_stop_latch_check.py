"""The "device did not latch STOP" warning judges only samples the device sent after it could
have seen the STOP - not the backlog a frozen host reads together with the watchdog FAULT."""

from __future__ import annotations

import time
from types import SimpleNamespace

import pytest

from engine_helpers import fan_config
from rigloop.engine.records import Trip
from rigloop.protocol.messages import Fault, FaultCode, Sample, Status, Stop

ARMED = int(Status.ARMED | Status.CONFIGURED)
WATCHDOG_SAFE = int(Status.WATCHDOG | Status.CONFIGURED)
LATCHED = int(Status.STOP_LATCHED | Status.WATCHDOG | Status.CONFIGURED)
PERIOD_US = 2000                      # the demo fan: 500 Hz


class WireLink:
    """Records what the engine writes; nothing to read (the test hands messages in)."""

    url = "test://wire"

    def __init__(self):
        self.sent = []
        self.counters = SimpleNamespace(rejected=SimpleNamespace(total_rejected=0), lost_samples=0)

    def send(self, msg) -> None:
        self.sent.append(msg)


class Events:
    critical = False

    def __init__(self):
        self.events = []

    def on_tick(self, rec):
        pass

    def on_event(self, ev):
        self.events.append(ev)

    def poll(self, now):
        pass


@pytest.fixture
def engine_on_wire(tmp_path):
    """Build engines on a recorded wire; close their wake sockets afterwards."""
    made = []

    def build(*, realtime: bool):
        engine, events = _engine_on_wire(tmp_path, realtime=realtime)
        made.append(engine)
        return engine, events

    yield build
    for engine in made:
        engine._teardown()


def _engine_on_wire(tmp_path, *, realtime: bool):
    from rigloop.engine.loop import Engine

    engine = Engine(fan_config(tmp_path), link=WireLink())
    engine.hello = SimpleNamespace(name="wire-device")
    engine.realtime = realtime
    events = Events()
    engine.add_subscriber(events)
    engine._prepare_run("test://wire")
    return engine, events


def sample(seq: int, status: int) -> Sample:
    return Sample(seq, seq * PERIOD_US, status, 0.0, seq, (1000.0, 0.1, 10.0, 25.0))


def feed(engine, msgs) -> None:
    """What the loop does with one read: route (FAULTs act at once), then handle the samples."""
    samples = engine._route(msgs)
    now = time.perf_counter()
    if samples:
        engine.last_sample_host = now
        engine._handle_batch(samples, now)


def latch_warnings(events):
    return [e for e in events.events if e.kind == "warning" and "did not latch STOP" in e.detail]


@pytest.mark.parametrize("realtime", [True, False])
def test_backlog_read_with_the_watchdog_fault_gives_no_false_warning(engine_on_wire, realtime):
    engine, events = engine_on_wire(realtime=realtime)
    feed(engine, [sample(s, ARMED) for s in range(1, 6)])          # armed and running
    # The host froze: the device kept sampling (ARMED), then its watchdog fired; all of it
    # arrives in one read, followed by samples that show the watchdog latch (not ARMED).
    backlog = [sample(s, ARMED) for s in range(6, 60)]
    after = [sample(s, WATCHDOG_SAFE) for s in range(61, 64)]
    feed(engine, backlog + [Fault(60 * PERIOD_US, int(FaultCode.WATCHDOG), WATCHDOG_SAFE, 0.0)] + after)
    feed(engine, [sample(s, LATCHED) for s in range(64, 70)])
    assert engine.trip is not None and engine.trip.cause == "device-watchdog"
    assert any(isinstance(m, Stop) for m in engine.link.sent)
    assert latch_warnings(events) == []


def test_a_device_that_ignores_stop_is_still_reported(engine_on_wire):
    """The check still works: samples sent well after STOP that still show ARMED are reported."""
    engine, events = engine_on_wire(realtime=False)
    feed(engine, [sample(s, ARMED) for s in range(1, 6)])
    engine.request("estop", source="test")
    engine._drain_requests()
    feed(engine, [sample(6, ARMED)])                 # may have left before STOP arrived: not judged
    assert latch_warnings(events) == []
    feed(engine, [sample(7, ARMED)])                 # two past the newest at STOP: judged
    assert len(latch_warnings(events)) == 1


def test_on_a_real_time_clock_samples_within_the_host_freeze_are_not_judged(engine_on_wire):
    """A stale-data trip decided before the backlog is read: the device time STOP could reach
    the device is estimated from the wall time since the newest sample arrived."""
    engine, events = engine_on_wire(realtime=True)
    feed(engine, [sample(s, ARMED) for s in range(1, 6)])
    engine.last_sample_host -= 0.2                    # 0.2 s without reading (100 periods)
    engine._trip(Trip("stale-data", "no fresh sample (test)"))
    feed(engine, [sample(s, ARMED) for s in range(6, 100)])          # sent during the freeze
    assert latch_warnings(events) == []
    feed(engine, [sample(s, ARMED) for s in range(100, 110)])       # after: still ARMED
    assert len(latch_warnings(events)) == 1

