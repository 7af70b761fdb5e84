/*
 * rl_hal.h - the few functions a board provides to the rigloop device core.
 *
 * The core never touches hardware: it reads sensors, drives the actuator, reads a clock and
 * sends bytes only through these callbacks, so the same core runs on a microcontroller, in the
 * POSIX host port and in the unit tests (with a fake clock).
 *
 * All callbacks are called from whatever context calls rl_device_poll / rl_device_rx_*; keep
 * them short and non-blocking. The context pointer `ctx` is passed back unchanged.
 */
#ifndef RL_HAL_H
#define RL_HAL_H

#include "rl_common.h"

/* How frames travel. */
typedef enum rl_transport {
    RL_TRANSPORT_STREAM = 0,  /* byte stream (UART, USB CDC): COBS-encoded, 0x00-delimited */
    RL_TRANSPORT_DATAGRAM = 1 /* one frame per datagram (UDP): no COBS, no delimiter */
} rl_transport;

typedef struct rl_hal {
    void *ctx;
    rl_transport transport;

    /*
     * Read n channel values (in the order the rig configuration lists them) into out[0..n).
     * Return 0 on success, nonzero on a sensor fault; entries left unwritten are sent as NaN.
     */
    int (*read_channels)(void *ctx, float *out, size_t n);

    /*
     * Drive the actuator to value (already clamped by the core). Must take effect at once: a
     * STOP calls it from inside the receive path. Called at every tick and on every stop.
     */
    void (*write_actuator)(void *ctx, float value);

    /* Monotonic microseconds since an arbitrary origin; must not go backwards. */
    uint64_t (*micros)(void *ctx);

    /*
     * Send bytes to the host. Stream transport: one call per COBS-encoded frame including its
     * 0x00 delimiter. Datagram transport: one call per frame, to be sent as one datagram.
     * Should not block for long; dropping bytes when the link is full is acceptable (the host
     * resynchronises on the next delimiter), stalling the tick is not.
     */
    void (*write_bytes)(void *ctx, const uint8_t *data, size_t len);
} rl_hal;

#endif /* RL_HAL_H */
