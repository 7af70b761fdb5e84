/*
 * rl_test.h - a minimal test harness for the firmware stub (no dependencies beyond libc).
 *
 * A test case is everything between rlt_begin and rlt_end; it fails if any CHECK in it failed.
 * The runner prints one line per failed check and a closing line "C tests: N passed, M failed".
 */
#ifndef RL_TEST_H
#define RL_TEST_H

#include <stdint.h>

void rlt_begin(const char *name);
void rlt_end(void);
void rlt_fail(const char *file, int line, const char *expr, const char *detail);
void rlt_fail_u(const char *file, int line, const char *expr, unsigned long long got,
                unsigned long long want);
void rlt_fail_f(const char *file, int line, const char *expr, double got, double want);
int rlt_summary(void);

/* Pseudo-random numbers for fault injection: a fixed-seed generator, so runs repeat exactly. */
uint32_t rlt_rand(uint32_t *state);

#define CHECK(cond)                                                                            \
    do {                                                                                       \
        if (!(cond)) {                                                                         \
            rlt_fail(__FILE__, __LINE__, #cond, "");                                           \
        }                                                                                      \
    } while (0)

#define CHECK_MSG(cond, detail)                                                                \
    do {                                                                                       \
        if (!(cond)) {                                                                         \
            rlt_fail(__FILE__, __LINE__, #cond, (detail));                                     \
        }                                                                                      \
    } while (0)

#define CHECK_EQ_U(got, want)                                                                  \
    do {                                                                                       \
        const unsigned long long rlt_g = (unsigned long long)(got);                            \
        const unsigned long long rlt_w = (unsigned long long)(want);                           \
        if (rlt_g != rlt_w) {                                                                  \
            rlt_fail_u(__FILE__, __LINE__, #got " == " #want, rlt_g, rlt_w);                   \
        }                                                                                      \
    } while (0)

/* Exact float equality (the device copies values; nothing is recomputed). */
#define CHECK_EQ_F(got, want)                                                                  \
    do {                                                                                       \
        const float rlt_g = (got);                                                             \
        const float rlt_w = (want);                                                            \
        if (!(rlt_g == rlt_w)) {                                                               \
            rlt_fail_f(__FILE__, __LINE__, #got " == " #want, (double)rlt_g, (double)rlt_w);   \
        }                                                                                      \
    } while (0)

#define RUN(fn)                                                                                \
    do {                                                                                       \
        rlt_begin(#fn);                                                                        \
        fn();                                                                                  \
        rlt_end();                                                                             \
    } while (0)

/* Test groups, one per file. */
void run_crc_cobs_tests(void);
void run_proto_tests(void);
void run_vector_tests(void);
void run_device_tests(void);
void run_fault_injection_tests(void);
void run_auth_tests(void);

#endif /* RL_TEST_H */
