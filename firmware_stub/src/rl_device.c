/*
 * rl_device.c - the device state machine of docs/protocol.md section 6.
 *
 * Safety rules it keeps, whatever the host does:
 *   - every value written to the actuator lies in [u_min, u_max], or is the safe value;
 *   - a STOP drives the safe value from inside the receive path, not at the next tick;
 *   - armed, and no accepted COMMAND for longer than watchdog_us -> safe value, latched until ARM;
 *   - only ARM leaves a latched state, and after ARM the output stays safe until a fresh COMMAND.
 */
#include "rl_device.h"

static uint64_t now_us(const rl_device *d)
{
    return d->hal.micros(d->hal.ctx);
}

static void send_msg(rl_device *d, const rl_msg *m)
{
    size_t wire_len = 0;
    size_t frame_len = rl_proto_encode(m, d->tx_frame, sizeof d->tx_frame);
    if (frame_len == 0u) {
        return; /* cannot happen for messages built here; nothing sensible to send */
    }
    if (d->keyed != 0u) {
        /* nothing leaves a keyed device untagged: before the first session, nothing at all */
        frame_len = rl_auth_seal(&d->auth, d->tx_frame, frame_len, sizeof d->tx_frame);
        if (frame_len == 0u) {
            return;
        }
    }
    if (d->hal.transport == RL_TRANSPORT_DATAGRAM) {
        d->hal.write_bytes(d->hal.ctx, d->tx_frame, frame_len);
        return;
    }
    if (rl_cobs_encode(d->tx_frame, frame_len, d->tx_wire, sizeof d->tx_wire - 1u, &wire_len) !=
        RL_COBS_OK) {
        return; /* sized for the largest frame: cannot happen */
    }
    d->tx_wire[wire_len++] = 0u;
    d->hal.write_bytes(d->hal.ctx, d->tx_wire, wire_len);
}

uint16_t rl_device_status(const rl_device *d)
{
    return (uint16_t)(d->flags | (d->clamped != 0u ? RL_STATUS_CLAMPED : 0u));
}

static void send_hello(rl_device *d)
{
    rl_msg m;
    size_t i;
    m.type = RL_MSG_HELLO;
    m.body.hello.proto_min = (uint8_t)RL_PROTO_VERSION;
    m.body.hello.proto_max = (uint8_t)RL_PROTO_VERSION;
    m.body.hello.fw_version = d->config.fw_version;
    m.body.hello.n_channels = d->config.n_channels;
    m.body.hello.status = (uint8_t)(rl_device_status(d) & 0xFFu);
    m.body.hello.period_us = d->active.period_us;
    m.body.hello.watchdog_us = d->active.watchdog_us;
    m.body.hello.safe = d->active.safe;
    m.body.hello.u_min = d->active.u_min;
    m.body.hello.u_max = d->active.u_max;
    for (i = 0; i < RL_NAME_LEN; ++i) {
        m.body.hello.name[i] = d->name[i];
    }
    m.body.hello.ext = d->hello_ext;
    m.body.hello.min_period_us = d->config.min_period_us;
    m.body.hello.max_period_us = d->config.max_period_us;
    m.body.hello.auth = (uint8_t)(d->keyed != 0u ? RL_AUTH_MODE_HMAC_SHA256_64 : RL_AUTH_MODE_NONE);
    for (i = 0; i < RL_NONCE_LEN; ++i) {
        m.body.hello.nonce[i] = d->auth.device_nonce[i];
    }
    send_msg(d, &m);
}

static void send_fault(rl_device *d, uint16_t code, float value)
{
    rl_msg m;
    m.type = RL_MSG_FAULT;
    m.body.fault.t_us = now_us(d);
    m.body.fault.code = code;
    m.body.fault.status = rl_device_status(d);
    m.body.fault.value = value;
    d->counters.faults_sent++;
    send_msg(d, &m);
}

/* Drive the safe value now and forget any pending command. */
static void go_safe(rl_device *d)
{
    d->flags = (uint16_t)(d->flags & ~RL_STATUS_ARMED);
    d->have_pending = 0;
    d->applied = d->active.safe;
    d->clamped = 0;
    d->hal.write_actuator(d->hal.ctx, d->applied);
}

static void count_reject(rl_device *d, rl_reject reason)
{
    d->counters.rejected[reason]++;
    d->flags = (uint16_t)(d->flags | RL_STATUS_RX_ERROR);
}

void rl_device_raise_fault(rl_device *d, uint16_t code, float value)
{
    if ((d->flags & RL_STATUS_FAULT) != 0u) {
        return; /* already latched: one FAULT message per fault */
    }
    go_safe(d);
    d->flags = (uint16_t)(d->flags | RL_STATUS_FAULT);
    send_fault(d, code, value);
}

/* Which CONFIGURE rule failed, and the value to report in FAULT code 4. */
static rl_reject check_configure(const rl_device *d, const rl_msg *m, float *offender)
{
    const rl_configure *c = &m->body.configure;
    *offender = rl_nan();
    if (rl_proto_check_values(m) != RL_REJECT_NONE) {
        if (!rl_isfinite(c->safe)) {
            *offender = c->safe;
        } else if (!rl_isfinite(c->u_min)) {
            *offender = c->u_min;
        } else if (!rl_isfinite(c->u_max)) {
            *offender = c->u_max;
        } else if (!(c->u_min <= c->safe && c->safe <= c->u_max)) {
            *offender = c->safe;
        } else if (c->period_us == 0u) {
            *offender = 0.0f;
        } else {
            *offender = (float)c->watchdog_us;
        }
        return RL_REJECT_VALUE;
    }
    if (c->period_us < d->config.min_period_us || c->period_us > d->config.max_period_us) {
        *offender = (float)c->period_us;
        return RL_REJECT_VALUE;
    }
    if (c->u_min < d->config.actuator_min) {
        *offender = c->u_min;
        return RL_REJECT_VALUE;
    }
    if (c->u_max > d->config.actuator_max) {
        *offender = c->u_max;
        return RL_REJECT_VALUE;
    }
    return RL_REJECT_NONE;
}

static rl_reject on_configure(rl_device *d, const rl_msg *m)
{
    float offender;
    const rl_configure *c = &m->body.configure;
    if (check_configure(d, m, &offender) != RL_REJECT_NONE) {
        count_reject(d, RL_REJECT_VALUE);
        send_fault(d, RL_FAULT_CONFIGURE_REJECTED, offender);
        return RL_REJECT_VALUE;
    }
    d->active.period_us = c->period_us;
    d->active.watchdog_us = c->watchdog_us;
    d->active.safe = c->safe;
    d->active.u_min = c->u_min;
    d->active.u_max = c->u_max;
    go_safe(d);
    d->have_last_seq = 0;
    d->flags = (uint16_t)(d->flags | RL_STATUS_CONFIGURED);
    d->next_tick_us = now_us(d) + d->active.period_us;
    d->bound = 1; /* section 6.7: the sender is now the host */
    d->bound_rx_us = now_us(d);
    d->counters.binds++;
    send_hello(d);
    return RL_REJECT_NONE;
}

static int same_nonce(const uint8_t *a, const uint8_t *b)
{
    size_t i;
    for (i = 0; i < RL_NONCE_LEN; ++i) {
        if (a[i] != b[i]) {
            return 0;
        }
    }
    return 1;
}

/* QUERY: answer HELLO; a keyed device starts a session on a new host nonce unless bound. */
static rl_reject on_query(rl_device *d, const rl_msg *m)
{
    const rl_query *q = &m->body.query;
    if (d->keyed != 0u) {
        if (q->has_nonce == 0u) {
            count_reject(d, RL_REJECT_AUTH); /* a keyed device needs the host's nonce */
            return RL_REJECT_AUTH;
        }
        if (d->auth.have_session == 0u || !same_nonce(q->nonce, d->auth.host_nonce)) {
            uint8_t device_nonce[RL_NONCE_LEN];
            if (d->bound != 0u) {
                count_reject(d, RL_REJECT_AUTH); /* a host holds the device: no new session */
                return RL_REJECT_AUTH;
            }
            d->nonce_fn(d->nonce_ctx, device_nonce);
            rl_auth_start(&d->auth, q->nonce, device_nonce);
        }
    }
    d->hello_ext = q->has_nonce;
    send_hello(d);
    return RL_REJECT_NONE;
}

static void on_arm(rl_device *d)
{
    if ((d->flags & RL_STATUS_CONFIGURED) == 0u) {
        d->counters.arms_ignored++;
        return;
    }
    d->flags = (uint16_t)(d->flags & ~(RL_STATUS_STOP_LATCHED | RL_STATUS_WATCHDOG |
                                       RL_STATUS_FAULT));
    d->flags = (uint16_t)(d->flags | RL_STATUS_ARMED);
    d->have_pending = 0; /* output stays safe until a COMMAND accepted after this ARM */
    d->last_accept_us = now_us(d);
}

static rl_reject on_command(rl_device *d, const rl_msg *m)
{
    const rl_command *c = &m->body.command;
    /* docs/protocol.md section 3: value before sequence (what needs history comes last) */
    if (rl_proto_check_values(m) != RL_REJECT_NONE) {
        count_reject(d, RL_REJECT_VALUE);
        return RL_REJECT_VALUE;
    }
    if (d->have_last_seq != 0u &&
        (!rl_seq_newer(c->seq, d->last_seq) || c->seq - d->last_seq > RL_SEQ_MAX_JUMP)) {
        count_reject(d, RL_REJECT_SEQUENCE);
        return RL_REJECT_SEQUENCE;
    }
    d->have_last_seq = 1;
    d->last_seq = c->seq;
    if ((d->flags & RL_STATUS_ARMED) == 0u) {
        d->counters.commands_ignored++; /* disarmed, stopped or tripped: keep the safe value */
        return RL_REJECT_NONE;
    }
    d->have_pending = 1;
    d->pending_value = c->value;
    d->pending_seq = c->seq;
    d->last_accept_us = now_us(d);
    d->counters.commands_accepted++;
    return RL_REJECT_NONE;
}

static void on_stop(rl_device *d, const rl_msg *m)
{
    go_safe(d); /* at once, from the receive path */
    d->flags = (uint16_t)(d->flags | RL_STATUS_STOP_LATCHED);
    d->last_stop_reason = m->body.stop.reason;
    d->counters.stops++;
}

/*
 * Section 14: a tagged frame is opened (tag, counter) into rx_plain before it is decoded; on a
 * keyed device the only frame accepted without a tag is a QUERY carrying a nonce.
 */
static rl_reject open_frame(rl_device *d, const uint8_t **frame, size_t *len)
{
    const uint8_t *f = *frame;
    if (*len < RL_FRAME_OVERHEAD || f[0] != RL_PROTO_VERSION) {
        return RL_REJECT_NONE; /* short, crc or version: rl_proto_decode names it */
    }
    if ((f[1] & RL_AUTH_FLAG) != 0u) {
        size_t plain_len = 0;
        const rl_reject r = d->keyed != 0u
                                ? rl_auth_open(&d->auth, f, *len, d->rx_plain, sizeof d->rx_plain,
                                               &plain_len)
                                : rl_auth_open(&d->auth, f, *len, d->rx_plain, 0u, &plain_len);
        if (r != RL_REJECT_NONE) {
            return r;
        }
        *frame = d->rx_plain;
        *len = plain_len;
        return RL_REJECT_NONE;
    }
    if (d->keyed != 0u && !(f[1] == RL_MSG_QUERY && *len == RL_FRAME_OVERHEAD + RL_QUERY_NONCE_BODY)) {
        rl_msg tmp;
        const rl_reject r = rl_proto_decode(f, *len, &tmp);
        return r != RL_REJECT_NONE ? r : RL_REJECT_AUTH;
    }
    return RL_REJECT_NONE;
}

static rl_reject handle_frame(rl_device *d, const uint8_t *frame, size_t len)
{
    rl_msg m;
    rl_reject r = open_frame(d, &frame, &len);
    if (r == RL_REJECT_NONE) {
        r = rl_proto_decode(frame, len, &m);
    }
    if (r != RL_REJECT_NONE) {
        count_reject(d, r);
        if (r == RL_REJECT_LENGTH && len >= RL_FRAME_OVERHEAD && frame[1] == RL_MSG_CONFIGURE) {
            send_fault(d, RL_FAULT_CONFIGURE_REJECTED, rl_nan());
        }
        return r;
    }
    switch (m.type) {
    case RL_MSG_QUERY:
        r = on_query(d, &m);
        break;
    case RL_MSG_ARM:
        on_arm(d);
        break;
    case RL_MSG_CONFIGURE:
        r = on_configure(d, &m);
        break;
    case RL_MSG_COMMAND:
        r = on_command(d, &m);
        break;
    case RL_MSG_STOP:
        on_stop(d, &m);
        break;
    default: /* a device-to-host type sent to the device */
        count_reject(d, RL_REJECT_TYPE);
        return RL_REJECT_TYPE;
    }
    if (r == RL_REJECT_NONE) {
        d->counters.frames_accepted++;
        if (d->bound != 0u) {
            d->bound_rx_us = now_us(d); /* only frames acted on keep the binding (section 6.7) */
        }
    }
    return r;
}

void rl_device_rx_byte(rl_device *d, uint8_t byte)
{
    const uint8_t *frame = 0;
    size_t len = 0;
    switch (rl_cobs_stream_push(&d->rx, byte, &frame, &len)) {
    case RL_COBS_EVENT_FRAME:
        (void)handle_frame(d, frame, len);
        break;
    case RL_COBS_EVENT_BAD_CODE:
        count_reject(d, RL_REJECT_COBS);
        break;
    case RL_COBS_EVENT_OVERLONG:
        /* Longer than any frame: its length is wrong whatever its content. */
        count_reject(d, RL_REJECT_LENGTH);
        break;
    case RL_COBS_EVENT_NONE:
    default:
        break;
    }
}

void rl_device_rx_bytes(rl_device *d, const uint8_t *data, size_t len)
{
    size_t i;
    for (i = 0; i < len; ++i) {
        rl_device_rx_byte(d, data[i]);
    }
}

rl_reject rl_device_rx_frame(rl_device *d, const uint8_t *frame, size_t len)
{
    return handle_frame(d, frame, len);
}

void rl_device_rx_overflow(rl_device *d)
{
    rl_cobs_stream_resync(&d->rx);
    d->flags = (uint16_t)(d->flags | RL_STATUS_RX_ERROR);
    rl_device_raise_fault(d, (uint16_t)RL_FAULT_RX_OVERFLOW, rl_nan());
}

/*
 * Command watchdog, evaluated at each tick before the command is applied: it expires when the
 * silence since the last accepted COMMAND (or since ARM) is strictly longer than watchdog_us.
 * So a host that answers every SAMPLE within one period never trips it, even with watchdog_us
 * equal to the period, and the output goes safe at most watchdog_us + one period after the
 * last command.
 */
static void check_watchdog(rl_device *d, uint64_t now)
{
    if ((d->flags & RL_STATUS_ARMED) == 0u || now - d->last_accept_us <= d->active.watchdog_us) {
        return;
    }
    go_safe(d);
    d->flags = (uint16_t)(d->flags | RL_STATUS_WATCHDOG);
    d->counters.watchdog_trips++;
    send_fault(d, (uint16_t)RL_FAULT_WATCHDOG, rl_nan());
}

static void run_tick(rl_device *d, uint64_t now)
{
    rl_msg m;
    rl_sample *s = &m.body.sample;
    size_t i;
    int sensor_rc;

    /* 1. Apply the newest command (zero-order hold from this tick on), before sampling. */
    if ((d->flags & RL_STATUS_ARMED) != 0u && d->have_pending != 0u) {
        float v = d->pending_value;
        d->clamped = 0;
        if (v < d->active.u_min) {
            v = d->active.u_min;
            d->clamped = 1;
        } else if (v > d->active.u_max) {
            v = d->active.u_max;
            d->clamped = 1;
        }
        d->applied = v;
        d->applied_cmd_seq = d->pending_seq;
    } else {
        d->applied = d->active.safe;
        d->clamped = 0;
    }
    d->hal.write_actuator(d->hal.ctx, d->applied);

    /* 2. Sample. */
    for (i = 0; i < RL_MAX_CHANNELS; ++i) {
        s->channels[i] = rl_nan();
    }
    sensor_rc = d->hal.read_channels(d->hal.ctx, s->channels, d->config.n_channels);
    if (sensor_rc != 0) {
        rl_device_raise_fault(d, (uint16_t)RL_FAULT_SENSOR, rl_nan());
    }

    /* 3. Report. */
    m.type = RL_MSG_SAMPLE;
    s->seq = d->sample_seq++;
    s->t_us = now;
    s->status = rl_device_status(d);
    s->applied = d->applied;
    s->last_cmd_seq = d->applied_cmd_seq;
    s->n = d->config.n_channels;
    send_msg(d, &m);
    d->counters.samples_sent++;
    d->flags = (uint16_t)(d->flags & ~(RL_STATUS_RX_ERROR | RL_STATUS_OVERRUN));
}

int rl_device_bound(rl_device *d)
{
    if (d->bound != 0u && (d->flags & RL_STATUS_ARMED) == 0u &&
        now_us(d) - d->bound_rx_us > RL_RELEASE_US) {
        d->bound = 0;
        d->counters.releases++;
    }
    return d->bound;
}

void rl_device_note_foreign(rl_device *d)
{
    d->counters.foreign++;
}

int rl_device_set_key(rl_device *d, const uint8_t *key, size_t key_len, rl_nonce_fn nonce_fn,
                      void *nonce_ctx)
{
    if (nonce_fn == 0 || rl_auth_set_key(&d->auth, key, key_len) != 0) {
        return -1;
    }
    d->nonce_fn = nonce_fn;
    d->nonce_ctx = nonce_ctx;
    d->keyed = 1;
    return 0;
}

void rl_device_poll(rl_device *d)
{
    const uint64_t now = now_us(d);
    (void)rl_device_bound(d); /* releases a binding that is due */
    if (now >= d->next_tick_us) {
        const uint64_t period = d->active.period_us;
        const uint64_t missed = (now - d->next_tick_us) / period;
        if (missed > 0u) {
            d->flags = (uint16_t)(d->flags | RL_STATUS_OVERRUN);
            d->counters.ticks_missed += (uint32_t)missed;
        }
        d->next_tick_us += (missed + 1u) * period;
        check_watchdog(d, now);
        run_tick(d, now);
    }
}

uint64_t rl_device_next_deadline_us(const rl_device *d)
{
    return d->next_tick_us; /* the watchdog, too, is evaluated at ticks */
}

float rl_device_applied(const rl_device *d)
{
    return d->applied;
}

const rl_settings *rl_device_settings(const rl_device *d)
{
    return &d->active;
}

const rl_device_counters *rl_device_get_counters(const rl_device *d)
{
    return &d->counters;
}

static int settings_valid(const rl_device_config *c)
{
    rl_msg m;
    m.type = RL_MSG_CONFIGURE;
    m.body.configure.period_us = c->defaults.period_us;
    m.body.configure.watchdog_us = c->defaults.watchdog_us;
    m.body.configure.safe = c->defaults.safe;
    m.body.configure.u_min = c->defaults.u_min;
    m.body.configure.u_max = c->defaults.u_max;
    if (rl_proto_check_values(&m) != RL_REJECT_NONE) {
        return 0;
    }
    return c->min_period_us > 0u && c->min_period_us <= c->defaults.period_us &&
           c->defaults.period_us <= c->max_period_us && rl_isfinite(c->actuator_min) &&
           rl_isfinite(c->actuator_max) && c->actuator_min <= c->defaults.u_min &&
           c->defaults.u_max <= c->actuator_max;
}

rl_device_init_result rl_device_init(rl_device *d, const rl_hal *hal,
                                     const rl_device_config *config)
{
    size_t i;
    uint8_t *raw = (uint8_t *)d;

    if (hal == 0 || hal->read_channels == 0 || hal->write_actuator == 0 || hal->micros == 0 ||
        hal->write_bytes == 0 ||
        (hal->transport != RL_TRANSPORT_STREAM && hal->transport != RL_TRANSPORT_DATAGRAM)) {
        return RL_DEVICE_BAD_HAL;
    }
    if (config == 0 || config->n_channels > RL_MAX_CHANNELS || !settings_valid(config)) {
        return RL_DEVICE_BAD_CONFIG;
    }
    for (i = 0; i < sizeof *d; ++i) {
        raw[i] = 0u; /* no <string.h> needed on freestanding targets */
    }
    d->hal = *hal;
    d->config = *config;
    for (i = 0; i < RL_NAME_LEN && config->name != 0 && config->name[i] != '\0'; ++i) {
        d->name[i] = config->name[i];
    }
    d->config.name = 0; /* the copy in d->name is the one used */
    d->active = config->defaults;
    rl_cobs_stream_init(&d->rx);

    go_safe(d);
    send_hello(d);
    d->next_tick_us = now_us(d) + d->active.period_us;
    return RL_DEVICE_OK;
}
