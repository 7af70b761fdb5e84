"""Fault specs (parsing, errors) and the effect of each fault kind on the device (no processes)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from rigloop.plants import make_plant
from rigloop.protocol import (
    Arm,
    Command,
    Configure,
    Fault,
    FaultCode,
    ProtocolError,
    Sample,
    Status,
    Stop,
    decode_frame,
    encode_frame,
)
from rigloop.sim.device import SimDevice
from rigloop.sim.faults import FAULT_KINDS, FaultInjector, FaultSpecError, parse_fault

P = 10_000
WD = 30_000


# --- parsing ------------------------------------------------------------------------------------


@pytest.mark.parametrize("text, fields", [
    ("drop:p=0.05", {"kind": "drop", "p": 0.05, "at_s": 0.0}),
    ("drop:p=0.5,at=2", {"kind": "drop", "p": 0.5, "at_s": 2.0}),
    ("corrupt:p=1", {"kind": "corrupt", "p": 1.0}),
    ("freeze:channel=speed_rpm,at=1.5", {"kind": "freeze", "channel": "speed_rpm", "at_s": 1.5}),
    ("spike:channel=speed_rpm,at=1,value=5000", {"kind": "spike", "value": 5000.0, "samples": 1}),
    ("spike: channel=temp_c , at=1, value=-3, samples=4", {"samples": 4, "value": -3.0}),
    ("nan:channel=current_a,at=0.25", {"kind": "nan", "channel": "current_a", "at_s": 0.25}),
    ("silent:at=3", {"kind": "silent", "at_s": 3.0}),
    ("deaf:at=3", {"kind": "deaf", "at_s": 3.0}),
    ("load:at=2,torque=0.01", {"kind": "load", "torque": 0.01}),
    ("ignore-stop", {"kind": "ignore-stop"}),
])
def test_parse_valid_specs(text, fields):
    spec = parse_fault(text)
    for key, value in fields.items():
        assert getattr(spec, key) == value


@pytest.mark.parametrize("text, words", [
    ("wobble:p=1", ["unknown kind 'wobble'", "drop", "ignore-stop"]),
    ("drop:q=0.1", ["unknown key 'q'", "allowed keys: p, at"]),
    ("drop:p=1.5", ["p='1.5'", "probability between 0 and 1"]),
    ("drop:p=abc", ["p='abc'"]),
    ("drop", ["missing key p"]),
    ("freeze:channel=speed_rpm", ["missing key at", "needs channel, at"]),
    ("spike:channel=x,at=1,value=nan", ["value='nan'", "finite"]),
    ("spike:channel=x,at=1,value=2,samples=0", ["samples='0'", "whole number >= 1"]),
    ("silent:at=-1", ["at='-1'", "seconds >= 0"]),
    ("drop:p=0.1,p=0.2", ["given twice"]),
    ("drop:p", ["not key=value"]),
    ("ignore-stop:at=1", ["unknown key 'at'", "(none)"]),
    ("", ["empty fault specification"]),
])
def test_parse_errors_name_the_problem_and_the_allowed_set(text, words):
    with pytest.raises(FaultSpecError) as info:
        parse_fault(text)
    for word in words:
        assert word in str(info.value)


def test_fault_spec_error_is_a_value_error():
    assert issubclass(FaultSpecError, ValueError)     # the config validator catches ValueError


def test_every_kind_is_documented_in_the_module_docstring():
    import rigloop.sim.faults as module

    for kind in FAULT_KINDS:
        assert f"\n{kind} " in module.__doc__


def test_unknown_fault_channel_is_refused_with_the_sent_channels():
    with pytest.raises(FaultSpecError, match="sent channels: speed_rpm, current_a"):
        FaultInjector(["nan:channel=temp_c,at=1"], channel_names=["speed_rpm", "current_a"])


# --- outgoing faults ------------------------------------------------------------------------------


def frames(n: int) -> list[bytes]:
    return [encode_frame(Sample(i, i * P, 0, 1.0, 0, (1.0, 2.0))) for i in range(n)]


def armed(inj: FaultInjector, at_us: int = 0) -> FaultInjector:
    inj.note_arm(at_us)
    return inj


def test_drop_rate_and_start_time_and_determinism():
    inj = armed(FaultInjector(["drop:p=0.2,at=1"], seed=7))
    before = [inj.outgoing(f, 999_999) for f in frames(200)]
    assert all(f is not None for f in before)                    # nothing lost before at=1 s
    after = [inj.outgoing(f, 1_000_000) for f in frames(2000)]
    lost = sum(f is None for f in after)
    # Binomial(2000, 0.2): mean 400, std 17.9; 5 std either side (common practice).
    assert 400 - 90 < lost < 400 + 90
    assert inj.counters["dropped"] == lost
    again = armed(FaultInjector(["drop:p=0.2,at=1"], seed=7))
    assert [again.outgoing(f, 1_000_000) is None for f in frames(2000)] == [f is None for f in after]
    other = armed(FaultInjector(["drop:p=0.2,at=1"], seed=8))
    assert [other.outgoing(f, 1_000_000) is None for f in frames(2000)] != [f is None for f in after]


def test_corrupted_frames_are_always_rejected_for_crc():
    inj = FaultInjector(["corrupt:p=1"], seed=1)
    reasons = []
    for f in frames(500):
        bad = inj.outgoing(f, 0)
        assert bad is not None and bad != f and len(bad) == len(f)
        assert inj.last_corrupted
        with pytest.raises(ProtocolError) as info:
            decode_frame(bad)
        reasons.append(info.value.reason)
    assert set(reasons) == {"crc"}
    assert inj.counters["corrupted"] == 500


def test_silent_sends_nothing_from_its_time():
    inj = armed(FaultInjector(["silent:at=0.5"]))
    assert inj.outgoing(b"abcd", 499_999) == b"abcd"
    assert inj.outgoing(b"abcd", 500_000) is None
    assert inj.counters["silenced"] == 1


def test_fault_times_count_from_the_first_arm_not_from_start_up():
    # The walk-through's "broken sensor at t = 5 s" must not fire before the run when the host
    # connects late: nothing timed acts before ARM; at= counts from the first ARM; a re-arm
    # (after a trip, say) does not restart the clock; at=0 acts from start-up.
    inj = FaultInjector(["silent:at=5", "corrupt:p=1"], seed=1)
    assert inj.outgoing(b"abcd", 60_000_000) != b"abcd"     # corrupt (at=0): before any ARM
    assert inj.counters["silenced"] == 0                    # silent waits for the ARM ...
    inj.note_arm(60_000_000)
    assert inj.outgoing(b"abcd", 64_999_999) is not None
    inj.note_arm(64_000_000)                                # ... a second ARM changes nothing
    assert inj.outgoing(b"abcd", 65_000_000) is None        # ... and acts 5 s after the first


def test_device_starts_the_fault_clock_at_arm():
    plant = make_plant("fan")
    names = list(plant.channel_names)
    dev = SimDevice(plant, channels=names, period_us=P,
                    faults=FaultInjector(["nan:channel=temp_c,at=0.05"], seed=1, channel_names=names))
    dev.start(0)
    dev.handle(Configure(P, WD, 0.0, 0.0, 100.0), 0)
    idle = [m for _ in range(30) for m in dev.tick() if isinstance(m, Sample)]   # 0.3 s unarmed
    assert all(math.isfinite(s.channels[3]) for s in idle)
    dev.handle(Arm(), idle[-1].t_us)
    samples, _ = run(dev, 20)
    assert [math.isnan(s.channels[3]) for s in samples] == [s.t_us >= idle[-1].t_us + 50_000 for s in samples]


# --- channel faults through the device ------------------------------------------------------------


def device(*faults: str, channels=None) -> SimDevice:
    plant = make_plant("fan")
    names = channels or list(plant.channel_names)
    dev = SimDevice(plant, channels=names, period_us=P,
                    faults=FaultInjector(faults, seed=1, channel_names=names))
    dev.start(0)
    dev.handle(Configure(P, WD, 0.0, 0.0, 100.0), 0)
    dev.handle(Arm(), 0)
    return dev


def run(dev: SimDevice, ticks: int, u: float = 80.0) -> tuple[list[Sample], list[Fault]]:
    """Answer every sample with ``u``; return the samples and faults sent."""
    samples, faults = [], []
    seq = getattr(dev, "_cmd", 0)
    for _ in range(ticks):
        for m in dev.tick():
            if isinstance(m, Sample):
                samples.append(m)
                seq += 1
                dev.handle(Command(seq, m.seq, u), m.t_us)
            else:
                faults.append(m)
    dev._cmd = seq
    return samples, faults


def test_freeze_holds_the_value_read_at_the_first_sample_from_its_time():
    dev = device("freeze:channel=speed_rpm,at=0.2")
    samples, _ = run(dev, 40)
    speed = [s.channels[0] for s in samples if s.t_us >= 200_000]
    before = [s.channels[0] for s in samples if s.t_us < 200_000]
    assert len(set(speed)) == 1 and len(speed) == 21          # ticks at 0.20 .. 0.40 s
    assert len(set(before[-5:])) == 5                  # it was changing (spinning up)
    assert speed[0] > before[-1]
    assert dev.plant.read()[0] > speed[0] + 50.0       # the true speed went on rising
    currents = [s.channels[1] for s in samples if s.t_us >= 200_000]
    assert len(set(currents)) > 1                      # other channels unaffected


def test_spike_replaces_exactly_n_samples():
    dev = device("spike:channel=current_a,at=0.1,value=9.5,samples=3")
    samples, _ = run(dev, 30)
    spiked = [s.t_us for s in samples if s.channels[1] == 9.5]
    assert spiked == [100_000, 110_000, 120_000]
    assert dev.faults.counters["spiked"] == 3


def test_nan_channel_reads_nan_from_its_time_on_and_others_stay_finite():
    dev = device("nan:channel=temp_c,at=0.05")
    samples, _ = run(dev, 20)
    for s in samples:
        assert math.isnan(s.channels[3]) == (s.t_us >= 50_000)
        assert all(math.isfinite(v) for v in s.channels[:3])
    assert len(encode_frame(samples[-1])) > 0          # NaN channels still go on the wire


def test_channel_faults_act_before_raw_scaling():
    from rigloop.sim.device import SentChannel

    plant = make_plant("fan")
    names = ["speed_rpm"]
    dev = SimDevice(plant, channels=[SentChannel("speed_rpm", scale=10.0, offset=100.0)],
                    period_us=P, faults=FaultInjector(["spike:channel=speed_rpm,at=0,value=600"],
                                                      channel_names=names))
    dev.start(0)
    (s,) = dev.tick()
    assert s.channels[0] * 10.0 + 100.0 == 600.0       # engineering value as specified


def test_load_step_slows_the_fan_at_its_time():
    plain = device()
    loaded = device("load:at=1,torque=0.01")
    a, _ = run(plain, 300)
    b, _ = run(loaded, 300)
    for sa, sb in zip(a, b):
        if sa.t_us <= 1_000_000:
            assert sa.channels == sb.channels          # identical until the step
    assert b[-1].channels[0] < a[-1].channels[0] - 100.0
    assert b[-1].channels[1] > a[-1].channels[1]       # more current to carry the load
    assert loaded.faults.counters["load_steps"] == 1
    assert loaded.plant.load_torque(loaded.plant.t) == 0.01


def test_deaf_device_ignores_frames_and_its_watchdog_fires():
    dev = device("deaf:at=0.1")
    samples, faults = run(dev, 20)
    assert dev.ignored["deaf"] > 0 and dev.faults.counters["deaf_ignored"] == dev.ignored["deaf"]
    assert [f.code for f in faults] == [FaultCode.WATCHDOG]
    last_heard = max(s.t_us for s in samples if s.t_us < 100_000)
    assert WD < faults[0].t_us - last_heard <= WD + P
    assert samples[-1].applied == 0.0 and samples[-1].status & Status.WATCHDOG
    assert dev.feed_datagram(encode_frame(Stop(0)), 190_000) == []
    assert not dev.stop_latched                         # it truly hears nothing


def test_silent_device_keeps_running_the_plant_and_the_watchdog():
    """`silent` acts on the way out: the device still produces samples and the watchdog FAULT."""
    dev = device("silent:at=0.1")
    samples, faults = run(dev, 15)
    sent = [dev.faults.outgoing(encode_frame(s), s.t_us) for s in samples]
    assert all(f is not None for f, s in zip(sent, samples) if s.t_us < 100_000)
    assert all(f is None for f, s in zip(sent, samples) if s.t_us >= 100_000)
    assert samples[-1].channels[0] > samples[9].channels[0]      # the plant went on
    # a host that hears nothing stops answering: the watchdog still fires, silently
    last_answer_us = samples[-1].t_us
    quiet = [m for _ in range(2 * WD // P + 2) for m in dev.tick()]
    watchdog = [m for m in quiet if isinstance(m, Fault)]
    assert [f.code for f in watchdog] == [FaultCode.WATCHDOG] and not faults
    assert WD < watchdog[0].t_us - last_answer_us <= WD + P
    assert dev.faults.outgoing(encode_frame(watchdog[0]), watchdog[0].t_us) is None
    assert [m for m in quiet if isinstance(m, Sample)][-1].applied == 0.0


def test_ignore_stop_leaves_the_output_running():
    dev = device("ignore-stop")
    assert dev.faults.ignore_stop
    samples, _ = run(dev, 5, u=40.0)
    dev.handle(Stop(1), samples[-1].t_us)
    samples, _ = run(dev, 3, u=40.0)
    assert all(s.applied == 40.0 and not s.status & Status.STOP_LATCHED for s in samples)
    assert dev.ignored["stop"] == 1 and dev.faults.counters["stop_ignored"] == 1


def test_same_seed_same_faulty_run():
    def trace(seed):
        dev = SimDevice(make_plant("fan"), period_us=P,
                        faults=FaultInjector(["drop:p=0.3", "corrupt:p=0.3"], seed=seed,
                                             channel_names=make_plant("fan").channel_names))
        dev.start(0)
        return [dev.faults.outgoing(encode_frame(dev.tick()[0]), k * P) for k in range(200)]
    assert trace(5) == trace(5)
    assert trace(5) != trace(6)
    values = np.array([f is None for f in trace(5)])
    assert 0 < values.sum() < 200
