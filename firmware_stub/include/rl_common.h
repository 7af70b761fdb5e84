/*
 * rl_common.h - definitions shared by every rigloop firmware module.
 *
 * The stub is portable C99: no heap, no floating-point library calls, no I/O except through
 * the callbacks in rl_hal.h, so the same sources build for a host test runner and for a
 * bare-metal microcontroller.
 */
#ifndef RL_COMMON_H
#define RL_COMMON_H

#include <stddef.h>
#include <stdint.h>

/*
 * RL_MUST_CHECK marks calls that can fail: ignoring their result is a compile-time warning
 * (an error with -Werror) on compilers that support it, and nothing elsewhere.
 */
#if defined(__GNUC__) || defined(__clang__)
#define RL_MUST_CHECK __attribute__((warn_unused_result))
#else
#define RL_MUST_CHECK
#endif

/* The wire format assumes IEEE-754 binary32 floats; refuse to build where float differs. */
typedef char rl_assert_float_is_32_bits[(sizeof(float) == 4u) ? 1 : -1];

/* Bit pattern of a float, for byte-order-independent encoding and for finiteness tests that
 * keep working under aggressive floating-point optimisation flags. */
typedef union rl_float_bits {
    float f;
    uint32_t u;
} rl_float_bits;

/* Nonzero when x is neither infinite nor NaN (exponent field not all ones). */
static inline int rl_isfinite(float x)
{
    rl_float_bits b;
    b.f = x;
    return (b.u & 0x7F800000u) != 0x7F800000u;
}

/* A quiet NaN, built without <math.h> so freestanding builds need no libm. */
static inline float rl_nan(void)
{
    rl_float_bits b;
    b.u = 0x7FC00000u;
    return b.f;
}

#endif /* RL_COMMON_H */
