/*
 * rl_host_key.c - the host port's key file and session nonces (docs/protocol.md section 14).
 */
#define _XOPEN_SOURCE 700

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "rl_host_key.h"

static int hex_value(int c)
{
    if (c >= '0' && c <= '9') {
        return c - '0';
    }
    if (c >= 'a' && c <= 'f') {
        return c - 'a' + 10;
    }
    if (c >= 'A' && c <= 'F') {
        return c - 'A' + 10;
    }
    return -1;
}

/* Read a hex key (whitespace ignored) from a file that only its owner may read. */
int rl_host_load_key(const char *path, uint8_t *key, size_t *key_len)
{
    struct stat st;
    FILE *f;
    int c, high = -1;
    size_t n = 0;
    if (stat(path, &st) != 0) {
        fprintf(stderr, "rl_host_device: --key-file %s: %s\n", path, strerror(errno));
        return 0;
    }
    if ((st.st_mode & (S_IRWXG | S_IRWXO)) != 0) {
        fprintf(stderr,
                "rl_host_device: --key-file %s: group or others may read it (mode %03o); make it "
                "private with `chmod 600 %s`\n",
                path, (unsigned)(st.st_mode & 0777u), path);
        return 0;
    }
    f = fopen(path, "r");
    if (f == NULL) {
        fprintf(stderr, "rl_host_device: --key-file %s: %s\n", path, strerror(errno));
        return 0;
    }
    while ((c = fgetc(f)) != EOF) {
        const int v = hex_value(c);
        if (c == ' ' || c == '\n' || c == '\r' || c == '\t') {
            continue;
        }
        if (v < 0 || n >= RL_AUTH_KEY_MAX) {
            fclose(f);
            fprintf(stderr, "rl_host_device: --key-file %s: expected %u..%u bytes as hex digits "
                            "(0-9, a-f) only\n",
                    path, RL_AUTH_KEY_MIN, RL_AUTH_KEY_MAX);
            return 0;
        }
        if (high < 0) {
            high = v;
        } else {
            key[n++] = (uint8_t)((high << 4) | v);
            high = -1;
        }
    }
    fclose(f);
    if (high >= 0 || n < RL_AUTH_KEY_MIN) {
        fprintf(stderr, "rl_host_device: --key-file %s: expected %u..%u bytes as hex digits "
                        "(an even number of digits)\n",
                path, RL_AUTH_KEY_MIN, RL_AUTH_KEY_MAX);
        return 0;
    }
    *key_len = n;
    return 1;
}

/* Device nonces from the kernel's random source: they must never repeat. */
void rl_host_urandom_nonce(void *ctx, uint8_t out[RL_NONCE_LEN])
{
    FILE *f = (FILE *)ctx;
    if (fread(out, 1, RL_NONCE_LEN, f) != RL_NONCE_LEN) {
        fprintf(stderr, "rl_host_device: cannot read /dev/urandom; stopping\n");
        exit(1);
    }
}

