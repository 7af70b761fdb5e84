/*
 * test_vectors.c - the shared protocol vectors (docs/protocol-vectors.json, produced with the
 * host's reference codec, whose CRC is the standard library's binascii.crc_hqx): every frame
 * decodes to the listed fields and re-encodes to the same bytes, every serial form matches our
 * COBS, every bad frame is rejected for the listed reason, through the codec and through a
 * device. One test case per vector.
 */
#include <stdio.h>
#include <string.h>

#include "fake_board.h"
#include "rl_crc.h"
#include "rl_test.h"
#include "rl_vectors.h"

static fake_board board;
static rl_device dev;

/* The value of a named field of a decoded message, as raw bits, for comparison with a vector. */
static uint64_t nonce_u64(const uint8_t *p)
{
    uint64_t v = 0;
    int i;
    for (i = 7; i >= 0; --i) {
        v = (v << 8) | p[i];
    }
    return v;
}

static int field_bits(const rl_msg *m, const rlv_field *f, uint64_t *u, uint32_t *fb,
                      const char **text)
{
    rl_float_bits b;
    const char *n = f->name;
    *text = 0;
    switch (m->type) {
    case RL_MSG_HELLO: {
        const rl_hello *h = &m->body.hello;
        if (strcmp(n, "proto_min") == 0) { *u = h->proto_min; return 1; }
        if (strcmp(n, "proto_max") == 0) { *u = h->proto_max; return 1; }
        if (strcmp(n, "fw_version") == 0) { *u = h->fw_version; return 1; }
        if (strcmp(n, "n_channels") == 0) { *u = h->n_channels; return 1; }
        if (strcmp(n, "status") == 0) { *u = h->status; return 1; }
        if (strcmp(n, "period_us") == 0) { *u = h->period_us; return 1; }
        if (strcmp(n, "watchdog_us") == 0) { *u = h->watchdog_us; return 1; }
        if (strcmp(n, "safe") == 0) { b.f = h->safe; *fb = b.u; return 1; }
        if (strcmp(n, "u_min") == 0) { b.f = h->u_min; *fb = b.u; return 1; }
        if (strcmp(n, "u_max") == 0) { b.f = h->u_max; *fb = b.u; return 1; }
        if (strcmp(n, "name") == 0) { *text = h->name; return 1; }
        if (strcmp(n, "min_period_us") == 0) { *u = h->min_period_us; return 1; }
        if (strcmp(n, "max_period_us") == 0) { *u = h->max_period_us; return 1; }
        if (strcmp(n, "auth") == 0) { *u = h->auth; return 1; }
        if (strcmp(n, "nonce") == 0) { *u = nonce_u64(h->nonce); return 1; }
        break;
    }
    case RL_MSG_SAMPLE: {
        const rl_sample *s = &m->body.sample;
        if (strcmp(n, "seq") == 0) { *u = s->seq; return 1; }
        if (strcmp(n, "t_us") == 0) { *u = s->t_us; return 1; }
        if (strcmp(n, "status") == 0) { *u = s->status; return 1; }
        if (strcmp(n, "applied") == 0) { b.f = s->applied; *fb = b.u; return 1; }
        if (strcmp(n, "last_cmd_seq") == 0) { *u = s->last_cmd_seq; return 1; }
        if (strcmp(n, "n") == 0) { *u = s->n; return 1; }
        if (strcmp(n, "channels") == 0 && f->index >= 0 && f->index < (int)s->n) {
            b.f = s->channels[f->index];
            *fb = b.u;
            return 1;
        }
        break;
    }
    case RL_MSG_FAULT: {
        const rl_fault *x = &m->body.fault;
        if (strcmp(n, "t_us") == 0) { *u = x->t_us; return 1; }
        if (strcmp(n, "code") == 0) { *u = x->code; return 1; }
        if (strcmp(n, "status") == 0) { *u = x->status; return 1; }
        if (strcmp(n, "value") == 0) { b.f = x->value; *fb = b.u; return 1; }
        break;
    }
    case RL_MSG_CONFIGURE: {
        const rl_configure *c = &m->body.configure;
        if (strcmp(n, "period_us") == 0) { *u = c->period_us; return 1; }
        if (strcmp(n, "watchdog_us") == 0) { *u = c->watchdog_us; return 1; }
        if (strcmp(n, "safe") == 0) { b.f = c->safe; *fb = b.u; return 1; }
        if (strcmp(n, "u_min") == 0) { b.f = c->u_min; *fb = b.u; return 1; }
        if (strcmp(n, "u_max") == 0) { b.f = c->u_max; *fb = b.u; return 1; }
        break;
    }
    case RL_MSG_COMMAND: {
        const rl_command *c = &m->body.command;
        if (strcmp(n, "seq") == 0) { *u = c->seq; return 1; }
        if (strcmp(n, "answers") == 0) { *u = c->answers; return 1; }
        if (strcmp(n, "value") == 0) { b.f = c->value; *fb = b.u; return 1; }
        break;
    }
    case RL_MSG_STOP:
        if (strcmp(n, "reason") == 0) { *u = m->body.stop.reason; return 1; }
        break;
    case RL_MSG_QUERY:
        if (strcmp(n, "nonce") == 0 && m->body.query.has_nonce) {
            *u = nonce_u64(m->body.query.nonce);
            return 1;
        }
        break;
    default:
        break;
    }
    return 0;
}

static void check_fields(const rlv_vector *v, const rl_msg *m)
{
    size_t i;
    for (i = 0; i < v->n_fields; ++i) {
        const rlv_field *f = &v->fields[i];
        uint64_t u = 0;
        uint32_t fb = 0;
        const char *text = 0;
        char where[96];
        snprintf(where, sizeof where, "field %s[%d]", f->name, f->index);
        if (!field_bits(m, f, &u, &fb, &text)) {
            rlt_fail(__FILE__, __LINE__, "decoded message has the field", where);
            continue;
        }
        if (f->kind == RLV_UINT) {
            CHECK_EQ_U(u, f->u);
        } else if (f->kind == RLV_FLOAT) {
            rl_float_bits got;
            got.u = fb;
            if (f->is_nan) {
                CHECK_MSG(!rl_isfinite(got.f) && (fb & 0x007FFFFFu) != 0u, where);
            } else {
                CHECK_EQ_U(fb, f->f_bits);
            }
        } else {
            char want[RL_NAME_LEN];
            memset(want, 0, sizeof want);
            strncpy(want, f->text, sizeof want);
            CHECK_MSG(text != 0 && memcmp(text, want, RL_NAME_LEN) == 0, where);
        }
    }
}

/* The receiver pipeline on a bare frame: decode, then the value rules. */
static rl_reject frame_verdict(const uint8_t *frame, size_t len)
{
    rl_msg m;
    const rl_reject r = rl_proto_decode(frame, len, &m);
    return r != RL_REJECT_NONE ? r : rl_proto_check_values(&m);
}

/* The receiver pipeline on a serial run: sync, de-stuff, then as a bare frame. */
static rl_reject serial_verdict(const uint8_t *serial, size_t len)
{
    rl_cobs_stream s;
    size_t i;
    rl_reject verdict = RL_REJECT_COUNT; /* "no frame came out" */
    rl_cobs_stream_init(&s);
    (void)rl_cobs_stream_push(&s, 0x00, 0, 0);
    for (i = 0; i < len; ++i) {
        const uint8_t *f = 0;
        size_t fl = 0;
        switch (rl_cobs_stream_push(&s, serial[i], &f, &fl)) {
        case RL_COBS_EVENT_FRAME:
            verdict = frame_verdict(f, fl);
            break;
        case RL_COBS_EVENT_BAD_CODE:
            verdict = RL_REJECT_COBS;
            break;
        case RL_COBS_EVENT_OVERLONG:
            verdict = RL_REJECT_LENGTH;
            break;
        default:
            break;
        }
    }
    return verdict;
}

/* Deliver serial bytes to a fresh, configured device and return its counters. */
static const rl_device_counters *through_device(const uint8_t *serial, size_t len)
{
    const rl_device_config cfg = fake_device_config();
    rl_hal hal;
    rl_msg m = msg_configure(1000, 5000, 0.0f, 0.0f, 100.0f);
    fake_board_init(&board, RL_TRANSPORT_STREAM, 1000000u);
    hal = fake_board_hal(&board);
    if (rl_device_init(&dev, &hal, &cfg) != RL_DEVICE_OK) {
        rlt_fail(__FILE__, __LINE__, "device init", "");
    }
    rl_device_rx_byte(&dev, 0x00);
    (void)fake_send(&dev, &board, &m);
    memset(&dev.counters, 0, sizeof dev.counters);
    rl_device_rx_bytes(&dev, serial, len);
    return rl_device_get_counters(&dev);
}

static void check_valid_vector(const rlv_vector *v)
{
    rl_msg m;
    uint8_t again[RL_MAX_FRAME];
    uint8_t wire[RL_COBS_MAX_ENCODED(RL_MAX_FRAME) + 1u];
    size_t n, wn = 0;
    const rl_device_counters *c;

    CHECK(v->has_frame);
    if (!v->has_frame) {
        return;
    }
    CHECK(rl_proto_decode(v->frame, v->frame_len, &m) == RL_REJECT_NONE);
    CHECK(rl_proto_check_values(&m) == RL_REJECT_NONE);
    CHECK_EQ_U(m.type, (unsigned)v->type);
    check_fields(v, &m);
    n = rl_proto_encode(&m, again, sizeof again);
    CHECK_EQ_U(n, v->frame_len);
    CHECK(n == v->frame_len && memcmp(again, v->frame, n) == 0);

    if (!v->has_serial) {
        return;
    }
    CHECK(rl_cobs_encode(v->frame, v->frame_len, wire, sizeof wire - 1u, &wn) == RL_COBS_OK);
    wire[wn++] = 0;
    CHECK_EQ_U(wn, v->serial_len);
    CHECK(wn == v->serial_len && memcmp(wire, v->serial, wn) == 0);
    CHECK(serial_verdict(v->serial, v->serial_len) == RL_REJECT_NONE);

    /* A device takes every host-to-device vector and refuses the others as the wrong type. */
    c = through_device(v->serial, v->serial_len);
    if (v->type >= 0x10) {
        CHECK_EQ_U(c->frames_accepted, 1u);
        CHECK_EQ_U(c->rejected[RL_REJECT_TYPE], 0u);
    } else {
        CHECK_EQ_U(c->frames_accepted, 0u);
        CHECK_EQ_U(c->rejected[RL_REJECT_TYPE], 1u);
    }
}

static void check_error_vector(const rlv_vector *v)
{
    char detail[128];
    if (v->has_frame) {
        const rl_reject r = frame_verdict(v->frame, v->frame_len);
        snprintf(detail, sizeof detail, "frame: got %s, want %s", rl_reject_name(r),
                 v->expect_error);
        CHECK_MSG(strcmp(rl_reject_name(r), v->expect_error) == 0, detail);
    }
    if (v->has_serial) {
        const rl_reject r = serial_verdict(v->serial, v->serial_len);
        const rl_device_counters *c;
        int reason;
        snprintf(detail, sizeof detail, "serial: got %s, want %s",
                 r == RL_REJECT_COUNT ? "no frame" : rl_reject_name(r), v->expect_error);
        CHECK_MSG(r != RL_REJECT_COUNT && strcmp(rl_reject_name(r), v->expect_error) == 0,
                  detail);
        /* the device counts it under the same reason, once, and accepts nothing */
        c = through_device(v->serial, v->serial_len);
        for (reason = 1; reason < (int)RL_REJECT_COUNT; ++reason) {
            const int want = strcmp(rl_reject_name((rl_reject)reason), v->expect_error) == 0;
            snprintf(detail, sizeof detail, "device counter %s", rl_reject_name((rl_reject)reason));
            CHECK_MSG(c->rejected[reason] == (uint32_t)want, detail);
        }
        CHECK_EQ_U(c->frames_accepted, 0u);
    }
}

static void shared_crc_cases(void)
{
    size_t i;
    for (i = 0; i < RLV_CRC_COUNT; ++i) {
        CHECK_EQ_U(rl_crc16(rlv_crc_cases[i].data, rlv_crc_cases[i].len), rlv_crc_cases[i].crc);
    }
}

static void shared_cobs_cases(void)
{
    size_t i;
    for (i = 0; i < RLV_COBS_COUNT; ++i) {
        const rlv_cobs_case *c = &rlv_cobs_cases[i];
        uint8_t enc[RL_COBS_MAX_ENCODED(600)], dec[600];
        size_t n = 0, dn = 0;
        CHECK(rl_cobs_encode(c->data, c->len, enc, sizeof enc, &n) == RL_COBS_OK);
        CHECK_EQ_U(n, c->enc_len);
        CHECK(n == c->enc_len && memcmp(enc, c->enc, n) == 0);
        CHECK(rl_cobs_decode(c->enc, c->enc_len, dec, sizeof dec, &dn) == RL_COBS_OK);
        CHECK_EQ_U(dn, c->len);
        CHECK(dn == c->len && (dn == 0u || memcmp(dec, c->data, dn) == 0));
    }
}

static void shared_sequence_cases(void)
{
    size_t i;
    for (i = 0; i < RLV_SEQ_COUNT; ++i) {
        CHECK_EQ_U(rl_seq_newer(rlv_seq_cases[i].seq, rlv_seq_cases[i].last) != 0,
                   rlv_seq_cases[i].newer);
    }
}

static void shared_vectors_present(void)
{
    /* The vector file covers both directions and several rejection reasons. */
    size_t i, valid = 0, errors = 0;
    for (i = 0; i < RLV_VECTOR_COUNT; ++i) {
        if (rlv_vectors[i].expect_error != 0) {
            ++errors;
        } else {
            ++valid;
        }
    }
    CHECK(valid >= 5u);
    CHECK(errors >= 5u);
    CHECK(RLV_CRC_COUNT + RLV_COBS_COUNT + RLV_SEQ_COUNT > 0u);
}

void run_vector_tests(void)
{
    size_t i;
    RUN(shared_vectors_present);
    RUN(shared_crc_cases);
    RUN(shared_cobs_cases);
    RUN(shared_sequence_cases);
    for (i = 0; i < RLV_VECTOR_COUNT; ++i) {
        const rlv_vector *v = &rlv_vectors[i];
        static char name[128];
        snprintf(name, sizeof name, "vector %s", v->name);
        rlt_begin(name);
        if (v->expect_error != 0) {
            check_error_vector(v);
        } else {
            check_valid_vector(v);
        }
        rlt_end();
    }
}
