/*
 * main.c - rigloop device firmware for STM32F4 boards: the rl_hal over the board layer
 * (board.h) and the rig's actuator and sensors (rig_io.h), and the main loop.
 *
 * The same file builds the flashable firmware (rig_io_f4.c) and the processor-in-the-loop
 * image for QEMU (RIG_EMULATED=1, rig_io_plant.c). It moves bytes between the UART rings and
 * the rigloop core and never looks inside a frame; the core never touches a register.
 *
 * SAFETY - software is not a safety function. The rig needs a hardwired emergency stop that
 * removes power from the power stage, guards over rotating parts, pull-downs that keep the
 * PWM and enable lines off during reset, and a current-limited supply for first tests;
 * anything on mains is for a qualified person under local codes. See docs/bring-up.md.
 */
#include "board.h"
#include "rig_config.h"
#include "rig_io.h"
#include "rl_device.h"

typedef struct rig_clock {
    uint32_t last;  /* last 32-bit reading */
    uint64_t high;  /* wraps seen, in units of 2^32 us */
} rig_clock;

static rig_clock clock64;
static rl_device device;

/* 64-bit microseconds from the 32-bit counter. Main loop only; it runs far more often than
 * once per 71 minutes, so no wrap is missed. */
static uint64_t rig_micros(void *ctx)
{
    rig_clock *c = (rig_clock *)ctx;
    const uint32_t now = board_time_us();
    if (now < c->last) {
        c->high += (uint64_t)1u << 32;
    }
    c->last = now;
    return c->high | now;
}

static int rig_read_channels(void *ctx, float *out, size_t n)
{
    float speed = 0.0f, current = 0.0f;
    const int rc = rig_io_read(&speed, &current, rig_micros(ctx));
    if (n > 0u) {
        out[0] = speed;
    }
    if (n > 1u) {
        out[1] = current;
    }
    return rc;
}

static void rig_write_actuator(void *ctx, float value)
{
    rig_io_set_output(value, rig_micros(ctx));
}

static void rig_write_bytes(void *ctx, const uint8_t *data, size_t len)
{
    (void)ctx;
    (void)board_uart_write(data, len); /* a full ring drops the rest: the host resynchronises */
}

void HardFault_Handler(void);
void HardFault_Handler(void)
{
    rig_io_emergency_off();
    for (;;) {
        /* The hardware watchdog resets the chip, which comes up with its outputs off. */
    }
}

/* Armed and nothing latched: the only state in which the power stage may be enabled. */
static int output_may_run(uint16_t status)
{
    const uint16_t latched = (uint16_t)(RL_STATUS_STOP_LATCHED | RL_STATUS_WATCHDOG | RL_STATUS_FAULT);
    return (status & RL_STATUS_ARMED) != 0u && (status & latched) == 0u;
}

int main(void)
{
    rl_hal hal;
    rl_device_config cfg;
    uint8_t chunk[64];

    rig_io_init(); /* outputs off before anything else */
    board_init();
    clock64.last = board_time_us();

    hal.ctx = &clock64;
    hal.transport = RL_TRANSPORT_STREAM;
    hal.read_channels = rig_read_channels;
    hal.write_actuator = rig_write_actuator;
    hal.micros = rig_micros;
    hal.write_bytes = rig_write_bytes;

    cfg.name = RIG_NAME;
    cfg.fw_version = RIG_FW_VERSION;
    cfg.n_channels = RIG_CHANNELS;
    cfg.min_period_us = RIG_MIN_PERIOD_US;
    cfg.max_period_us = RIG_MAX_PERIOD_US;
    cfg.actuator_min = 0.0f;   /* duty cannot go below 0 % ... */
    cfg.actuator_max = 100.0f; /* ... or above 100 %: a CONFIGURE asking for more is refused */
    cfg.defaults.period_us = RIG_PERIOD_US;
    cfg.defaults.watchdog_us = RIG_WATCHDOG_US;
    cfg.defaults.safe = 0.0f;
    cfg.defaults.u_min = 0.0f;
    cfg.defaults.u_max = 100.0f;

    if (rl_device_init(&device, &hal, &cfg) != RL_DEVICE_OK) {
        rig_io_emergency_off(); /* a mistake in rig_config.h: stay off */
        for (;;) {
        }
    }
    if (board_reset_was_watchdog()) {
        /* The last run hung and the hardware watchdog reset the chip: tell the host. */
        rl_device_raise_fault(&device, (uint16_t)RL_FAULT_HARDWARE, rl_nan());
    }
    board_watchdog_start();

    for (;;) {
        size_t n;
        float fault_value = rl_nan();
        uint16_t fault;

        /* 1. Every received byte to the core; a STOP acts inside this call. */
        while ((n = board_uart_read(chunk, sizeof chunk)) > 0u) {
            rl_device_rx_bytes(&device, chunk, n);
        }
        if (board_uart_take_overflow()) {
            rl_device_rx_overflow(&device); /* bytes lost, maybe a STOP: go safe */
        }

        /* 2. Board-level protection, raised on every pass while it lasts (FAULT is sent once). */
        fault = rig_io_fault(&fault_value);
        if (fault != 0u) {
            rl_device_raise_fault(&device, fault, fault_value);
        }

        /* 3. The tick (watchdog, apply, sample, SAMPLE) when due. */
        rl_device_poll(&device);
        rig_io_set_enable(output_may_run(rl_device_status(&device)));

        /* 4. Alive: refresh the hardware watchdog, then sleep until the next tick or a byte. */
        board_watchdog_refresh();
        board_sleep_until((uint32_t)rl_device_next_deadline_us(&device));
    }
}
