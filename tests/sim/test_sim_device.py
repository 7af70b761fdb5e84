"""SimDevice, the protocol state machine of docs/protocol.md §6, driven by hand (no processes).

Device time is passed explicitly, so every test steps a deterministic clock.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from rigloop.plants import make_plant
from rigloop.protocol import (
    Arm,
    Command,
    Configure,
    Fault,
    FaultCode,
    Hello,
    Query,
    Sample,
    Status,
    Stop,
    cobs_encode,
    encode_frame,
    encode_serial,
)
from rigloop.sim.device import (
    DEFAULT_WATCHDOG_US,
    MIN_PERIOD_US,
    SentChannel,
    SimDevice,
    build_device,
)

P = 10_000          # period, us
WD = 30_000         # watchdog, us


def new_device(plant: str = "fan", **kw) -> SimDevice:
    kw.setdefault("period_us", P)
    dev = SimDevice(make_plant(plant), **kw)
    dev.start(0)
    return dev


def configured(plant: str = "fan", *, arm: bool = True, **kw) -> SimDevice:
    dev = new_device(plant, **kw)
    (hello,) = dev.handle(Configure(P, WD, 0.0, 0.0, 100.0) if plant == "fan"
                          else Configure(P, WD, 0.0, -12.0, 12.0), 0)
    assert isinstance(hello, Hello)
    if arm:
        assert dev.handle(Arm(), 0) == []
    return dev


def sample_of(out: list) -> Sample:
    samples = [m for m in out if isinstance(m, Sample)]
    assert len(samples) == 1
    return samples[0]


def faults_of(out: list) -> list[Fault]:
    return [m for m in out if isinstance(m, Fault)]


def hold(dev: SimDevice, u: float, ticks: int) -> Sample:
    """Answer ``ticks`` samples with COMMAND ``u`` (as a host does); return the last sample."""
    for _ in range(ticks):
        s = sample_of(dev.tick())
        dev._test_seq = getattr(dev, "_test_seq", 0) + 1
        dev.handle(Command(dev._test_seq, s.seq, u), s.t_us)
    return s


# --- start-up and CONFIGURE ---------------------------------------------------------------------


def test_startup_hello_reports_defaults_and_no_flags():
    dev = SimDevice(make_plant("fan"), period_us=P)
    (hello,) = dev.start(0)
    assert isinstance(hello, Hello)
    assert (hello.proto_min, hello.proto_max) == (1, 1)
    assert hello.n_channels == 4
    assert hello.status == 0                       # not armed, not configured
    assert hello.period_us == P
    assert hello.watchdog_us == DEFAULT_WATCHDOG_US
    assert (hello.safe, hello.u_min, hello.u_max) == (0.0, 0.0, 100.0)
    assert hello.name == "sim-fan"
    first = sample_of(dev.tick())                  # samples flow while idle
    assert first.seq == 0 and first.t_us == 0
    assert first.status == 0 and first.applied == 0.0 and first.last_cmd_seq == 0
    assert len(first.channels) == 4


def test_query_answers_hello():
    dev = new_device()
    (hello,) = dev.handle(Query(), 5)
    assert isinstance(hello, Hello) and hello.status == 0


def test_configure_accepted_answers_hello_with_new_values_and_restarts_the_clock():
    dev = new_device()
    dev.tick(0)
    dev.tick(P)
    (hello,) = dev.handle(Configure(5_000, 20_000, 10.0, 5.0, 90.0), 12_345)
    assert isinstance(hello, Hello)
    assert (hello.period_us, hello.watchdog_us) == (5_000, 20_000)
    assert (hello.safe, hello.u_min, hello.u_max) == (10.0, 5.0, 90.0)
    assert hello.status & Status.CONFIGURED
    assert dev.next_tick_us == 12_345 + 5_000       # sample clock restarted at the new period
    assert dev.configure_count == 1 and dev.last_sample_seq is None   # nothing awaits an answer
    s = sample_of(dev.tick())
    assert s.t_us == 17_345 and s.applied == 10.0
    assert s.status == Status.CONFIGURED


@pytest.mark.parametrize("conf, offending", [
    (Configure(P, WD, 50.0, 60.0, 100.0), 50.0),              # safe below u_min
    (Configure(P, P - 1, 0.0, 0.0, 100.0), P - 1),             # watchdog shorter than a period
    (Configure(MIN_PERIOD_US - 1, WD, 0.0, 0.0, 100.0), MIN_PERIOD_US - 1),  # too fast for us
    (Configure(P, WD, 0.0, 0.0, 150.0), 150.0),                # beyond the PWM's 100 %
    (Configure(P, WD, 0.0, -5.0, 100.0), -5.0),
    (Configure(P, WD, math.nan, 0.0, 100.0), math.nan),        # non-finite
])
def test_bad_configure_sends_fault_4_and_changes_nothing(conf, offending):
    dev = configured(arm=False)
    before = (dev.period_us, dev.watchdog_us, dev.safe, dev.u_min, dev.u_max)
    (fault,) = dev.handle(conf, 100)
    assert isinstance(fault, Fault)
    assert fault.code == FaultCode.CONFIG_REJECTED
    assert fault.t_us == 100
    assert (math.isnan(fault.value) and math.isnan(offending)) or fault.value == offending
    assert (dev.period_us, dev.watchdog_us, dev.safe, dev.u_min, dev.u_max) == before
    assert dev.rejects.value == 1
    s = sample_of(dev.tick())
    assert s.status & Status.RX_ERROR
    assert not sample_of(dev.tick()).status & Status.RX_ERROR    # only until the next SAMPLE


def test_configure_disarms_and_forgets_the_command_sequence():
    dev = configured()
    dev.handle(Command(500, 0, 40.0), 0)
    assert sample_of(dev.tick()).applied == 40.0
    dev.handle(Configure(P, WD, 0.0, 0.0, 100.0), dev.next_tick_us - 1)
    assert not dev.armed and dev.output == 0.0
    dev.handle(Arm(), dev.next_tick_us - 1)
    dev.handle(Command(3, 0, 25.0), dev.next_tick_us - 1)    # older seq: first after CONFIGURE
    assert dev.rejects.sequence == 0
    assert sample_of(dev.tick()).applied == 25.0


# --- ARM, COMMAND, clamp --------------------------------------------------------------------------


def test_arm_before_configure_is_ignored_and_counted():
    dev = new_device()
    assert dev.handle(Arm(), 0) == []
    assert dev.ignored["arm"] == 1
    dev.handle(Command(1, 0, 50.0), 0)
    s = sample_of(dev.tick())
    assert not s.status & Status.ARMED and s.applied == 0.0


def test_command_is_applied_at_the_next_tick_not_before():
    dev = configured()
    s0 = sample_of(dev.tick())
    assert s0.status & Status.ARMED and s0.applied == 0.0       # safe until the first COMMAND
    dev.handle(Command(7, s0.seq, 42.5), s0.t_us + 100)
    assert dev.output == 0.0                                     # still the old value
    s1 = sample_of(dev.tick())
    assert s1.applied == 42.5 and s1.last_cmd_seq == 7
    assert not s1.status & Status.CLAMPED
    s2 = sample_of(dev.tick())                                   # zero-order hold
    assert s2.applied == 42.5 and s2.last_cmd_seq == 7


@pytest.mark.parametrize("value, applied", [(150.0, 100.0), (-3.0, 0.0), (100.0, 100.0)])
def test_command_is_clamped_and_flagged(value, applied):
    dev = configured()
    dev.handle(Command(1, 0, value), 0)
    s = sample_of(dev.tick())
    assert s.applied == applied
    assert bool(s.status & Status.CLAMPED) == (value != applied)
    dev.handle(Command(2, s.seq, 50.0), s.t_us)
    s = sample_of(dev.tick())
    assert s.applied == 50.0 and not s.status & Status.CLAMPED


def test_non_finite_command_is_rejected_for_value():
    dev = configured()
    dev.handle(Command(1, 0, 30.0), 0)
    dev.handle(Command(2, 0, math.inf), 0)
    assert dev.rejects.value == 1
    s = sample_of(dev.tick())
    assert s.applied == 30.0 and s.status & Status.RX_ERROR


def test_sequence_rules_and_wrap():
    dev = configured()
    dev.handle(Command(0xFFFF_FFFE, 0, 10.0), 0)
    dev.handle(Command(0xFFFF_FFFF, 0, 20.0), 0)
    dev.handle(Command(0, 0, 30.0), 0)            # wraps: 0 is newer than 0xFFFFFFFF
    assert dev.rejects.sequence == 0
    dev.handle(Command(0, 0, 99.0), 0)            # repeated
    dev.handle(Command(0xFFFF_FFF0, 0, 99.0), 0)  # older across the wrap
    assert dev.rejects.sequence == 2
    s = sample_of(dev.tick())
    assert s.applied == 30.0 and s.last_cmd_seq == 0 and s.status & Status.RX_ERROR


def test_commands_while_disarmed_pass_the_sequence_check_then_are_ignored():
    dev = configured(arm=False)
    dev.handle(Command(10, 0, 50.0), 0)
    assert dev.ignored["command"] == 1
    dev.handle(Arm(), 0)
    dev.handle(Command(10, 0, 60.0), 0)           # not newer than the ignored one
    assert dev.rejects.sequence == 1
    assert sample_of(dev.tick()).applied == 0.0


# --- STOP -----------------------------------------------------------------------------------------


def test_stop_makes_output_safe_at_once_and_latches_until_arm():
    dev = configured()
    dev.handle(Command(1, 0, 80.0), 0)
    s = sample_of(dev.tick())
    assert s.applied == 80.0
    dev.handle(Stop(1), s.t_us + P // 2)
    assert dev.output == 0.0 and not dev.armed          # at once, before the next tick
    s = sample_of(dev.tick())
    assert s.applied == 0.0
    assert s.status & Status.STOP_LATCHED and not s.status & Status.ARMED
    assert s.last_cmd_seq == 1                          # the last COMMAND applied
    dev.handle(Command(2, s.seq, 90.0), s.t_us)         # ignored while latched
    assert dev.ignored["command"] == 1
    assert sample_of(dev.tick()).applied == 0.0
    dev.handle(Arm(), dev.next_tick_us - 1)
    s = sample_of(dev.tick())
    assert s.status & Status.ARMED and not s.status & Status.STOP_LATCHED
    assert s.applied == 0.0                             # safe until the first COMMAND after ARM
    dev.handle(Command(3, s.seq, 70.0), s.t_us)
    assert sample_of(dev.tick()).applied == 70.0


def test_stop_mid_period_switches_the_plant_input_at_the_stop_time():
    """The plant sees u until the STOP and safe after it, within the same period."""
    dev = configured()
    hold(dev, 100.0, 20)                             # spin up under 100 %
    t_stop = dev.next_tick_us - P + 3_000            # 3 ms into the current period
    reference, late = make_plant("fan"), make_plant("fan")
    reference.state[:] = dev.plant.state
    late.state[:] = dev.plant.state
    dev.handle(Stop(0), t_stop)
    dev.tick()
    reference.advance(100.0, 0.003)
    reference.advance(0.0, 0.007)
    np.testing.assert_allclose(dev.plant.state, reference.state, rtol=1e-12)
    late.advance(100.0, 0.010)                       # a stop only at the next tick differs
    assert abs(dev.plant.state[0] - late.state[0]) > 0.05 * abs(late.state[0])


def test_stop_is_accepted_in_every_state():
    dev = new_device()
    dev.handle(Stop(3), 0)
    assert sample_of(dev.tick()).status & Status.STOP_LATCHED


# --- watchdog -------------------------------------------------------------------------------------


def test_watchdog_fires_after_silence_and_latches_until_arm():
    dev = configured()
    s = sample_of(dev.tick())                            # t = P
    dev.handle(Command(1, s.seq, 60.0), s.t_us)
    last_cmd_us = s.t_us
    fired = None
    for _ in range(10):
        out = dev.tick()
        s = sample_of(out)
        if faults_of(out):
            fired = (faults_of(out)[0], s)
            break
        assert s.applied == 60.0 and s.status & Status.ARMED
    assert fired is not None, "the watchdog never fired"
    fault, s = fired
    assert fault.code == FaultCode.WATCHDOG
    assert fault.status & Status.WATCHDOG and not fault.status & Status.ARMED
    # first tick with silence > watchdog: within watchdog + one period of the last COMMAND
    assert WD < fault.t_us - last_cmd_us <= WD + P
    assert s.applied == 0.0 and s.status & Status.WATCHDOG and not s.status & Status.ARMED
    dev.handle(Command(2, s.seq, 60.0), s.t_us)          # ignored: latched
    s = sample_of(dev.tick())
    assert s.applied == 0.0 and s.status & Status.WATCHDOG
    dev.handle(Arm(), s.t_us)
    s = sample_of(dev.tick())
    assert s.status & Status.ARMED and not s.status & Status.WATCHDOG


def test_watchdog_counts_from_arm_for_the_first_command():
    dev = configured(arm=False)
    dev.handle(Arm(), 0)
    times = []
    for _ in range(6):
        out = dev.tick()
        if faults_of(out):
            times.append(faults_of(out)[0].t_us)
    assert times == [4 * P]                              # first tick with silence > 30 ms


def test_watchdog_equal_to_one_period_never_fires_when_every_sample_is_answered():
    dev = new_device()
    dev.handle(Configure(P, P, 0.0, 0.0, 100.0), 0)
    dev.handle(Arm(), 0)
    seq = 1
    for _ in range(200):
        out = dev.tick()
        s = sample_of(out)
        assert not faults_of(out)
        dev.handle(Command(seq, s.seq, 30.0), s.t_us)    # lockstep: answered at the tick time
        seq += 1
    assert s.status & Status.ARMED


# --- timing, channels, scaling, counters -----------------------------------------------------------


def test_samples_follow_zero_order_hold_against_scipy():
    """Sample k holds y(t_k) of the plant driven by the applied values of earlier samples.

    Reference: scipy.integrate.solve_ivp (RK45, tight tolerances) on the plant's own rhs with
    the piecewise-constant input that the SAMPLEs report; a one-sample shift of the hold would
    put the speed off by hundreds of rpm.
    """
    dev = configured()
    pattern = [20.0, 80.0, 35.0, 100.0, 0.0, 60.0, 140.0, 45.0]
    samples = []
    seq = 1
    for k in range(120):
        s = sample_of(dev.tick())
        samples.append(s)
        dev.handle(Command(seq, s.seq, pattern[(k // 5) % len(pattern)]), s.t_us)
        seq += 1
    model = make_plant("fan")
    x = model.state.copy()
    worst = 0.0
    for a, b in zip(samples, samples[1:]):
        y = model.outputs(x)
        scale = np.maximum(np.abs(y), [50.0, 0.01, 2.0, 1.0])
        worst = max(worst, float(np.max(np.abs(np.array(a.channels) - y) / scale)))
        sol = solve_ivp(lambda t, z: model.rhs(t, z, a.applied), (a.t_us * 1e-6, b.t_us * 1e-6),
                        x, method="RK45", rtol=1e-10, atol=1e-12)
        x = sol.y[:, -1]
    # 5e-3: the device's RK4 sub-steps (half of L/R) leave ~7e-4 on the fast current state;
    # a hold shifted by one sample gives errors above 0.5 on every mechanical channel.
    assert worst < 5e-3, worst
    assert max(s.channels[0] for s in samples) > 1000.0       # the test did move the fan


def test_channel_selection_order_and_raw_scaling():
    plant = make_plant("fan")
    channels = [SentChannel("current_a", scale=0.001, offset=0.0),
                SentChannel("temp_c", scale=0.5, offset=20.0), "speed_rpm"]
    dev = SimDevice(plant, channels=channels, period_us=P)
    dev.start(0)
    dev.handle(Configure(P, WD, 0.0, 0.0, 100.0), 0)
    dev.handle(Arm(), 0)
    hold(dev, 70.0, 30)
    s = sample_of(dev.tick())
    assert s.applied == 70.0
    assert dev.hello().n_channels == 3
    true = dict(zip(plant.channel_names, plant.read()))
    engineering = [s.channels[0] * 0.001, s.channels[1] * 0.5 + 20.0, s.channels[2]]
    np.testing.assert_allclose(engineering, [true["current_a"], true["temp_c"], true["speed_rpm"]],
                               rtol=1e-12)


@pytest.mark.parametrize("channels, message", [
    (["speed_rpm", "speed"], "not a channel of the fan plant"),
    (["speed_rpm", "speed_rpm"], "listed twice"),
    ([], "at least one channel"),
    ([SentChannel("speed_rpm", scale=0.0)], "scale"),
])
def test_bad_channel_lists_are_refused_with_the_allowed_names(channels, message):
    with pytest.raises(ValueError, match=message):
        SimDevice(make_plant("fan"), channels=channels)


def test_overrun_flag_appears_in_one_sample_only():
    dev = new_device()
    dev.tick()
    dev.note_overrun(2)
    assert sample_of(dev.tick()).status & Status.OVERRUN
    assert not sample_of(dev.tick()).status & Status.OVERRUN
    assert dev.overruns == 2


def test_sequence_of_samples_and_device_time():
    dev = new_device()
    got = [sample_of(dev.tick()) for _ in range(5)]
    assert [s.seq for s in got] == [0, 1, 2, 3, 4]
    assert [s.t_us for s in got] == [0, P, 2 * P, 3 * P, 4 * P]


def test_datagrams_and_streams_are_checked_and_counted():
    dev = configured()
    good = encode_frame(Command(1, 0, 10.0))
    bad_crc = good[:-1] + bytes([good[-1] ^ 0x55])
    assert dev.feed_datagram(bad_crc, 0) == []
    assert dev.feed_datagram(b"\x01", 0) == []
    dev.feed_datagram(good, 0)
    assert (dev.rejects.crc, dev.rejects.short, dev.rejects.accepted) == (1, 1, 1)
    s = sample_of(dev.tick())
    assert s.applied == 10.0 and s.status & Status.RX_ERROR
    # serial: garbage between frames is counted, the frames around it still work
    stream = (b"\x00" + encode_serial(Command(2, 0, 20.0)) + cobs_encode(b"\x01\x13junk") + b"\x00"
              + encode_serial(Query()))
    out = dev.feed_stream(stream[:7], 0) + dev.feed_stream(stream[7:], 0)
    assert [type(m) for m in out] == [Hello]
    assert dev.rejects.crc == 2
    assert sample_of(dev.tick()).applied == 20.0


def test_rx_observer_sees_every_frame_with_its_outcome():
    records = []
    dev = configured(rx_observer=records.append)
    dev.handle(Command(1, 0, 10.0), 5)
    dev.handle(Command(1, 0, 10.0), 6)
    dev.feed_datagram(b"\x01\x13\x00\x00", 7)
    assert [r["result"] for r in records[-3:]] == ["accepted", "rejected", "rejected"]
    assert records[-3]["type"] == "COMMAND" and records[-3]["value"] == 10.0
    assert records[-2]["reason"] == "sequence" and records[-1]["reason"] == "crc"
    assert records[-1]["t_us"] == 7


def test_truth_matches_the_plant_at_the_operating_point():
    dev = configured()
    hold(dev, 60.0, 10)
    truth = dev.truth("speed_rpm", 1)
    assert truth.u == 60.0
    assert truth.alpha == pytest.approx(dev.plant.true_alpha("speed_rpm", 1, 60.0))
    assert truth.static_gain == pytest.approx(dev.plant.static_gain("speed_rpm", 60.0))


def test_truth_static_gain_agrees_with_the_samples_at_steady_state():
    """dy_ss/du by a central difference of two long runs seen through the protocol."""
    def settle(u):
        dev = configured()
        hold(dev, u, 800)                           # 8 s: about 12 mechanical time constants
        return dev, sample_of(dev.tick()).channels[0]
    dev, y_mid = settle(60.0)
    _, y_hi = settle(61.0)
    _, y_lo = settle(59.0)
    assert (y_hi - y_lo) / 2.0 == pytest.approx(dev.truth("speed_rpm").static_gain, rel=2e-3)


def test_build_device_noise_is_seeded_and_scaled():
    def run(noise, seed):
        dev = build_device("fan", noise=noise, seed=seed, rate_hz=100)
        dev.start(0)
        return [dev.tick()[0].channels for _ in range(50)]
    assert run(1.0, 3) == run(1.0, 3)
    assert run(1.0, 3) != run(1.0, 4)
    quiet = np.array(run(0.0, 3))
    assert np.all(quiet[:, 0] == 0.0)                 # fan at rest, no noise: exact zeros
    noisy = np.array(run(1.0, 3))
    assert np.std(noisy[:, 0]) > 1.0                  # nominal speed noise is 8 rpm


def test_motor_device_uses_its_voltage_range():
    dev = configured("motor")
    dev.handle(Command(1, 0, -20.0), 0)
    s = sample_of(dev.tick())
    assert s.applied == -12.0 and s.status & Status.CLAMPED
    assert dev.hello().name == "sim-motor" and dev.hello().n_channels == 3


def test_configure_breaking_the_rules_on_the_wire_still_gets_fault_4():
    """The codec rejects such a frame for `value`; the device must still answer FAULT 4."""
    bad = Configure(P, P // 2, 0.0, 0.0, 100.0)            # watchdog shorter than a period
    for feed, data in (("feed_datagram", encode_frame(bad, validate=False)),
                       ("feed_stream", b"\x00" + encode_serial(bad, validate=False))):
        dev = new_device()
        (fault,) = getattr(dev, feed)(data, 250)
        assert isinstance(fault, Fault) and fault.code == FaultCode.CONFIG_REJECTED
        assert fault.value == P // 2 and fault.t_us == 250
        assert dev.rejects.value == 1 and not dev.configured


def test_stream_resynchronises_like_the_protocol_says():
    dev = configured()
    frame = encode_serial(Command(1, 0, 10.0))
    # bytes before the first delimiter (a frame cut in half) are dropped without counting
    dev.feed_stream(frame[3:], 0)
    assert dev.rejects.total_rejected == 0 and dev.rejects.accepted == 0
    dev.feed_stream(b"\x07" * 300 + b"\x00", 0)            # over-long run: one `length`
    assert dev.rejects.length == 1
    dev.feed_stream(b"\x05\x01\x00", 0)                    # code byte points past the run
    assert dev.rejects.cobs == 1
    dev.feed_stream(frame, 0)
    assert dev.rejects.accepted == 1
    assert sample_of(dev.tick()).applied == 10.0
