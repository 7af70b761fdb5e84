/*
 * rl_auth.c - sealing and opening tagged frames (docs/protocol.md section 14).
 */
#include "rl_auth.h"

#include "rl_crc.h"

static uint32_t get_u32(const uint8_t *p)
{
    return (uint32_t)p[0] | ((uint32_t)p[1] << 8) | ((uint32_t)p[2] << 16) | ((uint32_t)p[3] << 24);
}

static void put_u32(uint8_t *p, uint32_t v)
{
    p[0] = (uint8_t)v;
    p[1] = (uint8_t)(v >> 8);
    p[2] = (uint8_t)(v >> 16);
    p[3] = (uint8_t)(v >> 24);
}

int rl_auth_set_key(rl_auth *a, const uint8_t *key, size_t len)
{
    if (key == 0 || len < RL_AUTH_KEY_MIN || len > RL_AUTH_KEY_MAX) {
        return -1;
    }
    rl_hmac_sha256_init(&a->key, key, len);
    a->have_key = 1;
    a->have_session = 0;
    return 0;
}

void rl_auth_start(rl_auth *a, const uint8_t host_nonce[RL_NONCE_LEN],
                   const uint8_t device_nonce[RL_NONCE_LEN])
{
    size_t i;
    for (i = 0; i < RL_NONCE_LEN; ++i) {
        a->host_nonce[i] = host_nonce[i];
        a->device_nonce[i] = device_nonce[i];
    }
    a->tx_counter = 0;
    a->rx_counter = 0;
    a->have_session = a->have_key;
}

void rl_auth_tag(const rl_auth *a, const uint8_t *data, size_t len, uint8_t tag[RL_AUTH_TAG_LEN])
{
    rl_hmac_sha256_ctx h;
    rl_hmac_sha256_start(&h, &a->key);
    rl_hmac_sha256_update(&h, a->host_nonce, RL_NONCE_LEN);
    rl_hmac_sha256_update(&h, a->device_nonce, RL_NONCE_LEN);
    rl_hmac_sha256_update(&h, data, len);
    rl_hmac_sha256_finish(&h, tag, RL_AUTH_TAG_LEN);
}

size_t rl_auth_seal(rl_auth *a, uint8_t *frame, size_t len, size_t cap)
{
    size_t payload;
    uint16_t crc;
    if (a->have_session == 0u || len < RL_FRAME_OVERHEAD || len + RL_AUTH_TRAILER > cap ||
        len + RL_AUTH_TRAILER > RL_MAX_FRAME) {
        return 0;
    }
    payload = len - 2u;
    frame[1] = (uint8_t)(frame[1] | RL_AUTH_FLAG);
    a->tx_counter++;
    put_u32(frame + payload, a->tx_counter);
    rl_auth_tag(a, frame, payload + RL_AUTH_COUNTER_LEN, frame + payload + RL_AUTH_COUNTER_LEN);
    payload += RL_AUTH_TRAILER;
    crc = rl_crc16(frame, payload);
    frame[payload] = (uint8_t)crc;
    frame[payload + 1u] = (uint8_t)(crc >> 8);
    return payload + 2u;
}

rl_reject rl_auth_open(rl_auth *a, const uint8_t *frame, size_t len, uint8_t *out, size_t cap,
                       size_t *out_len)
{
    uint8_t tag[RL_AUTH_TAG_LEN];
    uint8_t diff = 0;
    size_t payload, plain, i;
    uint32_t counter;
    uint16_t crc;
    uint8_t base;

    if (len < RL_FRAME_OVERHEAD) {
        return RL_REJECT_SHORT;
    }
    if (rl_crc16(frame, len - 2u) != (uint16_t)(frame[len - 2u] | (frame[len - 1u] << 8))) {
        return RL_REJECT_CRC;
    }
    if (frame[0] != RL_PROTO_VERSION) {
        return RL_REJECT_VERSION;
    }
    base = (uint8_t)(frame[1] & (uint8_t)~RL_AUTH_FLAG);
    if (rl_proto_body_length(base, 0u) < 0) {
        return RL_REJECT_TYPE;
    }
    payload = len - 2u;
    if ((frame[1] & RL_AUTH_FLAG) == 0u || a->have_session == 0u || payload < 2u + RL_AUTH_TRAILER) {
        return RL_REJECT_AUTH;
    }
    rl_auth_tag(a, frame, payload - RL_AUTH_TAG_LEN, tag);
    for (i = 0; i < RL_AUTH_TAG_LEN; ++i) { /* the same time whatever the first bad byte */
        diff = (uint8_t)(diff | (tag[i] ^ frame[payload - RL_AUTH_TAG_LEN + i]));
    }
    if (diff != 0u) {
        return RL_REJECT_AUTH;
    }
    counter = get_u32(frame + payload - RL_AUTH_TRAILER);
    if (counter <= a->rx_counter) {
        return RL_REJECT_AUTH; /* a replay within the session */
    }
    plain = payload - RL_AUTH_TRAILER;
    if (plain + 2u > cap) {
        return RL_REJECT_LENGTH;
    }
    a->rx_counter = counter;
    out[0] = frame[0];
    out[1] = base;
    for (i = 2; i < plain; ++i) {
        out[i] = frame[i];
    }
    crc = rl_crc16(out, plain);
    out[plain] = (uint8_t)crc;
    out[plain + 1u] = (uint8_t)(crc >> 8);
    *out_len = plain + 2u;
    return RL_REJECT_NONE;
}
