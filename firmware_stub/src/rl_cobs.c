/*
 * rl_cobs.c - COBS encoder, strict decoder and a streaming decoder that resynchronises on 0x00.
 *
 * Encoding: the frame is cut at each 0x00 (and after every 254 non-zero bytes) into runs; each
 * run is written as a code byte (run length + 1) followed by its non-zero bytes. A code of 0xFF
 * means "254 bytes, no zero follows". After a final full run no extra code byte is written, the
 * form most implementations produce; the decoder accepts both forms.
 */
#include "rl_cobs.h"

rl_cobs_status rl_cobs_encode(const uint8_t *src, size_t len, uint8_t *dst, size_t cap,
                              size_t *out_len)
{
    size_t i;
    size_t code_idx = 0;
    size_t out = 1;
    uint8_t code = 1;

    if (cap < 1u) {
        return RL_COBS_NO_ROOM;
    }
    for (i = 0; i < len; ++i) {
        if (src[i] != 0u) {
            if (out >= cap) {
                return RL_COBS_NO_ROOM;
            }
            dst[out++] = src[i];
            ++code;
            if (code == 0xFFu) {
                dst[code_idx] = code;
                code = 1;
                if (i + 1u == len) {
                    *out_len = out; /* a full run ends the frame: no trailing code byte */
                    return RL_COBS_OK;
                }
                if (out >= cap) {
                    return RL_COBS_NO_ROOM;
                }
                code_idx = out++;
            }
        } else {
            dst[code_idx] = code;
            code = 1;
            if (out >= cap) {
                return RL_COBS_NO_ROOM;
            }
            code_idx = out++;
        }
    }
    dst[code_idx] = code;
    *out_len = out;
    return RL_COBS_OK;
}

rl_cobs_status rl_cobs_decode(const uint8_t *src, size_t len, uint8_t *dst, size_t cap,
                              size_t *out_len)
{
    size_t in = 0;
    size_t out = 0;

    if (len == 0u) {
        return RL_COBS_BAD_CODE;
    }
    while (in < len) {
        const uint8_t code = src[in++];
        size_t n;
        if (code == 0u) {
            return RL_COBS_BAD_CODE;
        }
        n = (size_t)code - 1u;
        if (n > len - in) {
            return RL_COBS_BAD_CODE;
        }
        while (n-- > 0u) {
            const uint8_t b = src[in++];
            if (b == 0u) {
                return RL_COBS_BAD_CODE;
            }
            if (out >= cap) {
                return RL_COBS_NO_ROOM;
            }
            dst[out++] = b;
        }
        if (code != 0xFFu && in < len) {
            if (out >= cap) {
                return RL_COBS_NO_ROOM;
            }
            dst[out++] = 0u;
        }
    }
    *out_len = out;
    return RL_COBS_OK;
}

void rl_cobs_stream_init(rl_cobs_stream *s)
{
    s->len = 0;
    s->overlong = 0;
    s->hunting = 1;
}

void rl_cobs_stream_resync(rl_cobs_stream *s)
{
    rl_cobs_stream_init(s);
}

rl_cobs_event rl_cobs_stream_push(rl_cobs_stream *s, uint8_t byte, const uint8_t **frame,
                                  size_t *frame_len)
{
    size_t decoded = 0;
    size_t run;

    if (byte != 0u) {
        if (s->hunting == 0u) {
            if (s->len < sizeof s->buf) {
                s->buf[s->len++] = byte;
            } else {
                s->overlong = 1;
            }
        }
        return RL_COBS_EVENT_NONE;
    }

    /* A delimiter: it ends hunting and closes the current run. */
    if (s->hunting != 0u) {
        s->hunting = 0;
        s->len = 0;
        return RL_COBS_EVENT_NONE;
    }
    run = s->len;
    s->len = 0;
    if (s->overlong != 0u) {
        s->overlong = 0;
        return RL_COBS_EVENT_OVERLONG;
    }
    if (run == 0u) {
        return RL_COBS_EVENT_NONE; /* back-to-back delimiters: idle line or resync padding */
    }
    if (rl_cobs_decode(s->buf, run, s->buf, sizeof s->buf, &decoded) != RL_COBS_OK) {
        return RL_COBS_EVENT_BAD_CODE;
    }
    *frame = s->buf;
    *frame_len = decoded;
    return RL_COBS_EVENT_FRAME;
}
