/*
 * test_crc_cobs.c - CRC-16/CCITT-FALSE and COBS against published values, plus round trips and
 * the streaming decoder's resynchronisation.
 */
#include <string.h>

#include "rl_cobs.h"
#include "rl_crc.h"
#include "rl_test.h"

static void crc_check_value(void)
{
    /* CRC-16/CCITT-FALSE check value 0x29B1 for ASCII "123456789": the published CRC
     * parameter catalogues list it (from memory); docs/protocol.md section 2 states it too. */
    const uint8_t text[] = {'1', '2', '3', '4', '5', '6', '7', '8', '9'};
    CHECK_EQ_U(rl_crc16(text, sizeof text), 0x29B1u);
}

static void crc_empty_is_init_and_pieces_compose(void)
{
    const uint8_t text[] = {'1', '2', '3', '4', '5', '6', '7', '8', '9'};
    uint16_t crc;
    CHECK_EQ_U(rl_crc16(text, 0), 0xFFFFu);
    crc = rl_crc16_update(RL_CRC16_INIT, text, 4);
    crc = rl_crc16_update(crc, text + 4, 5);
    CHECK_EQ_U(crc, 0x29B1u);
}

static void crc_detects_every_single_bit_flip(void)
{
    uint8_t buf[32];
    size_t i;
    int bit;
    uint16_t good;
    for (i = 0; i < sizeof buf; ++i) {
        buf[i] = (uint8_t)(i * 37u + 11u);
    }
    good = rl_crc16(buf, sizeof buf);
    for (i = 0; i < sizeof buf; ++i) {
        for (bit = 0; bit < 8; ++bit) {
            buf[i] = (uint8_t)(buf[i] ^ (1u << bit));
            CHECK(rl_crc16(buf, sizeof buf) != good);
            buf[i] = (uint8_t)(buf[i] ^ (1u << bit));
        }
    }
}

typedef struct cobs_example {
    const char *data_hex;
    const char *enc_hex;
} cobs_example;

static size_t from_hex(const char *hex, uint8_t *out)
{
    size_t n = 0;
    while (hex[0] != '\0' && hex[1] != '\0') {
        unsigned v = 0;
        int k;
        for (k = 0; k < 2; ++k) {
            const char c = hex[k];
            v = v * 16u + (unsigned)(c <= '9' ? c - '0' : (c | 0x20) - 'a' + 10);
        }
        out[n++] = (uint8_t)v;
        hex += 2;
    }
    return n;
}

static void cobs_small_examples(void)
{
    /* Worked examples of the method ('Consistent Overhead Byte Stuffing', IEEE/ACM Transactions
     * on Networking, 1999) as commonly tabulated (from memory); delimiters not included. */
    static const cobs_example examples[] = {
        {"00", "0101"},
        {"0000", "010101"},
        {"001100", "01021101"},
        {"11220033", "0311220233"},
        {"11223344", "0511223344"},
        {"11000000", "0211010101"},
        {"", "01"},
    };
    size_t i;
    for (i = 0; i < sizeof examples / sizeof examples[0]; ++i) {
        uint8_t data[16], want[16], got[16], back[16];
        size_t dn = from_hex(examples[i].data_hex, data);
        size_t wn = from_hex(examples[i].enc_hex, want);
        size_t gn = 0, bn = 0;
        CHECK(rl_cobs_encode(data, dn, got, sizeof got, &gn) == RL_COBS_OK);
        CHECK_EQ_U(gn, wn);
        CHECK(memcmp(got, want, wn) == 0);
        CHECK(rl_cobs_decode(want, wn, back, sizeof back, &bn) == RL_COBS_OK);
        CHECK_EQ_U(bn, dn);
        CHECK(dn == 0 || memcmp(back, data, dn) == 0);
    }
}

static void cobs_long_runs(void)
{
    /* 254 non-zero bytes: one 0xFF run and no trailing code; 255 bytes 01..FF: FF run then 02 FF.
     * (Same table as above, from memory.) */
    uint8_t data[255], enc[300], back[300];
    size_t i, n = 0, bn = 0;
    for (i = 0; i < 255; ++i) {
        data[i] = (uint8_t)(i + 1u);
    }
    CHECK(rl_cobs_encode(data, 254, enc, sizeof enc, &n) == RL_COBS_OK);
    CHECK_EQ_U(n, 255u);
    CHECK_EQ_U(enc[0], 0xFFu);
    CHECK_EQ_U(enc[254], 0xFEu);
    CHECK(rl_cobs_encode(data, 255, enc, sizeof enc, &n) == RL_COBS_OK);
    CHECK_EQ_U(n, 257u);
    CHECK_EQ_U(enc[0], 0xFFu);
    CHECK_EQ_U(enc[255], 0x02u);
    CHECK_EQ_U(enc[256], 0xFFu);
    CHECK(rl_cobs_decode(enc, n, back, sizeof back, &bn) == RL_COBS_OK);
    CHECK_EQ_U(bn, 255u);
    CHECK(memcmp(back, data, 255) == 0);
}

static void cobs_decoder_accepts_trailing_code_form(void)
{
    /* Some encoders end a final full run with an extra code 01; both forms mean the same data. */
    uint8_t enc[256], back[300];
    size_t i, bn = 0;
    enc[0] = 0xFF;
    for (i = 1; i <= 254; ++i) {
        enc[i] = (uint8_t)i;
    }
    enc[255] = 0x01;
    CHECK(rl_cobs_decode(enc, 256, back, sizeof back, &bn) == RL_COBS_OK);
    CHECK_EQ_U(bn, 254u);
}

static void cobs_decode_rejects_bad_runs(void)
{
    uint8_t out[16];
    size_t n = 0;
    const uint8_t past_end[] = {0x05, 0x11, 0x22};
    const uint8_t zero_inside[] = {0x03, 0x11, 0x00};
    const uint8_t zero_code[] = {0x00};
    CHECK(rl_cobs_decode(past_end, sizeof past_end, out, sizeof out, &n) == RL_COBS_BAD_CODE);
    CHECK(rl_cobs_decode(zero_inside, sizeof zero_inside, out, sizeof out, &n) ==
          RL_COBS_BAD_CODE);
    CHECK(rl_cobs_decode(zero_code, sizeof zero_code, out, sizeof out, &n) == RL_COBS_BAD_CODE);
    CHECK(rl_cobs_decode(past_end, 0, out, sizeof out, &n) == RL_COBS_BAD_CODE);
}

static void cobs_reports_no_room(void)
{
    const uint8_t data[] = {0x11, 0x22, 0x33, 0x44};
    const uint8_t enc[] = {0x05, 0x11, 0x22, 0x33, 0x44};
    uint8_t out[8];
    size_t n = 0, cap;
    for (cap = 0; cap < 5; ++cap) {
        CHECK(rl_cobs_encode(data, sizeof data, out, cap, &n) == RL_COBS_NO_ROOM);
    }
    CHECK(rl_cobs_encode(data, sizeof data, out, 5, &n) == RL_COBS_OK);
    CHECK(rl_cobs_decode(enc, sizeof enc, out, 3, &n) == RL_COBS_NO_ROOM);
}

static void cobs_round_trip_random(void)
{
    uint32_t rng = 0x1234567u;
    int trial;
    for (trial = 0; trial < 400; ++trial) {
        uint8_t data[600], enc[RL_COBS_MAX_ENCODED(600)], back[600];
        const size_t len = rlt_rand(&rng) % 600u;
        const uint32_t zero_odds = rlt_rand(&rng) % 4u; /* from no zeros to mostly zeros */
        size_t i, n = 0, bn = 0;
        for (i = 0; i < len; ++i) {
            const uint32_t r = rlt_rand(&rng);
            data[i] = (zero_odds != 0u && r % (zero_odds * 2u) == 0u) ? 0u : (uint8_t)(r >> 8);
        }
        CHECK(rl_cobs_encode(data, len, enc, sizeof enc, &n) == RL_COBS_OK);
        CHECK(n <= RL_COBS_MAX_ENCODED(len));
        CHECK(memchr(enc, 0, n) == NULL);
        CHECK(rl_cobs_decode(enc, n, back, sizeof back, &bn) == RL_COBS_OK);
        CHECK_EQ_U(bn, len);
        CHECK(len == 0 || memcmp(back, data, len) == 0);
        /* in place */
        CHECK(rl_cobs_decode(enc, n, enc, n, &bn) == RL_COBS_OK);
        CHECK(len == 0 || memcmp(enc, data, len) == 0);
    }
}

static int push_all(rl_cobs_stream *s, const uint8_t *bytes, size_t len, uint8_t *frame_out,
                    size_t *frame_len, int *events)
{
    size_t i;
    int frames = 0;
    for (i = 0; i < len; ++i) {
        const uint8_t *f = NULL;
        size_t fl = 0;
        const rl_cobs_event ev = rl_cobs_stream_push(s, bytes[i], &f, &fl);
        if (events != NULL) {
            events[ev]++;
        }
        if (ev == RL_COBS_EVENT_FRAME) {
            memcpy(frame_out, f, fl);
            *frame_len = fl;
            ++frames;
        }
    }
    return frames;
}

static void cobs_stream_discards_until_first_delimiter(void)
{
    rl_cobs_stream s;
    uint8_t frame[300];
    size_t fl = 0;
    /* A valid-looking encoded frame without a preceding 0x00 is the tail of something older. */
    const uint8_t joined_midway[] = {0x03, 0x11, 0x22, 0x00};
    const uint8_t next[] = {0x03, 0x33, 0x44, 0x00};
    rl_cobs_stream_init(&s);
    CHECK_EQ_U(push_all(&s, joined_midway, sizeof joined_midway, frame, &fl, NULL), 0);
    CHECK_EQ_U(push_all(&s, next, sizeof next, frame, &fl, NULL), 1);
    CHECK_EQ_U(fl, 2u);
    CHECK(frame[0] == 0x33 && frame[1] == 0x44);
}

static void cobs_stream_empty_runs_are_ignored(void)
{
    rl_cobs_stream s;
    uint8_t frame[300];
    size_t fl = 0;
    int events[4] = {0, 0, 0, 0};
    const uint8_t bytes[] = {0x00, 0x00, 0x00, 0x02, 0x55, 0x00, 0x00};
    rl_cobs_stream_init(&s);
    CHECK_EQ_U(push_all(&s, bytes, sizeof bytes, frame, &fl, events), 1);
    CHECK_EQ_U(events[RL_COBS_EVENT_BAD_CODE], 0);
    CHECK_EQ_U(events[RL_COBS_EVENT_OVERLONG], 0);
    CHECK_EQ_U(fl, 1u);
    CHECK_EQ_U(frame[0], 0x55u);
}

static void cobs_stream_overlong_run_then_recovers(void)
{
    rl_cobs_stream s;
    uint8_t frame[300];
    size_t fl = 0, i;
    int events[4] = {0, 0, 0, 0};
    const uint8_t next[] = {0x02, 0x77, 0x00};
    rl_cobs_stream_init(&s);
    CHECK_EQ_U(push_all(&s, next + 2, 1, frame, &fl, events), 0); /* sync */
    for (i = 0; i < 1000; ++i) {
        const uint8_t b = 0x42;
        (void)push_all(&s, &b, 1, frame, &fl, events);
    }
    CHECK_EQ_U(events[RL_COBS_EVENT_OVERLONG], 0); /* reported at the delimiter, once */
    CHECK_EQ_U(push_all(&s, next + 2, 1, frame, &fl, events), 0);
    CHECK_EQ_U(events[RL_COBS_EVENT_OVERLONG], 1);
    CHECK_EQ_U(push_all(&s, next, sizeof next, frame, &fl, events), 1);
    CHECK_EQ_U(frame[0], 0x77u);
}

static void cobs_stream_longest_frame_fits(void)
{
    /* A 256-byte frame of non-zero bytes is the worst case the stream buffer must hold. */
    rl_cobs_stream s;
    uint8_t data[256], enc[RL_COBS_MAX_ENCODED(256) + 1], frame[300];
    size_t i, n = 0, fl = 0;
    for (i = 0; i < sizeof data; ++i) {
        data[i] = (uint8_t)(i % 255u + 1u);
    }
    CHECK(rl_cobs_encode(data, sizeof data, enc, sizeof enc - 1, &n) == RL_COBS_OK);
    enc[n++] = 0;
    rl_cobs_stream_init(&s);
    rl_cobs_stream_resync(&s);
    CHECK_EQ_U(push_all(&s, enc + n - 1, 1, frame, &fl, NULL), 0);
    CHECK_EQ_U(push_all(&s, enc, n, frame, &fl, NULL), 1);
    CHECK_EQ_U(fl, sizeof data);
    CHECK(memcmp(frame, data, sizeof data) == 0);
}

void run_crc_cobs_tests(void)
{
    RUN(crc_check_value);
    RUN(crc_empty_is_init_and_pieces_compose);
    RUN(crc_detects_every_single_bit_flip);
    RUN(cobs_small_examples);
    RUN(cobs_long_runs);
    RUN(cobs_decoder_accepts_trailing_code_form);
    RUN(cobs_decode_rejects_bad_runs);
    RUN(cobs_reports_no_room);
    RUN(cobs_round_trip_random);
    RUN(cobs_stream_discards_until_first_delimiter);
    RUN(cobs_stream_empty_runs_are_ignored);
    RUN(cobs_stream_overlong_run_then_recovers);
    RUN(cobs_stream_longest_frame_fits);
}
