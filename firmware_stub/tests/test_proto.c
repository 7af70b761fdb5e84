/*
 * test_proto.c - message encode/decode, the rejection order of docs/protocol.md section 3, the
 * CONFIGURE value rules and serial-number arithmetic.
 */
#include <string.h>

#include "rl_crc.h"
#include "rl_proto.h"
#include "rl_test.h"

static float f32_from_bits(uint32_t u)
{
    rl_float_bits b;
    b.u = u;
    return b.f;
}

/* Re-seal a hand-edited frame with a correct CRC. */
static void reseal(uint8_t *frame, size_t len)
{
    const uint16_t crc = rl_crc16(frame, len - 2u);
    frame[len - 2u] = (uint8_t)(crc & 0xFFu);
    frame[len - 1u] = (uint8_t)(crc >> 8);
}

static void round_trip(const rl_msg *m, size_t want_len)
{
    uint8_t frame[RL_MAX_FRAME], again[RL_MAX_FRAME];
    rl_msg back;
    size_t n = rl_proto_encode(m, frame, sizeof frame);
    size_t n2;
    CHECK_EQ_U(n, want_len);
    CHECK_EQ_U(frame[0], RL_PROTO_VERSION);
    CHECK_EQ_U(frame[1], m->type);
    memset(&back, 0xA5, sizeof back);
    CHECK(rl_proto_decode(frame, n, &back) == RL_REJECT_NONE);
    CHECK_EQ_U(back.type, m->type);
    n2 = rl_proto_encode(&back, again, sizeof again);
    CHECK_EQ_U(n2, n);
    CHECK(memcmp(frame, again, n) == 0);
}

static void proto_round_trip_every_type(void)
{
    rl_msg m;
    size_t i;
    memset(&m, 0, sizeof m);

    m.type = RL_MSG_HELLO;
    m.body.hello.proto_min = 1;
    m.body.hello.proto_max = 1;
    m.body.hello.fw_version = 0x0203;
    m.body.hello.n_channels = 3;
    m.body.hello.status = 0x21;
    m.body.hello.period_us = 2000;
    m.body.hello.watchdog_us = 50000;
    m.body.hello.safe = 0.0f;
    m.body.hello.u_min = -12.0f;
    m.body.hello.u_max = 12.0f;
    memcpy(m.body.hello.name, "motor-rig-A", 11);
    round_trip(&m, 2u + 42u + 2u);

    memset(&m, 0, sizeof m);
    m.type = RL_MSG_SAMPLE;
    m.body.sample.seq = 0xFFFFFFFFu;
    m.body.sample.t_us = 0x0123456789ABCDEFull;
    m.body.sample.status = 0x00FFu;
    m.body.sample.applied = 37.5f;
    m.body.sample.last_cmd_seq = 41;
    m.body.sample.n = RL_MAX_CHANNELS;
    for (i = 0; i < RL_MAX_CHANNELS; ++i) {
        m.body.sample.channels[i] = (float)i * 0.25f - 3.0f;
    }
    round_trip(&m, 2u + 23u + 4u * RL_MAX_CHANNELS + 2u);
    m.body.sample.n = 0;
    round_trip(&m, 2u + 23u + 2u);

    memset(&m, 0, sizeof m);
    m.type = RL_MSG_FAULT;
    m.body.fault.t_us = 1500000u;
    m.body.fault.code = RL_FAULT_WATCHDOG;
    m.body.fault.status = RL_STATUS_WATCHDOG | RL_STATUS_CONFIGURED;
    m.body.fault.value = rl_nan();
    round_trip(&m, 2u + 16u + 2u);

    memset(&m, 0, sizeof m);
    m.type = RL_MSG_QUERY;
    round_trip(&m, 4u);
    m.type = RL_MSG_ARM;
    round_trip(&m, 4u);

    m.type = RL_MSG_CONFIGURE;
    m.body.configure.period_us = 1000;
    m.body.configure.watchdog_us = 20000;
    m.body.configure.safe = 0.0f;
    m.body.configure.u_min = -12.0f;
    m.body.configure.u_max = 12.0f;
    round_trip(&m, 2u + 20u + 2u);

    m.type = RL_MSG_COMMAND;
    m.body.command.seq = 7;
    m.body.command.answers = 6;
    m.body.command.value = -3.5f;
    round_trip(&m, 2u + 12u + 2u);

    m.type = RL_MSG_STOP;
    m.body.stop.reason = RL_STOP_EMERGENCY;
    round_trip(&m, 2u + 1u + 2u);
}

static void proto_little_endian_layout(void)
{
    /* COMMAND seq=0x04030201, answers=0x08070605, value=1.0f (0x3F800000): docs/protocol.md 4.8. */
    rl_msg m;
    uint8_t frame[32];
    const uint8_t want[] = {0x01, 0x13, 0x01, 0x02, 0x03, 0x04, 0x05, 0x06,
                            0x07, 0x08, 0x00, 0x00, 0x80, 0x3F};
    memset(&m, 0, sizeof m);
    m.type = RL_MSG_COMMAND;
    m.body.command.seq = 0x04030201u;
    m.body.command.answers = 0x08070605u;
    m.body.command.value = 1.0f;
    CHECK_EQ_U(rl_proto_encode(&m, frame, sizeof frame), 16u);
    CHECK(memcmp(frame, want, sizeof want) == 0);
    /* CRC little-endian: low byte first. */
    CHECK_EQ_U(frame[14] | (frame[15] << 8), rl_crc16(frame, 14));
}

static void proto_encode_refuses(void)
{
    rl_msg m;
    uint8_t frame[RL_MAX_FRAME];
    memset(&m, 0, sizeof m);
    m.type = RL_MSG_SAMPLE;
    m.body.sample.n = RL_MAX_CHANNELS + 1u;
    CHECK_EQ_U(rl_proto_encode(&m, frame, sizeof frame), 0u);
    m.body.sample.n = 2;
    CHECK_EQ_U(rl_proto_encode(&m, frame, 2u + 23u + 8u + 1u), 0u); /* one byte short */
    CHECK_EQ_U(rl_proto_encode(&m, frame, 2u + 23u + 8u + 2u), 35u);
    m.type = 0x7F;
    CHECK_EQ_U(rl_proto_encode(&m, frame, sizeof frame), 0u);
}

static size_t make_command(uint8_t *frame, uint32_t seq, float value)
{
    rl_msg m;
    memset(&m, 0, sizeof m);
    m.type = RL_MSG_COMMAND;
    m.body.command.seq = seq;
    m.body.command.answers = seq;
    m.body.command.value = value;
    return rl_proto_encode(&m, frame, RL_MAX_FRAME);
}

static void proto_rejection_reasons_in_order(void)
{
    uint8_t frame[RL_MAX_FRAME];
    rl_msg m;
    size_t n = make_command(frame, 5, 1.0f);
    size_t len;

    for (len = 0; len < 4; ++len) {
        CHECK(rl_proto_decode(frame, len, &m) == RL_REJECT_SHORT);
    }
    /* crc */
    frame[5] ^= 0x10;
    CHECK(rl_proto_decode(frame, n, &m) == RL_REJECT_CRC);
    /* crc is checked before version */
    frame[0] = 2;
    CHECK(rl_proto_decode(frame, n, &m) == RL_REJECT_CRC);
    reseal(frame, n);
    CHECK(rl_proto_decode(frame, n, &m) == RL_REJECT_VERSION);
    /* version is checked before type */
    frame[1] = 0x7F;
    reseal(frame, n);
    CHECK(rl_proto_decode(frame, n, &m) == RL_REJECT_VERSION);
    frame[0] = 1;
    reseal(frame, n);
    CHECK(rl_proto_decode(frame, n, &m) == RL_REJECT_TYPE);
    /* type is checked before length */
    frame[1] = 0x00;
    reseal(frame, n - 1u);
    CHECK(rl_proto_decode(frame, n - 1u, &m) == RL_REJECT_TYPE);
    frame[1] = RL_MSG_COMMAND;
    reseal(frame, n - 1u);
    CHECK(rl_proto_decode(frame, n - 1u, &m) == RL_REJECT_LENGTH);
    /* a non-finite value passes decoding and fails the value rules */
    n = make_command(frame, 5, rl_nan());
    CHECK(rl_proto_decode(frame, n, &m) == RL_REJECT_NONE);
    CHECK(rl_proto_check_values(&m) == RL_REJECT_VALUE);
}

static void proto_length_of_every_type(void)
{
    static const uint8_t types[] = {RL_MSG_HELLO, RL_MSG_FAULT, RL_MSG_QUERY, RL_MSG_ARM,
                                    RL_MSG_CONFIGURE, RL_MSG_COMMAND, RL_MSG_STOP};
    size_t t;
    for (t = 0; t < sizeof types; ++t) {
        const long body = rl_proto_body_length(types[t], 0);
        long delta;
        for (delta = -1; delta <= 1; ++delta) {
            uint8_t frame[RL_MAX_FRAME];
            rl_msg m;
            size_t len;
            if (body + delta < 0) {
                continue;
            }
            len = (size_t)(body + delta) + RL_FRAME_OVERHEAD;
            memset(frame, 0, sizeof frame);
            frame[0] = 1;
            frame[1] = types[t];
            reseal(frame, len);
            CHECK(rl_proto_decode(frame, len, &m) ==
                  (delta == 0 ? RL_REJECT_NONE : RL_REJECT_LENGTH));
        }
    }
}

static void proto_sample_length_follows_n(void)
{
    uint8_t frame[RL_MAX_FRAME];
    rl_msg m;
    size_t len;
    memset(frame, 0, sizeof frame);
    frame[0] = 1;
    frame[1] = RL_MSG_SAMPLE;
    frame[2 + 22] = 2; /* n = 2 -> body 31 */
    len = 2u + 31u + 2u;
    reseal(frame, len);
    CHECK(rl_proto_decode(frame, len, &m) == RL_REJECT_NONE);
    CHECK_EQ_U(m.body.sample.n, 2u);
    reseal(frame, len - 4u);
    CHECK(rl_proto_decode(frame, len - 4u, &m) == RL_REJECT_LENGTH);
    frame[2 + 22] = 33; /* more than 32 channels, with a body long enough for them */
    len = 2u + 23u + 4u * 33u + 2u;
    reseal(frame, len);
    CHECK(rl_proto_decode(frame, len, &m) == RL_REJECT_LENGTH);
    len = 2u + 22u + 2u; /* body shorter than the fixed part */
    reseal(frame, len);
    CHECK(rl_proto_decode(frame, len, &m) == RL_REJECT_LENGTH);
}

static rl_msg configure_msg(uint32_t period, uint32_t watchdog, float safe, float lo, float hi)
{
    rl_msg m;
    memset(&m, 0, sizeof m);
    m.type = RL_MSG_CONFIGURE;
    m.body.configure.period_us = period;
    m.body.configure.watchdog_us = watchdog;
    m.body.configure.safe = safe;
    m.body.configure.u_min = lo;
    m.body.configure.u_max = hi;
    return m;
}

static void proto_configure_rules(void)
{
    const float inf = f32_from_bits(0x7F800000u);
    rl_msg m = configure_msg(1000, 1000, 2.5f, 2.5f, 2.5f); /* edges are allowed */
    CHECK(rl_proto_check_values(&m) == RL_REJECT_NONE);
    m = configure_msg(0, 1000, 0.0f, 0.0f, 1.0f);
    CHECK(rl_proto_check_values(&m) == RL_REJECT_VALUE);
    m = configure_msg(1000, 999, 0.0f, 0.0f, 1.0f);
    CHECK(rl_proto_check_values(&m) == RL_REJECT_VALUE);
    m = configure_msg(1000, 5000, -0.5f, 0.0f, 1.0f);
    CHECK(rl_proto_check_values(&m) == RL_REJECT_VALUE);
    m = configure_msg(1000, 5000, 1.5f, 0.0f, 1.0f);
    CHECK(rl_proto_check_values(&m) == RL_REJECT_VALUE);
    m = configure_msg(1000, 5000, 0.5f, 1.0f, 0.0f);
    CHECK(rl_proto_check_values(&m) == RL_REJECT_VALUE);
    m = configure_msg(1000, 5000, 0.0f, -inf, inf);
    CHECK(rl_proto_check_values(&m) == RL_REJECT_VALUE);
    m = configure_msg(1000, 5000, rl_nan(), 0.0f, 1.0f);
    CHECK(rl_proto_check_values(&m) == RL_REJECT_VALUE);
}

static void proto_sequence_arithmetic(void)
{
    /* Serial-number arithmetic, docs/protocol.md section 5. */
    CHECK(rl_seq_newer(1u, 0u));
    CHECK(!rl_seq_newer(0u, 0u));
    CHECK(!rl_seq_newer(0u, 1u));
    CHECK(rl_seq_newer(0u, 0xFFFFFFFFu));
    CHECK(rl_seq_newer(0x7FFFFFFFu, 0u));
    CHECK(!rl_seq_newer(0x80000000u, 0u));
    CHECK(!rl_seq_newer(0xFFFFFFFFu, 0u));
}

static void proto_reject_names_match_doc(void)
{
    static const char *const names[] = {"none",   "cobs",  "short", "crc",      "version",
                                        "type",   "length", "value", "sequence", "auth"};
    int r;
    for (r = 0; r < (int)RL_REJECT_COUNT; ++r) {
        CHECK(strcmp(rl_reject_name((rl_reject)r), names[r]) == 0);
    }
}

static void proto_finite_test(void)
{
    CHECK(rl_isfinite(0.0f));
    CHECK(rl_isfinite(-3.4e38f));
    CHECK(rl_isfinite(f32_from_bits(0x00000001u))); /* smallest subnormal */
    CHECK(!rl_isfinite(f32_from_bits(0x7F800000u)));
    CHECK(!rl_isfinite(f32_from_bits(0xFF800000u)));
    CHECK(!rl_isfinite(rl_nan()));
    CHECK(!rl_isfinite(f32_from_bits(0xFFC00001u)));
}

void run_proto_tests(void)
{
    RUN(proto_round_trip_every_type);
    RUN(proto_little_endian_layout);
    RUN(proto_encode_refuses);
    RUN(proto_rejection_reasons_in_order);
    RUN(proto_length_of_every_type);
    RUN(proto_sample_length_follows_n);
    RUN(proto_configure_rules);
    RUN(proto_sequence_arithmetic);
    RUN(proto_reject_names_match_doc);
    RUN(proto_finite_test);
}
