/*
 * ports/example_mcu/main.c - example rigloop device firmware for a generic Cortex-M4 board that
 * drives a small DC fan or motor through a PWM power stage and reads its speed, current and
 * supply voltage.
 *
 * How to use this file: copy it into your board project, then replace every function in the
 * "board layer" section (each marked TODO) with the register code or vendor-library call of
 * your microcontroller. Nothing else needs to change: the rigloop core (src/, include/) is
 * portable C99, uses no heap and touches no hardware.
 *
 * What the board must provide, in words:
 *   - a free-running 1 MHz 32-bit timer (the sample clock and the watchdog run on it);
 *   - a UART or USB-CDC link whose receive interrupt pushes bytes into a ring buffer, and a
 *     transmit path that does not stall the main loop (here: a ring buffer drained by the
 *     "transmit register empty" interrupt);
 *   - a PWM output for the actuator (duty in percent) and whatever sensors the rig has.
 *
 * ---------------------------------------------------------------------------------------------
 * SAFETY - read before powering a rig
 *   - Software is not a safety function. Wire a hardwired emergency stop that removes power from
 *     the power stage (not a GPIO read by this firmware) and test it before every session.
 *   - Guard every rotating part (fan blades, couplings, shafts). Keep hands, hair, cables and
 *     loose clothing out of reach while the rig is powered.
 *   - Use a current-limited bench supply, set just above the rig's rated current, for first
 *     tests; start with the load or blades removed.
 *   - Make "off" the default in hardware: a pull-down on the gate-driver enable / PWM pin keeps
 *     the stage off during reset, boot, flashing and after a crash.
 *   - Enable the microcontroller's independent hardware watchdog (a hung main loop must reset the
 *     chip, which then comes up with the output off).
 *   - Stored energy: large DC-link capacitors stay charged after power-off; a spinning rotor keeps
 *     turning. Wait, measure, and follow the stage's discharge instructions.
 *   - Anything connected to mains must be built and inspected by a qualified person according
 *     to your local electrical codes; this example assumes a low-voltage DC rig only.
 * ---------------------------------------------------------------------------------------------
 *
 * Build check (no hardware needed; this is what `make -C firmware_stub cross` runs):
 *   arm-none-eabi-gcc -mcpu=cortex-m4 -mthumb -std=c99 -Wall -Wextra -Werror -pedantic \
 *       -ffreestanding -Iinclude -c ports/example_mcu/main.c
 */
#include "rl_device.h"

/* ============================ rig configuration (edit) ====================================== */

#define RIG_NAME "bench-fan"      /* shown in HELLO, at most 16 characters */
#define RIG_FW_VERSION 0x0100u    /* 1.0 */
#define RIG_CHANNELS 3u           /* speed_rpm, current_a, supply_v */
#define RIG_PERIOD_US 1000u       /* default sample period: 1 kHz */
#define RIG_WATCHDOG_US 50000u    /* default command watchdog: 50 ms */
#define RIG_MIN_PERIOD_US 250u    /* fastest tick this loop keeps with margin: measure yours */
#define RIG_MAX_PERIOD_US 1000000u
#define RIG_DUTY_SAFE 0.0f        /* percent: fan stopped */
#define RIG_DUTY_MIN 0.0f
#define RIG_DUTY_MAX 100.0f

#define UART_BAUD 921600u
#define PWM_TOP 4199u             /* timer counts per PWM period (e.g. 84 MHz / 20 kHz - 1) */
#define ENCODER_COUNTS_PER_REV 4u /* e.g. a 2-pulse fan tachometer counted on both edges */
#define ADC_FULL_SCALE 4095.0f    /* 12-bit converter */
#define ADC_VREF_V 3.3f
#define CURRENT_A_PER_V 2.0f      /* shunt amplifier: 0.5 V per ampere */
#define SUPPLY_DIVIDER 11.0f      /* 10k:1k divider on the supply rail */
#define OVERCURRENT_A 3.0f        /* hardware fault threshold, below the supply's limit */

/* ============================ board layer (fill in: TODO) =================================== */
/*
 * Each function below stands for a few register writes. They are empty stubs so this file
 * compiles anywhere; a real port replaces each body. Keep them short: the ISR-side ones run with
 * interrupts of equal priority blocked.
 */

/* TODO: system clock, flash wait states, GPIO clocks, interrupt priorities. */
static void board_clock_init(void) {}

/* TODO: a 32-bit timer (e.g. a general-purpose timer prescaled to 1 MHz), free-running. */
static void board_timer_init(void) {}
static uint32_t board_timer_read_us(void)
{
    return 0u; /* TODO: return the timer's counter register */
}

/* TODO: UART at UART_BAUD 8N1 with the receive interrupt enabled (or USB-CDC receive callback). */
static void board_uart_init(uint32_t baud)
{
    (void)baud;
}
static uint8_t board_uart_read_data(void)
{
    return 0u; /* TODO: read the receive data register (this also clears the interrupt flag) */
}
static void board_uart_write_data(uint8_t byte)
{
    (void)byte; /* TODO: write the transmit data register */
}
static void board_uart_tx_irq_enable(int on)
{
    (void)on; /* TODO: set/clear the "transmit register empty" interrupt enable bit */
}

/* TODO: PWM timer channel, edge-aligned, PWM_TOP + 1 counts per period, output off at reset. */
static void board_pwm_init(void) {}
static void board_pwm_set_compare(uint32_t counts)
{
    (void)counts; /* TODO: write the capture/compare register */
}

/* TODO: encoder/tachometer counter (a timer in encoder or external-clock mode). */
static uint32_t board_encoder_count(void)
{
    return 0u;
}

/* TODO: ADC, single conversion per call (or read the latest value of a DMA scan). */
static uint16_t board_adc_read(unsigned channel)
{
    (void)channel;
    return 0u;
}

/* TODO: independent hardware watchdog, ~100 ms; refresh it from the main loop only. */
static void board_hw_watchdog_init(void) {}
static void board_hw_watchdog_refresh(void) {}

/* Critical sections for the ring buffers (single core: masking interrupts is enough).
 * TODO: __disable_irq() / __enable_irq() from CMSIS, or save/restore PRIMASK. */
static void board_irq_off(void) {}
static void board_irq_on(void) {}

/* ============================ interrupt-fed ring buffers ==================================== */
/*
 * Single producer, single consumer: the receive ISR only writes rx_head, the main loop only
 * writes rx_tail (and the other way round for transmit), so no lock is needed on a single-core
 * Cortex-M as long as the indices are written in one store (32-bit, aligned, volatile).
 */
#define RX_SIZE 512u /* power of two; a few frames' worth at the highest rate */
#define TX_SIZE 1024u

static volatile uint8_t rx_buf[RX_SIZE];
static volatile uint32_t rx_head;     /* written by the ISR */
static volatile uint32_t rx_tail;     /* written by the main loop */
static volatile uint32_t rx_overflow; /* set by the ISR when a byte had to be dropped */

static volatile uint8_t tx_buf[TX_SIZE];
static volatile uint32_t tx_head; /* written by the main loop */
static volatile uint32_t tx_tail; /* written by the ISR */

/* Vector-table entry names differ per vendor: rename these to match your startup file. */
void USART2_IRQHandler(void);
void rig_uart_rx_isr(void);
void rig_uart_tx_isr(void);

/* Receive interrupt: one byte arrived. Push it, or flag the loss (never block in an ISR). */
void rig_uart_rx_isr(void)
{
    const uint8_t byte = board_uart_read_data();
    const uint32_t head = rx_head;
    if (head - rx_tail >= RX_SIZE) {
        rx_overflow = 1u;
        return;
    }
    rx_buf[head % RX_SIZE] = byte;
    rx_head = head + 1u;
}

/* Transmit interrupt: the data register is empty. Send the next byte or stop the interrupt. */
void rig_uart_tx_isr(void)
{
    const uint32_t tail = tx_tail;
    if (tail == tx_head) {
        board_uart_tx_irq_enable(0);
        return;
    }
    board_uart_write_data(tx_buf[tail % TX_SIZE]);
    tx_tail = tail + 1u;
}

/* TODO: dispatch on the UART status register (RXNE -> rx, TXE -> tx) as your chip needs. */
void USART2_IRQHandler(void)
{
    rig_uart_rx_isr();
    rig_uart_tx_isr();
}

/* ============================ the rl_hal for this board ===================================== */

typedef struct rig_state {
    uint32_t last_timer;    /* for extending the 32-bit timer to 64 bits */
    uint64_t high;          /* accumulated wraps */
    uint32_t last_encoder;
    uint64_t last_encoder_us;
    float last_current_a;
    uint32_t tx_dropped;
} rig_state;

static rig_state rig;

/* 64-bit microseconds from the 32-bit timer; needs a call at least once per 71 minutes, which
 * the main loop does thousands of times per second. Main-loop context only. */
static uint64_t rig_micros(void *ctx)
{
    rig_state *r = (rig_state *)ctx;
    const uint32_t now = board_timer_read_us();
    if (now < r->last_timer) {
        r->high += (uint64_t)1u << 32;
    }
    r->last_timer = now;
    return r->high | now;
}

static float adc_volts(unsigned channel)
{
    return (float)board_adc_read(channel) * (ADC_VREF_V / ADC_FULL_SCALE);
}

/* Channels, in the order the rig configuration on the host lists them. */
static int rig_read_channels(void *ctx, float *out, size_t n)
{
    rig_state *r = (rig_state *)ctx;
    const uint64_t now = rig_micros(ctx);
    const uint32_t count = board_encoder_count();
    const uint32_t delta_counts = count - r->last_encoder; /* wraps correctly */
    const uint64_t delta_us = now - r->last_encoder_us;
    float speed_rpm = 0.0f;
    if (delta_us > 0u) {
        speed_rpm = (float)delta_counts * (60.0e6f / (float)ENCODER_COUNTS_PER_REV) /
                    (float)delta_us;
    }
    r->last_encoder = count;
    r->last_encoder_us = now;
    r->last_current_a = adc_volts(0u) * CURRENT_A_PER_V;

    if (n > 0u) {
        out[0] = speed_rpm;
    }
    if (n > 1u) {
        out[1] = r->last_current_a;
    }
    if (n > 2u) {
        out[2] = adc_volts(1u) * SUPPLY_DIVIDER;
    }
    /* Return nonzero if a sensor is known bad (e.g. an ADC reading pinned at a rail): the core
     * then stops the rig and reports FAULT code 2. */
    return 0;
}

/* Duty in percent -> compare counts. The core has clamped to [u_min, u_max] already; clamp
 * again to what the hardware can do, in case the host configured a wider range. */
static void rig_write_actuator(void *ctx, float duty_percent)
{
    float counts;
    (void)ctx;
    if (!(duty_percent > 0.0f)) { /* also catches NaN */
        duty_percent = 0.0f;
    }
    if (duty_percent > 100.0f) {
        duty_percent = 100.0f;
    }
    counts = duty_percent * ((float)(PWM_TOP + 1u) / 100.0f);
    board_pwm_set_compare((uint32_t)counts);
}

/* Queue bytes for the transmit interrupt; drop what does not fit (the host resynchronises on
 * the next 0x00), never wait. */
static void rig_write_bytes(void *ctx, const uint8_t *data, size_t len)
{
    rig_state *r = (rig_state *)ctx;
    size_t i;
    for (i = 0; i < len; ++i) {
        const uint32_t head = tx_head;
        if (head - tx_tail >= TX_SIZE) {
            r->tx_dropped += (uint32_t)(len - i);
            break;
        }
        tx_buf[head % TX_SIZE] = data[i];
        tx_head = head + 1u;
    }
    board_uart_tx_irq_enable(1);
}

/* ============================ main loop ===================================================== */

static rl_device device;

int main(void)
{
    rl_hal hal;
    rl_device_config cfg;

    board_clock_init();
    board_pwm_init(); /* first: the output must be off before anything else runs */
    board_pwm_set_compare(0u);
    board_timer_init();
    board_uart_init(UART_BAUD);
    board_hw_watchdog_init();

    hal.ctx = &rig;
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
    cfg.defaults.safe = RIG_DUTY_SAFE;
    cfg.defaults.u_min = RIG_DUTY_MIN;
    cfg.defaults.u_max = RIG_DUTY_MAX;

    rig.last_encoder = board_encoder_count();
    rig.last_encoder_us = rig_micros(&rig);

    if (rl_device_init(&device, &hal, &cfg) != RL_DEVICE_OK) {
        /* A build-time mistake in the configuration above: keep the output off and stop here.
         * The hardware watchdog is not refreshed, so the chip resets and ends up here again. */
        board_pwm_set_compare(0u);
        for (;;) {
        }
    }

    for (;;) {
        /* 1. Hand every received byte to the core. A STOP acts inside this call. */
        while (rx_tail != rx_head) {
            const uint32_t tail = rx_tail;
            const uint8_t byte = rx_buf[tail % RX_SIZE];
            rx_tail = tail + 1u;
            rl_device_rx_byte(&device, byte);
        }
        if (rx_overflow != 0u) {
            board_irq_off();
            rx_overflow = 0u;
            board_irq_on();
            rl_device_rx_overflow(&device); /* bytes were lost, maybe a STOP: go safe */
        }

        /* 2. Board-level protection. Raise the fault on every pass while the condition lasts;
         *    the core sends FAULT once and trips again if the host re-arms too early. */
        if (rig.last_current_a > OVERCURRENT_A) {
            rl_device_raise_fault(&device, (uint16_t)RL_FAULT_HARDWARE, rig.last_current_a);
        }

        /* 3. Tick (apply the newest command, sample, send SAMPLE) and command watchdog. */
        rl_device_poll(&device);

        /* 4. Prove the loop is alive. */
        board_hw_watchdog_refresh();
    }
}
