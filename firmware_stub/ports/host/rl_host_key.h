/*
 * rl_host_key.h - the host port's key file and session nonces (docs/protocol.md section 14).
 */
#ifndef RL_HOST_KEY_H
#define RL_HOST_KEY_H

#include "rl_auth.h"

/* Read a hex key (whitespace ignored, RL_AUTH_KEY_MIN..RL_AUTH_KEY_MAX bytes) from a file that only
 * its owner may read; on failure print why and how to fix it to stderr and return 0. */
int rl_host_load_key(const char *path, uint8_t *key, size_t *key_len);

/* rl_nonce_fn reading the kernel's random source; ctx is an open FILE * of /dev/urandom. */
void rl_host_urandom_nonce(void *ctx, uint8_t out[RL_NONCE_LEN]);

#endif /* RL_HOST_KEY_H */
