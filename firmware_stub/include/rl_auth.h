/*
 * rl_auth.h - authenticated frames (docs/protocol.md section 14): a truncated HMAC-SHA-256 tag
 * and a frame counter on every frame, under a pre-shared key and a session made of two nonces.
 *
 *   sealed payload = version | type + 0x80 | body | counter (u32 LE) | tag (8 bytes)
 *   tag = first 8 bytes of HMAC-SHA-256(key, host nonce | device nonce | sealed payload up to
 *         and including the counter)
 *
 * The CRC of the frame covers the sealed payload. No heap; one rl_auth per link end.
 */
#ifndef RL_AUTH_H
#define RL_AUTH_H

#include "rl_common.h"
#include "rl_proto.h"
#include "rl_sha256.h"

#define RL_AUTH_FLAG 0x80u
#define RL_AUTH_TAG_LEN 8u
#define RL_AUTH_COUNTER_LEN 4u
#define RL_AUTH_TRAILER (RL_AUTH_COUNTER_LEN + RL_AUTH_TAG_LEN)
#define RL_AUTH_KEY_MIN 16u /* 128 bits */
#define RL_AUTH_KEY_MAX 64u /* one SHA-256 block */

typedef struct rl_auth {
    rl_hmac_sha256_key key;
    uint8_t have_key;
    uint8_t have_session;
    uint8_t host_nonce[RL_NONCE_LEN];
    uint8_t device_nonce[RL_NONCE_LEN];
    uint32_t tx_counter; /* last counter sent */
    uint32_t rx_counter; /* last counter accepted */
} rl_auth;

/* Absorb the key (RL_AUTH_KEY_MIN..RL_AUTH_KEY_MAX bytes). Returns 0, or -1 for a bad length. */
RL_MUST_CHECK int rl_auth_set_key(rl_auth *a, const uint8_t *key, size_t len);

/* Start a session: both counters restart at 0 (the first frame each way carries 1). */
void rl_auth_start(rl_auth *a, const uint8_t host_nonce[RL_NONCE_LEN],
                   const uint8_t device_nonce[RL_NONCE_LEN]);

/* The 8-byte tag of data (a sealed payload up to and including its counter) in this session. */
void rl_auth_tag(const rl_auth *a, const uint8_t *data, size_t len, uint8_t tag[RL_AUTH_TAG_LEN]);

/*
 * Seal a plain frame (payload + CRC, as rl_proto_encode writes it) in place: set the flag, append
 * the next counter and the tag, redo the CRC. Returns the new length, or 0 without a session or
 * when cap is too small.
 */
RL_MUST_CHECK size_t rl_auth_seal(rl_auth *a, uint8_t *frame, size_t len, size_t cap);

/*
 * Open a tagged frame: checks short, crc, version, type (the base type must be known), then the
 * tag and that the counter is above the last one accepted. On success writes the plain frame
 * (payload without counter and tag, base type, fresh CRC) to out and returns RL_REJECT_NONE.
 */
RL_MUST_CHECK rl_reject rl_auth_open(rl_auth *a, const uint8_t *frame, size_t len, uint8_t *out,
                                     size_t cap, size_t *out_len);

#endif /* RL_AUTH_H */
