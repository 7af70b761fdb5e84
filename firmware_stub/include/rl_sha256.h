/*
 * rl_sha256.h - SHA-256 (FIPS 180-4) and HMAC-SHA-256 (RFC 2104, FIPS 198-1) for authenticated
 * frames (docs/protocol.md section 14). Portable C99, no heap, no libc beyond <stddef.h> and
 * <stdint.h>; incremental, so a frame can be tagged in pieces (session nonces, then the payload)
 * without copying it.
 */
#ifndef RL_SHA256_H
#define RL_SHA256_H

#include "rl_common.h"

#define RL_SHA256_BLOCK 64u
#define RL_SHA256_DIGEST 32u

typedef struct rl_sha256 {
    uint32_t h[8];
    uint64_t total;                /* bytes absorbed so far */
    uint8_t block[RL_SHA256_BLOCK];
    size_t used;                   /* bytes waiting in block */
} rl_sha256;

void rl_sha256_init(rl_sha256 *s);
void rl_sha256_update(rl_sha256 *s, const uint8_t *data, size_t len);
void rl_sha256_final(rl_sha256 *s, uint8_t out[RL_SHA256_DIGEST]);

/*
 * HMAC with the key absorbed once: rl_hmac_sha256_init keeps the inner and outer states after
 * their key blocks, so each message costs two hash compressions less. Keys longer than one block
 * are hashed first, as RFC 2104 says.
 */
typedef struct rl_hmac_sha256_key {
    rl_sha256 inner; /* state after (key ^ ipad) */
    rl_sha256 outer; /* state after (key ^ opad) */
} rl_hmac_sha256_key;

void rl_hmac_sha256_init(rl_hmac_sha256_key *k, const uint8_t *key, size_t key_len);

/* One message: start from the key's inner state, absorb, finish; out gets out_len <= 32 bytes. */
typedef struct rl_hmac_sha256_ctx {
    rl_sha256 inner;
    const rl_hmac_sha256_key *key;
} rl_hmac_sha256_ctx;

void rl_hmac_sha256_start(rl_hmac_sha256_ctx *h, const rl_hmac_sha256_key *k);
void rl_hmac_sha256_update(rl_hmac_sha256_ctx *h, const uint8_t *data, size_t len);
void rl_hmac_sha256_finish(rl_hmac_sha256_ctx *h, uint8_t *out, size_t out_len);

/* One call: HMAC-SHA-256(key, data), the first out_len (<= 32) bytes. */
void rl_hmac_sha256(const uint8_t *key, size_t key_len, const uint8_t *data, size_t len,
                    uint8_t *out, size_t out_len);

#endif /* RL_SHA256_H */
