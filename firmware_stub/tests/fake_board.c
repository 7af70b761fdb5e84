/*
 * fake_board.c - see fake_board.h.
 */
#include "fake_board.h"

#include <string.h>

#include "rl_test.h"

static int fb_read(void *ctx, float *out, size_t n)
{
    fake_board *b = (fake_board *)ctx;
    size_t i;
    for (i = 0; i < n; ++i) {
        out[i] = b->channels[i];
    }
    return b->sensor_rc;
}

static void fb_write_actuator(void *ctx, float value)
{
    fake_board *b = (fake_board *)ctx;
    b->actuator = value;
    b->actuator_writes++;
}

static uint64_t fb_micros(void *ctx)
{
    return ((fake_board *)ctx)->now;
}

static void fb_write_bytes(void *ctx, const uint8_t *data, size_t len)
{
    fake_board *b = (fake_board *)ctx;
    const size_t slot = b->tail % FAKE_MAX_PACKETS;
    if (b->tail - b->head >= FAKE_MAX_PACKETS || len > FAKE_PACKET_CAP) {
        b->lost_packets++;
        return;
    }
    memcpy(b->packets[slot], data, len);
    b->packet_len[slot] = len;
    b->tail++;
}

void fake_board_init(fake_board *b, rl_transport transport, uint64_t start_us)
{
    size_t i;
    memset(b, 0, sizeof *b);
    b->transport = transport;
    b->now = start_us;
    b->actuator = -999.0f; /* not written yet */
    for (i = 0; i < RL_MAX_CHANNELS; ++i) {
        b->channels[i] = (float)i + 0.5f;
    }
}

rl_hal fake_board_hal(fake_board *b)
{
    rl_hal h;
    h.ctx = b;
    h.transport = b->transport;
    h.read_channels = fb_read;
    h.write_actuator = fb_write_actuator;
    h.micros = fb_micros;
    h.write_bytes = fb_write_bytes;
    return h;
}

rl_device_config fake_device_config(void)
{
    rl_device_config c;
    c.name = "test-fan-rig";
    c.fw_version = 0x0102;
    c.n_channels = 3;
    c.min_period_us = 100;
    c.max_period_us = 1000000;
    c.actuator_min = -1000.0f;
    c.actuator_max = 1000.0f;
    c.defaults.period_us = 1000;
    c.defaults.watchdog_us = 5000;
    c.defaults.safe = 0.0f;
    c.defaults.u_min = 0.0f;
    c.defaults.u_max = 100.0f;
    return c;
}

size_t fake_pending(const fake_board *b)
{
    return b->tail - b->head;
}

void fake_drain(fake_board *b)
{
    b->head = b->tail;
}

int fake_pop(fake_board *b, rl_msg *out)
{
    uint8_t frame[FAKE_PACKET_CAP];
    const uint8_t *p;
    size_t len, flen = 0;
    if (b->head == b->tail) {
        return 0;
    }
    p = b->packets[b->head % FAKE_MAX_PACKETS];
    len = b->packet_len[b->head % FAKE_MAX_PACKETS];
    b->head++;
    if (b->transport == RL_TRANSPORT_STREAM) {
        CHECK_MSG(len >= 2u && p[len - 1u] == 0u, "stream packet must end with the 0x00 delimiter");
        CHECK_MSG(memchr(p, 0, len - 1u) == NULL, "no 0x00 inside a COBS-encoded frame");
        if (len < 2u || rl_cobs_decode(p, len - 1u, frame, sizeof frame, &flen) != RL_COBS_OK) {
            rlt_fail(__FILE__, __LINE__, "COBS decode of a device packet", "");
            return 0;
        }
    } else {
        memcpy(frame, p, len);
        flen = len;
    }
    if (flen >= 2u && (frame[1] & RL_AUTH_FLAG) != 0u && b->opener != NULL) {
        uint8_t plain[FAKE_PACKET_CAP];
        size_t plain_len = 0;
        if (rl_auth_open(b->opener, frame, flen, plain, sizeof plain, &plain_len) != RL_REJECT_NONE) {
            rlt_fail(__FILE__, __LINE__, "device sent a tagged frame that does not open", "");
            return 0;
        }
        memcpy(frame, plain, plain_len);
        flen = plain_len;
    }
    if (rl_proto_decode(frame, flen, out) != RL_REJECT_NONE) {
        rlt_fail(__FILE__, __LINE__, "device sent a frame that does not decode", "");
        return 0;
    }
    return 1;
}

int fake_pop_type(fake_board *b, uint8_t type, rl_msg *out)
{
    while (fake_pop(b, out)) {
        if (out->type == type) {
            return 1;
        }
    }
    return 0;
}

rl_reject fake_send(rl_device *d, const fake_board *b, const rl_msg *m)
{
    uint8_t frame[RL_MAX_FRAME];
    uint8_t wire[RL_COBS_MAX_ENCODED(RL_MAX_FRAME) + 1u];
    size_t n = rl_proto_encode(m, frame, sizeof frame);
    size_t wn = 0;
    CHECK(n > 0u);
    if (b->transport == RL_TRANSPORT_DATAGRAM) {
        return rl_device_rx_frame(d, frame, n);
    }
    if (rl_cobs_encode(frame, n, wire, sizeof wire - 1u, &wn) != RL_COBS_OK) {
        rlt_fail(__FILE__, __LINE__, "COBS encode of a test message", "");
        return RL_REJECT_COBS;
    }
    wire[wn++] = 0;
    rl_device_rx_bytes(d, wire, wn);
    return RL_REJECT_NONE; /* the stream path reports through counters */
}

void fake_run_until(rl_device *d, fake_board *b, uint64_t t)
{
    unsigned polls = 0;
    for (;;) {
        const uint64_t deadline = rl_device_next_deadline_us(d);
        if (deadline > t) {
            break;
        }
        if (++polls > 1000000u) {
            rlt_fail(__FILE__, __LINE__, "the next deadline moves on after a poll", "");
            break;
        }
        if (deadline > b->now) {
            b->now = deadline;
        }
        rl_device_poll(d);
    }
    b->now = t;
    rl_device_poll(d);
}

rl_sample fake_tick(rl_device *d, fake_board *b)
{
    rl_msg m;
    rl_sample none;
    fake_drain(b);
    b->now = d->next_tick_us;
    rl_device_poll(d);
    if (fake_pop_type(b, RL_MSG_SAMPLE, &m)) {
        return m.body.sample;
    }
    rlt_fail(__FILE__, __LINE__, "a SAMPLE at the tick", "");
    memset(&none, 0, sizeof none);
    return none;
}

rl_msg msg_configure(uint32_t period_us, uint32_t watchdog_us, float safe, float u_min,
                     float u_max)
{
    rl_msg m;
    memset(&m, 0, sizeof m);
    m.type = RL_MSG_CONFIGURE;
    m.body.configure.period_us = period_us;
    m.body.configure.watchdog_us = watchdog_us;
    m.body.configure.safe = safe;
    m.body.configure.u_min = u_min;
    m.body.configure.u_max = u_max;
    return m;
}

rl_msg msg_command(uint32_t seq, uint32_t answers, float value)
{
    rl_msg m;
    memset(&m, 0, sizeof m);
    m.type = RL_MSG_COMMAND;
    m.body.command.seq = seq;
    m.body.command.answers = answers;
    m.body.command.value = value;
    return m;
}

rl_msg msg_simple(uint8_t type)
{
    rl_msg m;
    memset(&m, 0, sizeof m);
    m.type = type;
    return m;
}

rl_msg msg_stop(uint8_t reason)
{
    rl_msg m = msg_simple(RL_MSG_STOP);
    m.body.stop.reason = reason;
    return m;
}
