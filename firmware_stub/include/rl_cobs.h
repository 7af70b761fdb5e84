/*
 * rl_cobs.h - COBS (Consistent Overhead Byte Stuffing) framing for byte streams.
 *
 * COBS rewrites a frame so it contains no 0x00 byte; a single 0x00 then marks the end of every
 * frame on the wire, and a receiver that lost bytes finds the next frame boundary by waiting for
 * the next 0x00. Method: 'Consistent Overhead Byte Stuffing', IEEE/ACM Transactions on
 * Networking, 1999.
 */
#ifndef RL_COBS_H
#define RL_COBS_H

#include "rl_common.h"

/* Worst-case encoded size of n input bytes, without the 0x00 delimiter (one code byte per
 * started run of 254 bytes, at least one). */
#define RL_COBS_MAX_ENCODED(n) ((size_t)(n) + ((size_t)(n) / 254u) + 1u)

typedef enum rl_cobs_status {
    RL_COBS_OK = 0,
    RL_COBS_BAD_CODE, /* a code byte points past the end, a 0x00 sits inside the run, or empty */
    RL_COBS_NO_ROOM   /* the destination buffer is too small */
} rl_cobs_status;

/*
 * Encode len bytes of src into dst (capacity cap); *out_len receives the encoded length. The
 * 0x00 delimiter is not written: the caller appends it. src and dst must not overlap.
 */
RL_MUST_CHECK rl_cobs_status rl_cobs_encode(const uint8_t *src, size_t len, uint8_t *dst,
                                            size_t cap, size_t *out_len);

/*
 * Decode one encoded run (the bytes between two delimiters, delimiters excluded) into dst.
 * Decoding in place (dst == src) is allowed: the output never overtakes the input.
 */
RL_MUST_CHECK rl_cobs_status rl_cobs_decode(const uint8_t *src, size_t len, uint8_t *dst,
                                            size_t cap, size_t *out_len);

/* Longest run the streaming decoder keeps: a maximal 256-byte frame, encoded. */
#define RL_COBS_STREAM_CAPACITY RL_COBS_MAX_ENCODED(256u)

/* What one byte fed to the streaming decoder produced. */
typedef enum rl_cobs_event {
    RL_COBS_EVENT_NONE = 0, /* byte stored, skipped while resynchronising, or an empty run */
    RL_COBS_EVENT_FRAME,    /* a delimiter closed a run that decoded cleanly */
    RL_COBS_EVENT_BAD_CODE, /* a delimiter closed a run that is not valid COBS */
    RL_COBS_EVENT_OVERLONG  /* a delimiter closed a run longer than any valid frame */
} rl_cobs_event;

/*
 * Streaming decoder: feed it the received bytes one at a time. It starts out (and, after
 * rl_cobs_stream_resync, goes back to) discarding bytes until the first 0x00, because a byte
 * stream joined midway starts inside some frame.
 */
typedef struct rl_cobs_stream {
    uint8_t buf[RL_COBS_STREAM_CAPACITY];
    size_t len;
    uint8_t hunting;  /* nonzero: discarding until the next 0x00 */
    uint8_t overlong; /* nonzero: the current run outgrew buf; it is rejected at its 0x00 */
} rl_cobs_stream;

void rl_cobs_stream_init(rl_cobs_stream *s);

/* Forget the partial run and discard bytes until the next 0x00 (call after lost bytes). */
void rl_cobs_stream_resync(rl_cobs_stream *s);

/*
 * Feed one byte. On RL_COBS_EVENT_FRAME, *frame and *frame_len describe the decoded frame; the
 * bytes stay valid until the next call.
 */
rl_cobs_event rl_cobs_stream_push(rl_cobs_stream *s, uint8_t byte, const uint8_t **frame,
                                  size_t *frame_len);

#endif /* RL_COBS_H */
