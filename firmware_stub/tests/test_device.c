/*
 * test_device.c - the device state machine against docs/protocol.md section 6, driven by a fake
 * clock: start-up, CONFIGURE, ARM, COMMAND sequence rules, clamping, STOP latch, command
 * watchdog, overrun, faults and the per-reason reject counters.
 */
#include <string.h>

#include "fake_board.h"
#include "rl_crc.h"
#include "rl_test.h"

static fake_board board;
static rl_device dev;

#define T0 1000000u /* the fake clock starts at 1 s */

static void start(rl_transport transport)
{
    const rl_device_config cfg = fake_device_config();
    rl_hal hal;
    fake_board_init(&board, transport, T0);
    hal = fake_board_hal(&board);
    CHECK(rl_device_init(&dev, &hal, &cfg) == RL_DEVICE_OK);
    if (transport == RL_TRANSPORT_STREAM) {
        rl_device_rx_byte(&dev, 0x00); /* the host link opens with a delimiter */
    }
}

static const rl_device_counters *counters(void)
{
    return rl_device_get_counters(&dev);
}

/* CONFIGURE period 1 ms, watchdog 3 ms, safe 5, range [0, 80]; consumes the HELLO answer. */
static void configure_default(void)
{
    rl_msg m = msg_configure(1000, 3000, 5.0f, 0.0f, 80.0f);
    rl_msg hello;
    fake_drain(&board);
    (void)fake_send(&dev, &board, &m);
    CHECK(fake_pop_type(&board, RL_MSG_HELLO, &hello));
    CHECK_EQ_U(hello.body.hello.status & RL_STATUS_CONFIGURED, RL_STATUS_CONFIGURED);
}

static void arm(void)
{
    const rl_msg m = msg_simple(RL_MSG_ARM);
    (void)fake_send(&dev, &board, &m);
}

static void command(uint32_t seq, float value)
{
    const rl_msg m = msg_command(seq, seq, value);
    (void)fake_send(&dev, &board, &m);
}

static void start_armed(rl_transport transport)
{
    start(transport);
    configure_default();
    arm();
    fake_drain(&board);
}

static void device_startup_hello_and_safe_output(void)
{
    rl_msg m;
    char want_name[RL_NAME_LEN];
    start(RL_TRANSPORT_STREAM);
    CHECK_EQ_F(board.actuator, 0.0f);
    CHECK(board.actuator_writes >= 1u);
    CHECK(fake_pop(&board, &m));
    CHECK_EQ_U(m.type, RL_MSG_HELLO);
    CHECK_EQ_U(m.body.hello.proto_min, 1u);
    CHECK_EQ_U(m.body.hello.proto_max, 1u);
    CHECK_EQ_U(m.body.hello.fw_version, 0x0102u);
    CHECK_EQ_U(m.body.hello.n_channels, 3u);
    CHECK_EQ_U(m.body.hello.status, 0u);
    CHECK_EQ_U(m.body.hello.period_us, 1000u);
    CHECK_EQ_U(m.body.hello.watchdog_us, 5000u);
    CHECK_EQ_F(m.body.hello.safe, 0.0f);
    CHECK_EQ_F(m.body.hello.u_min, 0.0f);
    CHECK_EQ_F(m.body.hello.u_max, 100.0f);
    memset(want_name, 0, sizeof want_name);
    memcpy(want_name, "test-fan-rig", 12);
    CHECK(memcmp(m.body.hello.name, want_name, RL_NAME_LEN) == 0);
    CHECK_EQ_U(fake_pending(&board), 0u);
    /* nothing more until the first tick, one default period after start-up */
    board.now = T0 + 999u;
    rl_device_poll(&dev);
    CHECK_EQ_U(fake_pending(&board), 0u);
}

static void device_init_rejects_bad_setup(void)
{
    rl_device_config cfg = fake_device_config();
    rl_hal hal;
    static rl_device d2;
    fake_board_init(&board, RL_TRANSPORT_STREAM, T0);
    hal = fake_board_hal(&board);

    hal.micros = 0;
    CHECK(rl_device_init(&d2, &hal, &cfg) == RL_DEVICE_BAD_HAL);
    hal = fake_board_hal(&board);
    hal.transport = (rl_transport)7;
    CHECK(rl_device_init(&d2, &hal, &cfg) == RL_DEVICE_BAD_HAL);
    hal = fake_board_hal(&board);
    CHECK(rl_device_init(&d2, 0, &cfg) == RL_DEVICE_BAD_HAL);
    CHECK(rl_device_init(&d2, &hal, 0) == RL_DEVICE_BAD_CONFIG);

    cfg.n_channels = RL_MAX_CHANNELS + 1u;
    CHECK(rl_device_init(&d2, &hal, &cfg) == RL_DEVICE_BAD_CONFIG);
    cfg = fake_device_config();
    cfg.defaults.safe = 101.0f;
    CHECK(rl_device_init(&d2, &hal, &cfg) == RL_DEVICE_BAD_CONFIG);
    cfg = fake_device_config();
    cfg.defaults.period_us = 50u; /* below the board's fastest */
    CHECK(rl_device_init(&d2, &hal, &cfg) == RL_DEVICE_BAD_CONFIG);
    cfg = fake_device_config();
    cfg.defaults.watchdog_us = 999u;
    CHECK(rl_device_init(&d2, &hal, &cfg) == RL_DEVICE_BAD_CONFIG);
    cfg = fake_device_config();
    cfg.min_period_us = 0u;
    CHECK(rl_device_init(&d2, &hal, &cfg) == RL_DEVICE_BAD_CONFIG);
    cfg = fake_device_config();
    cfg.actuator_max = 50.0f; /* defaults reach 100 */
    CHECK(rl_device_init(&d2, &hal, &cfg) == RL_DEVICE_BAD_CONFIG);
    CHECK_EQ_U(fake_pending(&board), 0u); /* a refused init sends nothing */
    CHECK_EQ_U(board.actuator_writes, 0u);
}

static void device_samples_flow_while_idle(void)
{
    rl_sample s;
    start(RL_TRANSPORT_STREAM);
    fake_drain(&board);
    s = fake_tick(&dev, &board);
    CHECK_EQ_U(s.seq, 0u);
    CHECK_EQ_U(s.t_us, T0 + 1000u);
    CHECK_EQ_U(s.status, 0u);
    CHECK_EQ_F(s.applied, 0.0f);
    CHECK_EQ_U(s.last_cmd_seq, 0u);
    CHECK_EQ_U(s.n, 3u);
    CHECK_EQ_F(s.channels[0], 0.5f);
    CHECK_EQ_F(s.channels[2], 2.5f);
    board.channels[0] = 1234.5f;
    s = fake_tick(&dev, &board);
    CHECK_EQ_U(s.seq, 1u);
    CHECK_EQ_U(s.t_us, T0 + 2000u);
    CHECK_EQ_F(s.channels[0], 1234.5f);
    CHECK_EQ_U(counters()->samples_sent, 2u);
}

static void device_arm_ignored_until_configured(void)
{
    rl_sample s;
    start(RL_TRANSPORT_STREAM);
    arm();
    command(1, 50.0f);
    s = fake_tick(&dev, &board);
    CHECK_EQ_U(s.status & RL_STATUS_ARMED, 0u);
    CHECK_EQ_F(s.applied, 0.0f);
    CHECK_EQ_U(counters()->arms_ignored, 1u);
    CHECK_EQ_U(counters()->commands_ignored, 1u);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_TYPE], 0u);
}

static void device_configure_answers_hello_and_restarts_clock(void)
{
    rl_msg m = msg_configure(2000, 10000, 5.0f, 0.0f, 80.0f);
    rl_msg hello;
    rl_sample s;
    start(RL_TRANSPORT_STREAM);
    fake_drain(&board);
    board.now = T0 + 700u; /* mid-period */
    (void)fake_send(&dev, &board, &m);
    CHECK_EQ_F(board.actuator, 5.0f); /* the new safe value at once */
    CHECK(fake_pop(&board, &hello));
    CHECK_EQ_U(hello.type, RL_MSG_HELLO);
    CHECK_EQ_U(hello.body.hello.status, RL_STATUS_CONFIGURED);
    CHECK_EQ_U(hello.body.hello.period_us, 2000u);
    CHECK_EQ_U(hello.body.hello.watchdog_us, 10000u);
    CHECK_EQ_F(hello.body.hello.safe, 5.0f);
    CHECK_EQ_F(hello.body.hello.u_max, 80.0f);
    board.now = T0 + 700u + 1999u;
    rl_device_poll(&dev);
    CHECK_EQ_U(fake_pending(&board), 0u);
    s = fake_tick(&dev, &board);
    CHECK_EQ_U(s.t_us, T0 + 700u + 2000u);
    CHECK_EQ_U(s.status, RL_STATUS_CONFIGURED);
    CHECK_EQ_F(s.applied, 5.0f);
    s = fake_tick(&dev, &board);
    CHECK_EQ_U(s.t_us, T0 + 700u + 4000u);
}

static void expect_configure_refused(rl_msg m, float want_value, int value_is_nan)
{
    rl_msg fault;
    const uint32_t before = counters()->rejected[RL_REJECT_VALUE];
    const rl_settings old = *rl_device_settings(&dev);
    const uint16_t old_status = rl_device_status(&dev);
    (void)fake_send(&dev, &board, &m);
    CHECK(fake_pop(&board, &fault));
    CHECK_EQ_U(fault.type, RL_MSG_FAULT);
    CHECK_EQ_U(fault.body.fault.code, RL_FAULT_CONFIGURE_REJECTED);
    if (value_is_nan) {
        CHECK(!rl_isfinite(fault.body.fault.value));
    } else {
        CHECK_EQ_F(fault.body.fault.value, want_value);
    }
    CHECK_EQ_U(fake_pending(&board), 0u); /* no HELLO */
    CHECK_EQ_U(counters()->rejected[RL_REJECT_VALUE], before + 1u);
    CHECK(memcmp(&old, rl_device_settings(&dev), sizeof old) == 0);
    CHECK_EQ_U(rl_device_status(&dev) & ~RL_STATUS_RX_ERROR, old_status & ~RL_STATUS_RX_ERROR);
}

static void device_configure_rejections_send_fault_4(void)
{
    start(RL_TRANSPORT_STREAM);
    fake_drain(&board);
    expect_configure_refused(msg_configure(0, 1000, 0.0f, 0.0f, 1.0f), 0.0f, 0);
    expect_configure_refused(msg_configure(1000, 999, 0.0f, 0.0f, 1.0f), 999.0f, 0);
    expect_configure_refused(msg_configure(1000, 5000, 2.0f, 0.0f, 1.0f), 2.0f, 0);
    expect_configure_refused(msg_configure(1000, 5000, 0.5f, 1.0f, 0.0f), 0.5f, 0);
    expect_configure_refused(msg_configure(1000, 5000, rl_nan(), 0.0f, 1.0f), 0.0f, 1);
    expect_configure_refused(msg_configure(50, 5000, 0.0f, 0.0f, 1.0f), 50.0f, 0);       /* too fast */
    expect_configure_refused(msg_configure(2000000, 5000000, 0.0f, 0.0f, 1.0f), 2000000.0f, 0);
    /* a clamp range the hardware cannot give */
    expect_configure_refused(msg_configure(1000, 5000, 0.0f, 0.0f, 2000.0f), 2000.0f, 0);
    expect_configure_refused(msg_configure(1000, 5000, 0.0f, -1500.0f, 1.0f), -1500.0f, 0);
    CHECK_EQ_U(rl_device_status(&dev) & RL_STATUS_CONFIGURED, 0u);

    /* A refused CONFIGURE changes nothing, not even an armed, running output. */
    start_armed(RL_TRANSPORT_STREAM);
    command(1, 40.0f);
    (void)fake_tick(&dev, &board);
    expect_configure_refused(msg_configure(1000, 5000, 9.0f, 0.0f, 1.0f), 9.0f, 0);
    CHECK_EQ_U(rl_device_status(&dev) & RL_STATUS_ARMED, RL_STATUS_ARMED);
    CHECK_EQ_F(fake_tick(&dev, &board).applied, 40.0f);
}

static void device_configure_wrong_length_sends_fault_4(void)
{
    uint8_t frame[64];
    rl_msg fault;
    uint16_t crc;
    start(RL_TRANSPORT_DATAGRAM);
    fake_drain(&board);
    memset(frame, 0, sizeof frame);
    frame[0] = 1;
    frame[1] = RL_MSG_CONFIGURE;
    crc = rl_crc16(frame, 2u + 19u);
    frame[21] = (uint8_t)(crc & 0xFFu);
    frame[22] = (uint8_t)(crc >> 8);
    CHECK(rl_device_rx_frame(&dev, frame, 23u) == RL_REJECT_LENGTH);
    CHECK(fake_pop(&board, &fault));
    CHECK_EQ_U(fault.type, RL_MSG_FAULT);
    CHECK_EQ_U(fault.body.fault.code, RL_FAULT_CONFIGURE_REJECTED);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_LENGTH], 1u);
}

static void device_arm_then_command_applies_at_next_tick(void)
{
    rl_sample s;
    start(RL_TRANSPORT_STREAM);
    configure_default();
    arm();
    s = fake_tick(&dev, &board);
    CHECK_EQ_U(s.status, RL_STATUS_ARMED | RL_STATUS_CONFIGURED);
    CHECK_EQ_F(s.applied, 5.0f); /* safe until the first COMMAND after ARM */
    CHECK_EQ_U(s.last_cmd_seq, 0u);
    command(1, 42.0f);
    CHECK_EQ_F(board.actuator, 5.0f); /* zero-order hold: not before the next tick */
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 42.0f);
    CHECK_EQ_F(board.actuator, 42.0f);
    CHECK_EQ_U(s.last_cmd_seq, 1u);
    CHECK_EQ_U(s.status & RL_STATUS_CLAMPED, 0u);
    /* newest command wins when two arrive within one period */
    command(2, 10.0f);
    command(3, 20.0f);
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 20.0f);
    CHECK_EQ_U(s.last_cmd_seq, 3u);
    /* held while no new command arrives (within the watchdog) */
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 20.0f);
    /* an ARM while armed starts over: safe until the next COMMAND */
    arm();
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 5.0f);
    CHECK_EQ_U(s.status & RL_STATUS_ARMED, RL_STATUS_ARMED);
    command(4, 25.0f);
    CHECK_EQ_F(fake_tick(&dev, &board).applied, 25.0f);
}

static void device_clamps_and_reports_clamped(void)
{
    rl_sample s;
    start_armed(RL_TRANSPORT_STREAM);
    command(1, 120.0f);
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 80.0f);
    CHECK_EQ_F(board.actuator, 80.0f);
    CHECK_EQ_U(s.status & RL_STATUS_CLAMPED, RL_STATUS_CLAMPED);
    command(2, -5.0f);
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 0.0f);
    CHECK_EQ_U(s.status & RL_STATUS_CLAMPED, RL_STATUS_CLAMPED);
    command(3, 80.0f);
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 80.0f);
    CHECK_EQ_U(s.status & RL_STATUS_CLAMPED, 0u);
    command(4, 3.0e38f);
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 80.0f);
    CHECK_EQ_U(s.status & RL_STATUS_CLAMPED, RL_STATUS_CLAMPED);
}

static void device_sequence_rules(void)
{
    rl_sample s;
    rl_msg m;
    start_armed(RL_TRANSPORT_STREAM);
    command(10, 10.0f);
    command(10, 11.0f); /* same */
    command(9, 12.0f);  /* older */
    CHECK_EQ_U(counters()->rejected[RL_REJECT_SEQUENCE], 2u);
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 10.0f);
    CHECK_EQ_U(s.last_cmd_seq, 10u);
    CHECK_EQ_U(s.status & RL_STATUS_RX_ERROR, RL_STATUS_RX_ERROR);
    s = fake_tick(&dev, &board);
    CHECK_EQ_U(s.status & RL_STATUS_RX_ERROR, 0u); /* only "since the previous SAMPLE" */
    /* a bad value is reported before a stale sequence (docs/protocol.md section 3 order) */
    command(8, rl_nan());
    CHECK_EQ_U(counters()->rejected[RL_REJECT_SEQUENCE], 2u);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_VALUE], 1u);
    /* protocol 1.1 section 5: a jump forward by up to 0x10000 is fine, one more is implausible
     * (rejected, not taken); the wrap from 0xFFFFFFFF to 0 is fine */
    command(10u + 0x10001u, 18.0f);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_SEQUENCE], 3u);
    command(10u + 0x10000u, 19.0f);
    CHECK_EQ_F(fake_tick(&dev, &board).applied, 19.0f);
    configure_default(); /* the first COMMAND after it may carry any number */
    arm();
    command(0xFFFFFFFFu, 20.0f);
    CHECK_EQ_F(fake_tick(&dev, &board).applied, 20.0f);
    command(0u, 21.0f);
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 21.0f);
    CHECK_EQ_U(s.last_cmd_seq, 0u);
    /* a jump of 2^31 or more counts as older */
    command(0x80000000u, 22.0f);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_SEQUENCE], 4u);
    /* the first COMMAND after a CONFIGURE is always accepted, even with an older number */
    configure_default();
    arm();
    command(5u, 30.0f);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_SEQUENCE], 4u);
    CHECK_EQ_F(fake_tick(&dev, &board).applied, 30.0f);
    m = msg_command(4u, 4u, 31.0f);
    (void)fake_send(&dev, &board, &m);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_SEQUENCE], 5u);
}

static void device_rejects_non_finite_command(void)
{
    rl_float_bits inf;
    rl_sample s;
    inf.u = 0x7F800000u;
    start_armed(RL_TRANSPORT_STREAM);
    command(1, 33.0f);
    (void)fake_tick(&dev, &board);
    command(2, rl_nan());
    command(3, inf.f);
    command(4, -inf.f);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_VALUE], 3u);
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 33.0f);
    CHECK_EQ_U(s.last_cmd_seq, 1u);
    /* rejected commands do not advance the sequence: seq 2 is still new */
    command(2, 34.0f);
    CHECK_EQ_F(fake_tick(&dev, &board).applied, 34.0f);
}

static void device_stop_latches_until_arm(void)
{
    rl_sample s;
    rl_msg m;
    uint32_t seq = 1;
    int i;
    start_armed(RL_TRANSPORT_STREAM);
    command(seq++, 50.0f);
    CHECK_EQ_F(fake_tick(&dev, &board).applied, 50.0f);
    board.now += 300u; /* mid-period */
    m = msg_stop(RL_STOP_EMERGENCY);
    (void)fake_send(&dev, &board, &m);
    /* safe at once, from the receive path: no poll has run since */
    CHECK_EQ_F(board.actuator, 5.0f);
    CHECK_EQ_U(rl_device_status(&dev) & (RL_STATUS_ARMED | RL_STATUS_STOP_LATCHED),
               RL_STATUS_STOP_LATCHED);
    CHECK_EQ_U(counters()->stops, 1u);
    for (i = 0; i < 5; ++i) {
        command(seq++, 60.0f);
        s = fake_tick(&dev, &board);
        CHECK_EQ_F(s.applied, 5.0f);
        CHECK_EQ_F(board.actuator, 5.0f);
        CHECK_EQ_U(s.status & RL_STATUS_STOP_LATCHED, RL_STATUS_STOP_LATCHED);
        CHECK_EQ_U(s.status & RL_STATUS_ARMED, 0u);
    }
    CHECK_EQ_U(counters()->commands_ignored, 5u);
    CHECK_EQ_U(counters()->watchdog_trips, 0u); /* the watchdog does not run while stopped */
    arm();
    s = fake_tick(&dev, &board);
    CHECK_EQ_U(s.status & RL_STATUS_STOP_LATCHED, 0u);
    CHECK_EQ_U(s.status & RL_STATUS_ARMED, RL_STATUS_ARMED);
    CHECK_EQ_F(s.applied, 5.0f); /* still safe: no COMMAND since ARM */
    command(seq++, 61.0f);
    CHECK_EQ_F(fake_tick(&dev, &board).applied, 61.0f);
}

static void device_stop_accepted_in_every_state(void)
{
    rl_msg m = msg_stop(RL_STOP_OPERATOR);
    start(RL_TRANSPORT_STREAM); /* not configured */
    (void)fake_send(&dev, &board, &m);
    CHECK_EQ_U(rl_device_status(&dev) & RL_STATUS_STOP_LATCHED, RL_STATUS_STOP_LATCHED);
    CHECK_EQ_F(board.actuator, 0.0f);
    /* a STOP with a reason byte this firmware does not know still stops */
    start_armed(RL_TRANSPORT_DATAGRAM);
    m = msg_stop(254u);
    CHECK(fake_send(&dev, &board, &m) == RL_REJECT_NONE);
    CHECK_EQ_U(rl_device_status(&dev) & RL_STATUS_STOP_LATCHED, RL_STATUS_STOP_LATCHED);
}

static int find_fault(uint16_t code, rl_msg *out)
{
    rl_msg m;
    while (fake_pop(&board, &m)) {
        if (m.type == RL_MSG_FAULT && m.body.fault.code == code) {
            *out = m;
            return 1;
        }
    }
    return 0;
}

static void device_watchdog_trips_on_time_and_latches(void)
{
    /* Period 1 ms, watchdog 3 ms. Last command at T0 + 500: silence at the tick T0 + 3000 is
     * 2500 us, at T0 + 4000 it is 3500 us > 3000 -> trip at that tick. */
    rl_msg fault;
    rl_sample s;
    start_armed(RL_TRANSPORT_STREAM);
    board.now = T0 + 500u;
    command(1, 40.0f);
    fake_run_until(&dev, &board, T0 + 3999u);
    CHECK(!find_fault(RL_FAULT_WATCHDOG, &fault));
    CHECK_EQ_U(rl_device_status(&dev) & RL_STATUS_ARMED, RL_STATUS_ARMED);
    CHECK_EQ_F(board.actuator, 40.0f);
    fake_run_until(&dev, &board, T0 + 4000u);
    CHECK(find_fault(RL_FAULT_WATCHDOG, &fault));
    CHECK_EQ_U(fault.body.fault.t_us, T0 + 4000u);
    CHECK(!rl_isfinite(fault.body.fault.value)); /* no offending value */
    CHECK_EQ_U(fault.body.fault.status & (RL_STATUS_WATCHDOG | RL_STATUS_ARMED),
               RL_STATUS_WATCHDOG);
    CHECK_EQ_F(board.actuator, 5.0f);
    CHECK_EQ_U(counters()->watchdog_trips, 1u);
    /* latched: later commands are ignored, and the FAULT is not repeated */
    command(2, 41.0f);
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 5.0f);
    CHECK_EQ_U(s.status & RL_STATUS_WATCHDOG, RL_STATUS_WATCHDOG);
    fake_run_until(&dev, &board, board.now + 20000u);
    CHECK(!find_fault(RL_FAULT_WATCHDOG, &fault));
    /* only ARM clears it */
    arm();
    s = fake_tick(&dev, &board);
    CHECK_EQ_U(s.status & (RL_STATUS_WATCHDOG | RL_STATUS_ARMED), RL_STATUS_ARMED);
    CHECK_EQ_F(s.applied, 5.0f);
}

static void device_watchdog_boundary_is_strict(void)
{
    /* A silence of exactly watchdog_us does not trip; the next tick does. */
    rl_msg fault;
    start_armed(RL_TRANSPORT_STREAM);
    board.now = T0 + 1000u;
    rl_device_poll(&dev); /* the tick at T0 + 1000 */
    command(1, 40.0f);    /* accepted at T0 + 1000 */
    fake_run_until(&dev, &board, T0 + 4000u);
    CHECK(!find_fault(RL_FAULT_WATCHDOG, &fault));
    fake_run_until(&dev, &board, T0 + 5000u);
    CHECK(find_fault(RL_FAULT_WATCHDOG, &fault));
    CHECK_EQ_U(fault.body.fault.t_us, T0 + 5000u);
}

static void device_watchdog_counts_from_arm(void)
{
    rl_msg fault;
    start(RL_TRANSPORT_STREAM);
    configure_default();
    board.now = T0 + 250u;
    arm();
    fake_run_until(&dev, &board, T0 + 3999u);
    CHECK(!find_fault(RL_FAULT_WATCHDOG, &fault));
    fake_run_until(&dev, &board, T0 + 4000u);
    CHECK(find_fault(RL_FAULT_WATCHDOG, &fault));
    CHECK_EQ_U(fault.body.fault.t_us, T0 + 4000u);
}

static void device_watchdog_of_one_period_never_trips_an_answering_host(void)
{
    /* watchdog_us == period_us is allowed; a host that answers each SAMPLE within the period,
     * with any latency, must never trip it. */
    rl_msg m = msg_configure(1000, 1000, 5.0f, 0.0f, 80.0f);
    uint32_t rng = 0xFACEu;
    uint32_t seq = 1;
    int i;
    start(RL_TRANSPORT_STREAM);
    (void)fake_send(&dev, &board, &m);
    arm();
    for (i = 0; i < 300; ++i) {
        const rl_sample s = fake_tick(&dev, &board);
        CHECK_EQ_U(s.status & RL_STATUS_ARMED, RL_STATUS_ARMED);
        board.now += rlt_rand(&rng) % 1000u; /* answer latency 0 .. 999 us */
        command(seq++, (float)(i % 50));
    }
    CHECK_EQ_U(counters()->watchdog_trips, 0u);
    CHECK_EQ_U(counters()->commands_accepted, 300u);
    /* and one missing answer trips it at the next tick but one */
    (void)fake_tick(&dev, &board);
    CHECK_EQ_U(counters()->watchdog_trips, 0u);
    (void)fake_tick(&dev, &board);
    CHECK_EQ_U(counters()->watchdog_trips, 1u);
}

static void device_overrun_reported_in_late_sample(void)
{
    rl_msg m;
    start(RL_TRANSPORT_STREAM);
    fake_drain(&board);
    (void)fake_tick(&dev, &board);
    board.now = dev.next_tick_us + 3500u;
    rl_device_poll(&dev);
    CHECK(fake_pop_type(&board, RL_MSG_SAMPLE, &m));
    CHECK_EQ_U(m.body.sample.status & RL_STATUS_OVERRUN, RL_STATUS_OVERRUN);
    CHECK_EQ_U(m.body.sample.seq, 1u); /* one SAMPLE per tick actually run */
    CHECK_EQ_U(m.body.sample.t_us, board.now);
    CHECK_EQ_U(counters()->ticks_missed, 3u);
    /* the schedule keeps its phase */
    CHECK_EQ_U(dev.next_tick_us, T0 + 2000u + 4000u);
    CHECK_EQ_U(fake_tick(&dev, &board).status & RL_STATUS_OVERRUN, 0u);
}

static void device_query_answers_hello_with_current_state(void)
{
    rl_msg m = msg_simple(RL_MSG_QUERY);
    rl_msg hello;
    start_armed(RL_TRANSPORT_STREAM);
    (void)fake_send(&dev, &board, &m);
    CHECK(fake_pop(&board, &hello));
    CHECK_EQ_U(hello.type, RL_MSG_HELLO);
    CHECK_EQ_U(hello.body.hello.status, RL_STATUS_ARMED | RL_STATUS_CONFIGURED);
    CHECK_EQ_U(hello.body.hello.watchdog_us, 3000u);
    CHECK_EQ_F(hello.body.hello.safe, 5.0f);
}

static void device_rejects_device_to_host_types(void)
{
    rl_msg m = msg_simple(RL_MSG_SAMPLE);
    start(RL_TRANSPORT_DATAGRAM);
    m.body.sample.n = 1;
    CHECK(fake_send(&dev, &board, &m) == RL_REJECT_TYPE);
    m = msg_simple(RL_MSG_HELLO);
    CHECK(fake_send(&dev, &board, &m) == RL_REJECT_TYPE);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_TYPE], 2u);
}

static void device_datagram_transport(void)
{
    uint8_t frame[RL_MAX_FRAME];
    rl_msg m = msg_command(1, 0, 12.5f);
    size_t n;
    rl_sample s;
    start_armed(RL_TRANSPORT_DATAGRAM);
    n = rl_proto_encode(&m, frame, sizeof frame);
    CHECK(rl_device_rx_frame(&dev, frame, n) == RL_REJECT_NONE);
    frame[4] ^= 0x01;
    CHECK(rl_device_rx_frame(&dev, frame, n) == RL_REJECT_CRC);
    CHECK(rl_device_rx_frame(&dev, frame, 3) == RL_REJECT_SHORT);
    s = fake_tick(&dev, &board); /* fake_pop checks the packet is a bare frame */
    CHECK_EQ_F(s.applied, 12.5f);
    CHECK_EQ_U(s.status & RL_STATUS_RX_ERROR, RL_STATUS_RX_ERROR);
}

static void device_sensor_fault(void)
{
    rl_msg m;
    start_armed(RL_TRANSPORT_STREAM);
    command(1, 70.0f);
    (void)fake_tick(&dev, &board);
    board.sensor_rc = -1;
    board.now = dev.next_tick_us;
    rl_device_poll(&dev);
    CHECK(fake_pop(&board, &m));
    CHECK_EQ_U(m.type, RL_MSG_FAULT);
    CHECK_EQ_U(m.body.fault.code, RL_FAULT_SENSOR);
    CHECK(fake_pop(&board, &m));
    CHECK_EQ_U(m.type, RL_MSG_SAMPLE);
    CHECK_EQ_U(m.body.sample.status & (RL_STATUS_FAULT | RL_STATUS_ARMED), RL_STATUS_FAULT);
    CHECK_EQ_F(m.body.sample.applied, 5.0f);
    CHECK_EQ_F(board.actuator, 5.0f);
    /* latched: no second FAULT while the condition lasts */
    (void)fake_tick(&dev, &board);
    CHECK_EQ_U(counters()->faults_sent, 1u);
    /* ARM clears FAULT; a fault still present trips again at once */
    arm();
    CHECK_EQ_U(rl_device_status(&dev) & RL_STATUS_FAULT, 0u);
    board.now = dev.next_tick_us;
    rl_device_poll(&dev);
    CHECK_EQ_U(counters()->faults_sent, 2u);
    board.sensor_rc = 0;
    arm();
    command(2, 20.0f);
    CHECK_EQ_F(fake_tick(&dev, &board).applied, 20.0f);
}

static void device_rx_overflow_is_fault_5_and_resyncs(void)
{
    rl_msg m = msg_command(1, 0, 20.0f);
    rl_msg q = msg_simple(RL_MSG_QUERY);
    uint8_t frame[RL_MAX_FRAME], wire[300];
    size_t n, wn = 0;
    start_armed(RL_TRANSPORT_STREAM);
    rl_device_rx_overflow(&dev);
    CHECK(find_fault(RL_FAULT_RX_OVERFLOW, &m));
    CHECK_EQ_U(rl_device_status(&dev) & (RL_STATUS_FAULT | RL_STATUS_ARMED), RL_STATUS_FAULT);
    CHECK_EQ_F(board.actuator, 5.0f);
    /* the tail of a frame whose head was lost is skipped without being counted */
    m = msg_command(1, 0, 20.0f);
    n = rl_proto_encode(&m, frame, sizeof frame);
    CHECK(rl_cobs_encode(frame, n, wire, sizeof wire, &wn) == RL_COBS_OK);
    wire[wn++] = 0;
    rl_device_rx_bytes(&dev, wire + 3, wn - 3u);
    (void)fake_send(&dev, &board, &q);
    CHECK(fake_pop_type(&board, RL_MSG_HELLO, &m));
    CHECK_EQ_U(counters()->rejected[RL_REJECT_COBS] + counters()->rejected[RL_REJECT_CRC] +
                   counters()->rejected[RL_REJECT_SHORT] + counters()->rejected[RL_REJECT_LENGTH],
               0u);
}

static void device_counts_every_reject_reason(void)
{
    /* One bad frame of each kind over the byte stream. */
    uint8_t frame[RL_MAX_FRAME], wire[400];
    rl_msg m = msg_command(1, 0, 1.0f);
    size_t n, wn = 0, i;
    static const uint8_t bad_cobs[] = {0x05, 0x11, 0x22, 0x00};
    static const uint8_t short_frame[] = {0x03, 0x01, 0x10, 0x00};
    start(RL_TRANSPORT_STREAM);
    rl_device_rx_bytes(&dev, bad_cobs, sizeof bad_cobs);
    rl_device_rx_bytes(&dev, short_frame, sizeof short_frame);
    n = rl_proto_encode(&m, frame, sizeof frame);
    frame[3] ^= 0x40; /* crc */
    CHECK(rl_cobs_encode(frame, n, wire, sizeof wire, &wn) == RL_COBS_OK);
    wire[wn++] = 0;
    rl_device_rx_bytes(&dev, wire, wn);
    for (i = 0; i < 300; ++i) { /* overlong run */
        rl_device_rx_byte(&dev, 0x42);
    }
    rl_device_rx_byte(&dev, 0x00);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_COBS], 1u);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_SHORT], 1u);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_CRC], 1u);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_LENGTH], 1u);
    CHECK_EQ_U(counters()->frames_accepted, 0u);
    CHECK_EQ_U(rl_device_status(&dev) & RL_STATUS_RX_ERROR, RL_STATUS_RX_ERROR);
}

static void device_applied_always_within_limits(void)
{
    /* Property: whatever the host sends, every value at the actuator lies in [u_min, u_max]
     * or is the safe value, and CLAMPED is set exactly when the command was outside. */
    uint32_t rng = 0xC0FFEEu;
    uint32_t seq = 1;
    int i;
    start_armed(RL_TRANSPORT_STREAM);
    for (i = 0; i < 500; ++i) {
        const uint32_t r = rlt_rand(&rng);
        rl_float_bits v;
        rl_sample s;
        if (i % 50 == 49) {
            v.f = rl_nan();
        } else if (r % 7u == 0u) {
            v.u = rlt_rand(&rng); /* any bit pattern: NaN, inf, huge, tiny */
        } else {
            v.f = (float)((int)(r % 2000u) - 500) * 0.1f;
        }
        command(seq++, v.f);
        s = fake_tick(&dev, &board);
        CHECK(s.applied >= 0.0f && s.applied <= 80.0f);
        CHECK_EQ_F(board.actuator, s.applied);
        if (rl_isfinite(v.f) && s.last_cmd_seq == seq - 1u) {
            const int outside = v.f < 0.0f || v.f > 80.0f;
            CHECK_EQ_U((s.status & RL_STATUS_CLAMPED) != 0u, outside);
            if (!outside) {
                CHECK_EQ_F(s.applied, v.f);
            }
        }
    }
    CHECK(counters()->rejected[RL_REJECT_VALUE] > 0u);
}

static void device_reconfigure_while_armed_disarms(void)
{
    rl_msg m = msg_configure(1000, 4000, 2.0f, 0.0f, 50.0f);
    rl_msg hello;
    rl_sample s;
    start_armed(RL_TRANSPORT_STREAM);
    command(100, 45.0f);
    CHECK_EQ_F(fake_tick(&dev, &board).applied, 45.0f);
    (void)fake_send(&dev, &board, &m);
    CHECK_EQ_F(board.actuator, 2.0f);
    CHECK(fake_pop_type(&board, RL_MSG_HELLO, &hello));
    CHECK_EQ_U(hello.body.hello.status, RL_STATUS_CONFIGURED);
    command(7, 30.0f); /* older number, accepted as the first after CONFIGURE, but disarmed */
    s = fake_tick(&dev, &board);
    CHECK_EQ_F(s.applied, 2.0f);
    CHECK_EQ_U(counters()->rejected[RL_REJECT_SEQUENCE], 0u);
    CHECK_EQ_U(counters()->commands_ignored, 1u);
}

void run_device_tests(void)
{
    RUN(device_startup_hello_and_safe_output);
    RUN(device_init_rejects_bad_setup);
    RUN(device_samples_flow_while_idle);
    RUN(device_arm_ignored_until_configured);
    RUN(device_configure_answers_hello_and_restarts_clock);
    RUN(device_configure_rejections_send_fault_4);
    RUN(device_configure_wrong_length_sends_fault_4);
    RUN(device_arm_then_command_applies_at_next_tick);
    RUN(device_clamps_and_reports_clamped);
    RUN(device_sequence_rules);
    RUN(device_rejects_non_finite_command);
    RUN(device_stop_latches_until_arm);
    RUN(device_stop_accepted_in_every_state);
    RUN(device_watchdog_trips_on_time_and_latches);
    RUN(device_watchdog_boundary_is_strict);
    RUN(device_watchdog_counts_from_arm);
    RUN(device_watchdog_of_one_period_never_trips_an_answering_host);
    RUN(device_overrun_reported_in_late_sample);
    RUN(device_query_answers_hello_with_current_state);
    RUN(device_rejects_device_to_host_types);
    RUN(device_datagram_transport);
    RUN(device_sensor_fault);
    RUN(device_rx_overflow_is_fault_5_and_resyncs);
    RUN(device_counts_every_reject_reason);
    RUN(device_applied_always_within_limits);
    RUN(device_reconfigure_while_armed_disarms);
}
