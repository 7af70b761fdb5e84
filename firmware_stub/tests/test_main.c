/*
 * test_main.c - runs every C test group and prints the closing summary line.
 */
#include <stdio.h>

#include "rl_test.h"

static const char *current_name = "";
static int current_failed = 0;
static int passed = 0;
static int failed = 0;

void rlt_begin(const char *name)
{
    current_name = name;
    current_failed = 0;
}

void rlt_end(void)
{
    if (current_failed != 0) {
        ++failed;
        printf("FAIL %s\n", current_name);
    } else {
        ++passed;
    }
}

void rlt_fail(const char *file, int line, const char *expr, const char *detail)
{
    current_failed = 1;
    printf("  %s:%d: [%s] check failed: %s %s\n", file, line, current_name, expr, detail);
}

void rlt_fail_u(const char *file, int line, const char *expr, unsigned long long got,
                unsigned long long want)
{
    current_failed = 1;
    printf("  %s:%d: [%s] check failed: %s (got %llu = 0x%llx, want %llu = 0x%llx)\n", file, line,
           current_name, expr, got, got, want, want);
}

void rlt_fail_f(const char *file, int line, const char *expr, double got, double want)
{
    current_failed = 1;
    printf("  %s:%d: [%s] check failed: %s (got %.9g, want %.9g)\n", file, line, current_name,
           expr, got, want);
}

uint32_t rlt_rand(uint32_t *state)
{
    /* xorshift32: small, full-period over nonzero states, good enough to pick bytes to damage. */
    uint32_t x = *state;
    x ^= x << 13;
    x ^= x >> 17;
    x ^= x << 5;
    *state = x;
    return x;
}

int rlt_summary(void)
{
    printf("C tests: %d passed, %d failed\n", passed, failed);
    return failed == 0 ? 0 : 1;
}

int main(void)
{
    run_crc_cobs_tests();
    run_proto_tests();
    run_vector_tests();
    run_device_tests();
    run_fault_injection_tests();
    run_auth_tests();
    return rlt_summary();
}
