/*
 * board.h - the board layer of the STM32F4 port: clocks, the free-running microsecond counter,
 * the wake-up timer, the interrupt-fed UART rings and the independent hardware watchdog.
 *
 * It moves bytes and reads time; it never looks inside a frame (the rigloop core does that), and
 * the core never touches a register (it calls back through rl_hal, filled in main.c).
 * The emulated build (RIG_EMULATED=1) is this same file with two constants changed; see
 * board_f4.c.
 */
#ifndef BOARD_H
#define BOARD_H

#include <stddef.h>
#include <stdint.h>

/* Clocks, time base, wake timer, UART and interrupt priorities. Outputs are set up before this
 * by rig_io_init, so they are off before anything else runs. */
void board_init(void);

/* The free-running 1 MHz counter (TIM5, 32 bits: wraps every 71.6 minutes). */
uint32_t board_time_us(void);

/*
 * Sleep (WFI) until an interrupt: a received byte, the fault input, or the wake timer armed for
 * `deadline_us` on the board_time_us scale. Returns at once if received bytes are waiting or the
 * deadline has passed. Interrupts only wake the main loop; no work is done in them beyond moving
 * bytes, so no tick is ever counted (and lost) in an interrupt.
 */
void board_sleep_until(uint32_t deadline_us);

/* Take up to cap received bytes from the receive ring; returns how many. Main loop only. */
size_t board_uart_read(uint8_t *buf, size_t cap);

/* Nonzero once if received bytes were lost (ring full or UART overrun) since the last call. */
int board_uart_take_overflow(void);

/* Queue bytes for the transmit interrupt; returns how many fitted (the rest are dropped: the
 * host resynchronises on the next 0x00, and a full ring must never stall the tick). */
size_t board_uart_write(const uint8_t *data, size_t len);

/* Independent hardware watchdog: start it (it cannot be stopped again) and refresh it. */
void board_watchdog_start(void);
void board_watchdog_refresh(void);

/* Nonzero if the last reset came from the independent watchdog (flag cleared by this call). */
int board_reset_was_watchdog(void);

#endif /* BOARD_H */
