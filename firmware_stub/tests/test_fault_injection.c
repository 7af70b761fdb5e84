/*
 * test_fault_injection.c - a transport that drops, corrupts and inserts bytes. The stream
 * decoder must lose only the frames that were damaged (and at most the one after a damaged
 * delimiter), never deliver a damaged frame, and the device must never apply a value nobody sent.
 */
#include <string.h>

#include "fake_board.h"
#include "rl_crc.h"
#include "rl_test.h"

/* Encode m, seal it when the host end has a session, deliver it as a COBS frame. */
static void send_sealed(rl_device *d, rl_auth *host, const rl_msg *m)
{
    uint8_t frame[RL_MAX_FRAME], wire[RL_COBS_MAX_ENCODED(RL_MAX_FRAME) + 1u];
    size_t n = rl_proto_encode(m, frame, sizeof frame), wn = 0;
    if (host->have_session) {
        n = rl_auth_seal(host, frame, n, sizeof frame);
    }
    CHECK(rl_cobs_encode(frame, n, wire, sizeof wire - 1u, &wn) == RL_COBS_OK);
    wire[wn++] = 0;
    rl_device_rx_bytes(d, wire, wn);
}

enum { DAMAGE_NONE = 0, DAMAGE_DROP, DAMAGE_FLIP, DAMAGE_INSERT_ZERO, DAMAGE_INSERT_BYTE };

/* Copy src to dst with one random fault in it; returns the new length. */
static size_t damage(const uint8_t *src, size_t len, uint8_t *dst, uint32_t *rng, int kind)
{
    const size_t at = rlt_rand(rng) % len;
    size_t i, o = 0;
    for (i = 0; i < len; ++i) {
        if (i == at) {
            if (kind == DAMAGE_DROP) {
                continue;
            }
            if (kind == DAMAGE_INSERT_ZERO) {
                dst[o++] = 0x00;
            } else if (kind == DAMAGE_INSERT_BYTE) {
                dst[o++] = (uint8_t)(rlt_rand(rng) | 1u);
            } else if (kind == DAMAGE_FLIP) {
                dst[o++] = (uint8_t)(src[i] ^ (uint8_t)(1u << (rlt_rand(rng) % 8u)));
                continue;
            }
        }
        dst[o++] = src[i];
    }
    return o;
}

#define N_FRAMES 600

static void stream_decoder_recovers_from_damage(void)
{
    static uint8_t frames[N_FRAMES][64];
    static size_t frame_len[N_FRAMES];
    static int damaged[N_FRAMES];
    static int received[N_FRAMES];
    uint32_t rng = 0xBADC0DEu;
    rl_cobs_stream s;
    size_t i, clean = 0, got_clean = 0, bogus = 0, next_expected = 0;
    int out_of_order = 0;

    rl_cobs_stream_init(&s);
    (void)rl_cobs_stream_push(&s, 0x00, 0, 0);
    for (i = 0; i < N_FRAMES; ++i) {
        rl_msg m;
        uint8_t wire[128], bad[160];
        size_t wn = 0, k, n;
        memset(&m, 0, sizeof m);
        m.type = RL_MSG_SAMPLE;
        m.body.sample.seq = (uint32_t)i;
        m.body.sample.t_us = (uint64_t)i * 1000u;
        m.body.sample.n = (uint8_t)(i % 5u);
        for (k = 0; k < m.body.sample.n; ++k) {
            m.body.sample.channels[k] = (float)(i * k);
        }
        frame_len[i] = rl_proto_encode(&m, frames[i], sizeof frames[i]);
        CHECK(rl_cobs_encode(frames[i], frame_len[i], wire, sizeof wire - 1u, &wn) == RL_COBS_OK);
        wire[wn++] = 0;
        damaged[i] = (rlt_rand(&rng) % 6u == 0u) ? (int)(1u + rlt_rand(&rng) % 4u) : DAMAGE_NONE;
        n = damaged[i] != DAMAGE_NONE ? damage(wire, wn, bad, &rng, damaged[i]) : wn;
        if (damaged[i] == DAMAGE_NONE) {
            memcpy(bad, wire, wn);
        }
        for (k = 0; k < n; ++k) {
            const uint8_t *f = 0;
            size_t fl = 0;
            if (rl_cobs_stream_push(&s, bad[k], &f, &fl) == RL_COBS_EVENT_FRAME) {
                rl_msg back;
                size_t j;
                int matched = 0;
                if (rl_proto_decode(f, fl, &back) != RL_REJECT_NONE) {
                    continue; /* rejected: fine */
                }
                /* An accepted frame must be an exact copy of a frame that was sent. */
                for (j = 0; j <= i; ++j) {
                    if (frame_len[j] == fl && memcmp(frames[j], f, fl) == 0) {
                        matched = 1;
                        received[j] = 1;
                        if (j < next_expected) {
                            out_of_order = 1;
                        }
                        next_expected = j + 1u;
                        break;
                    }
                }
                if (!matched) {
                    ++bogus;
                }
            }
        }
    }
    for (i = 0; i < N_FRAMES; ++i) {
        /* A frame is "clean" when neither it nor its predecessor (whose delimiter it needs)
         * was damaged. */
        if (damaged[i] == DAMAGE_NONE && (i == 0 || damaged[i - 1] == DAMAGE_NONE)) {
            ++clean;
            got_clean += (size_t)received[i];
            CHECK_MSG(received[i], "an undamaged frame was lost");
        }
    }
    CHECK(clean > N_FRAMES / 2);
    CHECK_EQ_U(got_clean, clean);
    CHECK_EQ_U(bogus, 0u);
    CHECK(!out_of_order);
}

static void fixed_nonce(void *ctx, uint8_t out[RL_NONCE_LEN])
{
    size_t i;
    (void)ctx;
    for (i = 0; i < RL_NONCE_LEN; ++i) {
        out[i] = (uint8_t)(0xA0u + i);
    }
}

/* keyed: the same damaged stream on an authenticated link (docs/protocol.md section 14). */
static void damaged_command_stream(int keyed)
{
    static fake_board board;
    static rl_device dev;
    static rl_auth host;
    static const uint8_t key[32] = {0x42, 0x17, 0x99};
    rl_device_config cfg = fake_device_config();
    rl_hal hal;
    rl_msg m;
    uint32_t rng = 0x5EED5u;
    uint32_t seq;
    unsigned damaged_count = 0, clean_applied = 0, clean_expected = 0;
    uint32_t rejected_total = 0;
    int r;
    int prev_damaged = 0;

    cfg.defaults.watchdog_us = 1000000u; /* keep the watchdog out of this test */
    fake_board_init(&board, RL_TRANSPORT_STREAM, 1000000u);
    hal = fake_board_hal(&board);
    CHECK(rl_device_init(&dev, &hal, &cfg) == RL_DEVICE_OK);
    rl_device_rx_byte(&dev, 0x00);
    memset(&host, 0, sizeof host);
    if (keyed) {
        uint8_t nonce[RL_NONCE_LEN] = {1, 2, 3, 4, 5, 6, 7, 8};
        CHECK(rl_device_set_key(&dev, key, sizeof key, fixed_nonce, 0) == 0);
        memset(&m, 0, sizeof m);
        m.type = RL_MSG_QUERY;
        m.body.query.has_nonce = 1;
        memcpy(m.body.query.nonce, nonce, sizeof nonce);
        (void)fake_send(&dev, &board, &m);
        CHECK(rl_auth_set_key(&host, key, sizeof key) == 0);
        rl_auth_start(&host, nonce, dev.auth.device_nonce);
        host.rx_counter = 1u;       /* the HELLO answering the QUERY carried counter 1 */
        board.opener = &host;
    }
    m = msg_configure(1000, 1000000, 0.0f, 0.0f, 100.0f);
    send_sealed(&dev, &host, &m);
    m = msg_simple(RL_MSG_ARM);
    send_sealed(&dev, &host, &m);
    CHECK_EQ_U(rl_device_status(&dev) & RL_STATUS_ARMED, RL_STATUS_ARMED);

    for (seq = 1; seq <= 800; ++seq) {
        uint8_t frame[RL_MAX_FRAME], wire[96], bad[112];
        size_t n, wn = 0, bn;
        const float value = (float)(seq % 100u); /* the value encodes the sequence number */
        rl_sample s;
        const int kind = (rlt_rand(&rng) % 5u == 0u) ? (int)(1u + rlt_rand(&rng) % 4u) : 0;
        m = msg_command(seq, seq, value);
        n = rl_proto_encode(&m, frame, sizeof frame);
        if (keyed) {
            n = rl_auth_seal(&host, frame, n, sizeof frame);
        }
        CHECK(rl_cobs_encode(frame, n, wire, sizeof wire - 1u, &wn) == RL_COBS_OK);
        wire[wn++] = 0;
        if (kind != 0) {
            bn = damage(wire, wn, bad, &rng, kind);
            ++damaged_count;
        } else {
            memcpy(bad, wire, wn);
            bn = wn;
        }
        rl_device_rx_bytes(&dev, bad, bn);
        s = fake_tick(&dev, &board);
        /* Never a value nobody sent: the applied value always matches the command it names. */
        CHECK(s.applied >= 0.0f && s.applied <= 100.0f);
        if (s.last_cmd_seq != 0u) {
            CHECK_EQ_F(s.applied, (float)(s.last_cmd_seq % 100u));
        }
        if (kind == 0 && !prev_damaged) {
            ++clean_expected;
            if (s.last_cmd_seq == seq) {
                ++clean_applied;
            }
        }
        prev_damaged = kind != 0;
    }
    for (r = 1; r < (int)RL_REJECT_COUNT; ++r) {
        rejected_total += rl_device_get_counters(&dev)->rejected[r];
    }
    CHECK(damaged_count > 50u);
    CHECK(rejected_total > 0u);
    CHECK_EQ_U(clean_applied, clean_expected);
    CHECK_EQ_U(rl_device_status(&dev) & RL_STATUS_ARMED, RL_STATUS_ARMED);
}

static void device_survives_damaged_command_stream(void)
{
    damaged_command_stream(0);
}

static void keyed_device_survives_damaged_command_stream(void)
{
    damaged_command_stream(1);
}

void run_fault_injection_tests(void)
{
    RUN(stream_decoder_recovers_from_damage);
    RUN(device_survives_damaged_command_stream);
    RUN(keyed_device_survives_damaged_command_stream);
}
