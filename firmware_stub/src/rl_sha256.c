/*
 * rl_sha256.c - SHA-256 after FIPS 180-4 section 6.2 (constants: section 4.2.2, initial hash:
 * section 5.3.3) and HMAC after RFC 2104 section 2. Written for clarity and small code: one
 * compression function, a 64-word schedule on the stack (256 bytes), no tables but K.
 */
#include "rl_sha256.h"

static const uint32_t K[64] = {
    0x428a2f98u, 0x71374491u, 0xb5c0fbcfu, 0xe9b5dba5u, 0x3956c25bu, 0x59f111f1u, 0x923f82a4u,
    0xab1c5ed5u, 0xd807aa98u, 0x12835b01u, 0x243185beu, 0x550c7dc3u, 0x72be5d74u, 0x80deb1feu,
    0x9bdc06a7u, 0xc19bf174u, 0xe49b69c1u, 0xefbe4786u, 0x0fc19dc6u, 0x240ca1ccu, 0x2de92c6fu,
    0x4a7484aau, 0x5cb0a9dcu, 0x76f988dau, 0x983e5152u, 0xa831c66du, 0xb00327c8u, 0xbf597fc7u,
    0xc6e00bf3u, 0xd5a79147u, 0x06ca6351u, 0x14292967u, 0x27b70a85u, 0x2e1b2138u, 0x4d2c6dfcu,
    0x53380d13u, 0x650a7354u, 0x766a0abbu, 0x81c2c92eu, 0x92722c85u, 0xa2bfe8a1u, 0xa81a664bu,
    0xc24b8b70u, 0xc76c51a3u, 0xd192e819u, 0xd6990624u, 0xf40e3585u, 0x106aa070u, 0x19a4c116u,
    0x1e376c08u, 0x2748774cu, 0x34b0bcb5u, 0x391c0cb3u, 0x4ed8aa4au, 0x5b9cca4fu, 0x682e6ff3u,
    0x748f82eeu, 0x78a5636fu, 0x84c87814u, 0x8cc70208u, 0x90befffau, 0xa4506cebu, 0xbef9a3f7u,
    0xc67178f2u};

static uint32_t rotr(uint32_t x, unsigned n)
{
    return (x >> n) | (x << (32u - n));
}

static void compress(uint32_t h[8], const uint8_t block[RL_SHA256_BLOCK])
{
    uint32_t w[64];
    uint32_t a, b, c, d, e, f, g, hh;
    unsigned t;
    for (t = 0; t < 16u; ++t) {
        w[t] = ((uint32_t)block[4u * t] << 24) | ((uint32_t)block[4u * t + 1u] << 16) |
               ((uint32_t)block[4u * t + 2u] << 8) | (uint32_t)block[4u * t + 3u];
    }
    for (t = 16; t < 64u; ++t) {
        const uint32_t s0 = rotr(w[t - 15u], 7) ^ rotr(w[t - 15u], 18) ^ (w[t - 15u] >> 3);
        const uint32_t s1 = rotr(w[t - 2u], 17) ^ rotr(w[t - 2u], 19) ^ (w[t - 2u] >> 10);
        w[t] = w[t - 16u] + s0 + w[t - 7u] + s1;
    }
    a = h[0];
    b = h[1];
    c = h[2];
    d = h[3];
    e = h[4];
    f = h[5];
    g = h[6];
    hh = h[7];
    for (t = 0; t < 64u; ++t) {
        const uint32_t t1 = hh + (rotr(e, 6) ^ rotr(e, 11) ^ rotr(e, 25)) + ((e & f) ^ (~e & g)) +
                            K[t] + w[t];
        const uint32_t t2 = (rotr(a, 2) ^ rotr(a, 13) ^ rotr(a, 22)) + ((a & b) ^ (a & c) ^ (b & c));
        hh = g;
        g = f;
        f = e;
        e = d + t1;
        d = c;
        c = b;
        b = a;
        a = t1 + t2;
    }
    h[0] += a;
    h[1] += b;
    h[2] += c;
    h[3] += d;
    h[4] += e;
    h[5] += f;
    h[6] += g;
    h[7] += hh;
}

void rl_sha256_init(rl_sha256 *s)
{
    static const uint32_t h0[8] = {0x6a09e667u, 0xbb67ae85u, 0x3c6ef372u, 0xa54ff53au,
                                   0x510e527fu, 0x9b05688cu, 0x1f83d9abu, 0x5be0cd19u};
    unsigned i;
    for (i = 0; i < 8u; ++i) {
        s->h[i] = h0[i];
    }
    s->total = 0;
    s->used = 0;
}

void rl_sha256_update(rl_sha256 *s, const uint8_t *data, size_t len)
{
    size_t i;
    s->total += len;
    for (i = 0; i < len; ++i) {
        s->block[s->used++] = data[i];
        if (s->used == RL_SHA256_BLOCK) {
            compress(s->h, s->block);
            s->used = 0;
        }
    }
}

void rl_sha256_final(rl_sha256 *s, uint8_t out[RL_SHA256_DIGEST])
{
    const uint64_t bits = s->total * 8u;
    unsigned i;
    s->block[s->used++] = 0x80u;
    if (s->used > RL_SHA256_BLOCK - 8u) {
        while (s->used < RL_SHA256_BLOCK) {
            s->block[s->used++] = 0u;
        }
        compress(s->h, s->block);
        s->used = 0;
    }
    while (s->used < RL_SHA256_BLOCK - 8u) {
        s->block[s->used++] = 0u;
    }
    for (i = 0; i < 8u; ++i) {
        s->block[RL_SHA256_BLOCK - 1u - i] = (uint8_t)(bits >> (8u * i));
    }
    compress(s->h, s->block);
    for (i = 0; i < 8u; ++i) {
        out[4u * i] = (uint8_t)(s->h[i] >> 24);
        out[4u * i + 1u] = (uint8_t)(s->h[i] >> 16);
        out[4u * i + 2u] = (uint8_t)(s->h[i] >> 8);
        out[4u * i + 3u] = (uint8_t)s->h[i];
    }
}

void rl_hmac_sha256_init(rl_hmac_sha256_key *k, const uint8_t *key, size_t key_len)
{
    uint8_t block[RL_SHA256_BLOCK];
    size_t i;
    for (i = 0; i < RL_SHA256_BLOCK; ++i) {
        block[i] = 0u;
    }
    if (key_len > RL_SHA256_BLOCK) {
        rl_sha256 s;
        rl_sha256_init(&s);
        rl_sha256_update(&s, key, key_len);
        rl_sha256_final(&s, block);
    } else {
        for (i = 0; i < key_len; ++i) {
            block[i] = key[i];
        }
    }
    for (i = 0; i < RL_SHA256_BLOCK; ++i) {
        block[i] ^= 0x36u;
    }
    rl_sha256_init(&k->inner);
    rl_sha256_update(&k->inner, block, RL_SHA256_BLOCK);
    for (i = 0; i < RL_SHA256_BLOCK; ++i) {
        block[i] ^= (uint8_t)(0x36u ^ 0x5cu);
    }
    rl_sha256_init(&k->outer);
    rl_sha256_update(&k->outer, block, RL_SHA256_BLOCK);
    for (i = 0; i < RL_SHA256_BLOCK; ++i) {
        block[i] = 0u; /* leave no copy of the key on the stack */
    }
}

void rl_hmac_sha256_start(rl_hmac_sha256_ctx *h, const rl_hmac_sha256_key *k)
{
    h->inner = k->inner;
    h->key = k;
}

void rl_hmac_sha256_update(rl_hmac_sha256_ctx *h, const uint8_t *data, size_t len)
{
    rl_sha256_update(&h->inner, data, len);
}

void rl_hmac_sha256_finish(rl_hmac_sha256_ctx *h, uint8_t *out, size_t out_len)
{
    uint8_t digest[RL_SHA256_DIGEST];
    rl_sha256 outer = h->key->outer;
    size_t i;
    rl_sha256_final(&h->inner, digest);
    rl_sha256_update(&outer, digest, RL_SHA256_DIGEST);
    rl_sha256_final(&outer, digest);
    for (i = 0; i < out_len && i < RL_SHA256_DIGEST; ++i) {
        out[i] = digest[i];
    }
}

void rl_hmac_sha256(const uint8_t *key, size_t key_len, const uint8_t *data, size_t len,
                    uint8_t *out, size_t out_len)
{
    rl_hmac_sha256_key k;
    rl_hmac_sha256_ctx h;
    rl_hmac_sha256_init(&k, key, key_len);
    rl_hmac_sha256_start(&h, &k);
    rl_hmac_sha256_update(&h, data, len);
    rl_hmac_sha256_finish(&h, out, out_len);
}
