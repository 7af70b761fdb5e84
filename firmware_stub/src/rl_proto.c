/*
 * rl_proto.c - frame encode/decode for protocol version 1.
 *
 * Fields are written byte by byte with shifts, so the code is independent of the CPU's byte
 * order and of alignment (a Cortex-M0 faults on unaligned word access).
 */
#include "rl_proto.h"

#include "rl_crc.h"

static void put_u16(uint8_t *p, uint16_t v)
{
    p[0] = (uint8_t)(v & 0xFFu);
    p[1] = (uint8_t)(v >> 8);
}

static void put_u32(uint8_t *p, uint32_t v)
{
    p[0] = (uint8_t)(v & 0xFFu);
    p[1] = (uint8_t)((v >> 8) & 0xFFu);
    p[2] = (uint8_t)((v >> 16) & 0xFFu);
    p[3] = (uint8_t)(v >> 24);
}

static void put_u64(uint8_t *p, uint64_t v)
{
    put_u32(p, (uint32_t)(v & 0xFFFFFFFFu));
    put_u32(p + 4, (uint32_t)(v >> 32));
}

static void put_f32(uint8_t *p, float v)
{
    rl_float_bits b;
    b.f = v;
    put_u32(p, b.u);
}

static uint16_t get_u16(const uint8_t *p)
{
    return (uint16_t)((uint16_t)p[0] | (uint16_t)((uint16_t)p[1] << 8));
}

static uint32_t get_u32(const uint8_t *p)
{
    return (uint32_t)p[0] | ((uint32_t)p[1] << 8) | ((uint32_t)p[2] << 16) |
           ((uint32_t)p[3] << 24);
}

static uint64_t get_u64(const uint8_t *p)
{
    return (uint64_t)get_u32(p) | ((uint64_t)get_u32(p + 4) << 32);
}

static float get_f32(const uint8_t *p)
{
    rl_float_bits b;
    b.u = get_u32(p);
    return b.f;
}

const char *rl_reject_name(rl_reject reason)
{
    switch (reason) {
    case RL_REJECT_NONE:
        return "none";
    case RL_REJECT_COBS:
        return "cobs";
    case RL_REJECT_SHORT:
        return "short";
    case RL_REJECT_CRC:
        return "crc";
    case RL_REJECT_VERSION:
        return "version";
    case RL_REJECT_TYPE:
        return "type";
    case RL_REJECT_LENGTH:
        return "length";
    case RL_REJECT_SEQUENCE:
        return "sequence";
    case RL_REJECT_VALUE:
        return "value";
    case RL_REJECT_AUTH:
        return "auth";
    case RL_REJECT_COUNT:
    default:
        return "?";
    }
}

long rl_proto_body_length(uint8_t type, uint8_t n_channels)
{
    switch (type) {
    case RL_MSG_HELLO:
        return (long)RL_HELLO_BODY;
    case RL_MSG_SAMPLE:
        return (long)RL_SAMPLE_BODY_BASE + 4L * (long)n_channels;
    case RL_MSG_FAULT:
        return (long)RL_FAULT_BODY;
    case RL_MSG_QUERY:
        return (long)RL_QUERY_BODY;
    case RL_MSG_ARM:
        return (long)RL_ARM_BODY;
    case RL_MSG_CONFIGURE:
        return (long)RL_CONFIGURE_BODY;
    case RL_MSG_COMMAND:
        return (long)RL_COMMAND_BODY;
    case RL_MSG_STOP:
        return (long)RL_STOP_BODY;
    default:
        return -1L;
    }
}

static void encode_body(const rl_msg *m, uint8_t *b)
{
    size_t i;
    switch (m->type) {
    case RL_MSG_HELLO: {
        const rl_hello *h = &m->body.hello;
        b[0] = h->proto_min;
        b[1] = h->proto_max;
        put_u16(b + 2, h->fw_version);
        b[4] = h->n_channels;
        b[5] = h->status;
        put_u32(b + 6, h->period_us);
        put_u32(b + 10, h->watchdog_us);
        put_f32(b + 14, h->safe);
        put_f32(b + 18, h->u_min);
        put_f32(b + 22, h->u_max);
        for (i = 0; i < RL_NAME_LEN; ++i) {
            b[26 + i] = (uint8_t)h->name[i];
        }
        if (h->ext != 0u) {
            put_u32(b + 42, h->min_period_us);
            put_u32(b + 46, h->max_period_us);
            b[50] = h->auth;
            for (i = 0; i < RL_NONCE_LEN; ++i) {
                b[51 + i] = h->nonce[i];
            }
        }
        break;
    }
    case RL_MSG_QUERY:
        if (m->body.query.has_nonce != 0u) {
            for (i = 0; i < RL_NONCE_LEN; ++i) {
                b[i] = m->body.query.nonce[i];
            }
        }
        break;
    case RL_MSG_SAMPLE: {
        const rl_sample *s = &m->body.sample;
        put_u32(b, s->seq);
        put_u64(b + 4, s->t_us);
        put_u16(b + 12, s->status);
        put_f32(b + 14, s->applied);
        put_u32(b + 18, s->last_cmd_seq);
        b[22] = s->n;
        for (i = 0; i < s->n; ++i) {
            put_f32(b + RL_SAMPLE_BODY_BASE + 4u * i, s->channels[i]);
        }
        break;
    }
    case RL_MSG_FAULT: {
        const rl_fault *f = &m->body.fault;
        put_u64(b, f->t_us);
        put_u16(b + 8, f->code);
        put_u16(b + 10, f->status);
        put_f32(b + 12, f->value);
        break;
    }
    case RL_MSG_CONFIGURE: {
        const rl_configure *c = &m->body.configure;
        put_u32(b, c->period_us);
        put_u32(b + 4, c->watchdog_us);
        put_f32(b + 8, c->safe);
        put_f32(b + 12, c->u_min);
        put_f32(b + 16, c->u_max);
        break;
    }
    case RL_MSG_COMMAND: {
        const rl_command *c = &m->body.command;
        put_u32(b, c->seq);
        put_u32(b + 4, c->answers);
        put_f32(b + 8, c->value);
        break;
    }
    case RL_MSG_STOP:
        b[0] = m->body.stop.reason;
        break;
    default: /* ARM: no body */
        break;
    }
}

/* Body length of a message to encode: the 1.1 forms of HELLO and QUERY where asked for. */
static long encoded_body_length(const rl_msg *m)
{
    if (m->type == RL_MSG_HELLO && m->body.hello.ext != 0u) {
        return (long)RL_HELLO_EXT_BODY;
    }
    if (m->type == RL_MSG_QUERY && m->body.query.has_nonce != 0u) {
        return (long)RL_QUERY_NONCE_BODY;
    }
    return rl_proto_body_length(m->type, m->type == RL_MSG_SAMPLE ? m->body.sample.n : 0u);
}

size_t rl_proto_encode(const rl_msg *m, uint8_t *frame, size_t cap)
{
    long body;
    size_t total;
    uint16_t crc;

    if (m->type == RL_MSG_SAMPLE && m->body.sample.n > RL_MAX_CHANNELS) {
        return 0;
    }
    body = encoded_body_length(m);
    if (body < 0) {
        return 0;
    }
    total = (size_t)body + RL_FRAME_OVERHEAD;
    if (total > cap || total > RL_MAX_FRAME) {
        return 0;
    }
    frame[0] = (uint8_t)RL_PROTO_VERSION;
    frame[1] = m->type;
    encode_body(m, frame + 2);
    crc = rl_crc16(frame, total - 2u);
    put_u16(frame + total - 2u, crc);
    return total;
}

static void decode_body(uint8_t type, const uint8_t *b, size_t body_len, rl_msg *out)
{
    size_t i;
    out->type = type;
    switch (type) {
    case RL_MSG_HELLO: {
        rl_hello *h = &out->body.hello;
        h->proto_min = b[0];
        h->proto_max = b[1];
        h->fw_version = get_u16(b + 2);
        h->n_channels = b[4];
        h->status = b[5];
        h->period_us = get_u32(b + 6);
        h->watchdog_us = get_u32(b + 10);
        h->safe = get_f32(b + 14);
        h->u_min = get_f32(b + 18);
        h->u_max = get_f32(b + 22);
        for (i = 0; i < RL_NAME_LEN; ++i) {
            h->name[i] = (char)b[26 + i];
        }
        h->ext = body_len == RL_HELLO_EXT_BODY ? 1u : 0u;
        h->min_period_us = h->ext != 0u ? get_u32(b + 42) : 0u;
        h->max_period_us = h->ext != 0u ? get_u32(b + 46) : 0u;
        h->auth = h->ext != 0u ? b[50] : (uint8_t)RL_AUTH_MODE_NONE;
        for (i = 0; i < RL_NONCE_LEN; ++i) {
            h->nonce[i] = h->ext != 0u ? b[51 + i] : 0u;
        }
        break;
    }
    case RL_MSG_QUERY:
        out->body.query.has_nonce = body_len == RL_QUERY_NONCE_BODY ? 1u : 0u;
        for (i = 0; i < RL_NONCE_LEN; ++i) {
            out->body.query.nonce[i] = out->body.query.has_nonce != 0u ? b[i] : 0u;
        }
        break;
    case RL_MSG_SAMPLE: {
        rl_sample *s = &out->body.sample;
        s->seq = get_u32(b);
        s->t_us = get_u64(b + 4);
        s->status = get_u16(b + 12);
        s->applied = get_f32(b + 14);
        s->last_cmd_seq = get_u32(b + 18);
        s->n = b[22];
        for (i = 0; i < s->n; ++i) {
            s->channels[i] = get_f32(b + RL_SAMPLE_BODY_BASE + 4u * i);
        }
        for (; i < RL_MAX_CHANNELS; ++i) {
            s->channels[i] = 0.0f;
        }
        break;
    }
    case RL_MSG_FAULT: {
        rl_fault *f = &out->body.fault;
        f->t_us = get_u64(b);
        f->code = get_u16(b + 8);
        f->status = get_u16(b + 10);
        f->value = get_f32(b + 12);
        break;
    }
    case RL_MSG_CONFIGURE: {
        rl_configure *c = &out->body.configure;
        c->period_us = get_u32(b);
        c->watchdog_us = get_u32(b + 4);
        c->safe = get_f32(b + 8);
        c->u_min = get_f32(b + 12);
        c->u_max = get_f32(b + 16);
        break;
    }
    case RL_MSG_COMMAND: {
        rl_command *c = &out->body.command;
        c->seq = get_u32(b);
        c->answers = get_u32(b + 4);
        c->value = get_f32(b + 8);
        break;
    }
    case RL_MSG_STOP:
        out->body.stop.reason = b[0];
        break;
    default:
        break;
    }
}

rl_reject rl_proto_decode(const uint8_t *frame, size_t len, rl_msg *out)
{
    size_t body_len;
    long expected;
    uint8_t n = 0;

    if (len < RL_FRAME_OVERHEAD) {
        return RL_REJECT_SHORT;
    }
    if (rl_crc16(frame, len - 2u) != get_u16(frame + len - 2u)) {
        return RL_REJECT_CRC;
    }
    if (frame[0] != RL_PROTO_VERSION) {
        return RL_REJECT_VERSION;
    }
    body_len = len - RL_FRAME_OVERHEAD;
    if (frame[1] == RL_MSG_SAMPLE) {
        if (body_len < RL_SAMPLE_BODY_BASE) {
            return RL_REJECT_LENGTH;
        }
        n = frame[2 + 22];
        if (n > RL_MAX_CHANNELS) {
            return RL_REJECT_LENGTH;
        }
    }
    expected = rl_proto_body_length(frame[1], n);
    if (expected < 0) {
        return RL_REJECT_TYPE;
    }
    if (body_len != (size_t)expected &&
        !(frame[1] == RL_MSG_QUERY && body_len == RL_QUERY_NONCE_BODY) &&
        !(frame[1] == RL_MSG_HELLO && body_len == RL_HELLO_EXT_BODY)) {
        return RL_REJECT_LENGTH;
    }
    decode_body(frame[1], frame + 2, body_len, out);
    return RL_REJECT_NONE;
}

rl_reject rl_proto_check_values(const rl_msg *m)
{
    if (m->type == RL_MSG_COMMAND) {
        return rl_isfinite(m->body.command.value) ? RL_REJECT_NONE : RL_REJECT_VALUE;
    }
    if (m->type == RL_MSG_CONFIGURE) {
        const rl_configure *c = &m->body.configure;
        if (!rl_isfinite(c->safe) || !rl_isfinite(c->u_min) || !rl_isfinite(c->u_max)) {
            return RL_REJECT_VALUE;
        }
        if (!(c->u_min <= c->safe && c->safe <= c->u_max)) {
            return RL_REJECT_VALUE;
        }
        if (c->period_us == 0u || c->watchdog_us < c->period_us) {
            return RL_REJECT_VALUE;
        }
    }
    return RL_REJECT_NONE;
}
