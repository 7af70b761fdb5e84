/*
 * rig_config.h - the numbers a bench user edits for their rig. Everything hardware-specific
 * that is not a pin (pins are in docs/bring-up.md and rig_io_f4.c) lives here.
 *
 * Defaults are for a 4-wire PC fan on a Nucleo-64 board (STM32F401RE/F411RE/F446RE) and say
 * where their numbers come from.
 */
#ifndef RIG_CONFIG_H
#define RIG_CONFIG_H

#ifndef RIG_EMULATED
#define RIG_EMULATED 0 /* 1: the processor-in-the-loop build for QEMU's netduinoplus2 */
#endif

/* ---- identity and protocol defaults ------------------------------------------------------- */
#if RIG_EMULATED
#define RIG_NAME "f4-pil-fan"
#else
#define RIG_NAME "f4-bench"
#endif
#define RIG_FW_VERSION 0x0100u /* 1.0 */
#define RIG_CHANNELS 2u        /* speed_rpm, current_a - in this order */
#define RIG_PERIOD_US 5000u    /* 200 Hz until the host's CONFIGURE */
#define RIG_WATCHDOG_US 300000u /* until CONFIGURE; the host sets its own */
#define RIG_MIN_PERIOD_US 500u /* 2 kHz: a tick is a few thousand cycles (tens of us at 84 MHz); measure yours */
#define RIG_MAX_PERIOD_US 1000000u

/* ---- actuator: duty in percent, 0 = off ----------------------------------------------------- */
#define RIG_PWM_FAN 0   /* 25 kHz PWM for a 4-wire PC fan (Intel 4-wire fan specification: 25 kHz nominal; from memory) */
#define RIG_PWM_SERVO 1 /* 50 Hz hobby servo/ESC pulse: 1000 us (0 %) .. 2000 us (100 %) (common practice) */
#ifndef RIG_PWM_MODE
#define RIG_PWM_MODE RIG_PWM_FAN
#endif
#ifndef RIG_PWM_INVERT
#define RIG_PWM_INVERT 0 /* 1 when the pin drives the fan's PWM wire through an inverting transistor */
#endif
#define RIG_SERVO_MIN_US 1000u
#define RIG_SERVO_MAX_US 2000u

/* ---- tachometer ---------------------------------------------------------------------------- */
#ifndef RIG_TACH_PULSES_PER_REV
#define RIG_TACH_PULSES_PER_REV 2u /* PC fans: two open-collector pulses per revolution (4-wire fan spec; from memory) */
#endif
#define RIG_TACH_TIMEOUT_US 500000u /* no edge for 0.5 s -> speed 0 (below 60 rpm at 2 pulses/rev) */
#define RIG_TACH_FILTER 0xFu        /* input filter: fDTS/32, 8 samples (~3 us at 84 MHz): rejects ringing */

/* ---- current sense (ADC1 channel 1, PA1) --------------------------------------------------- */
#define RIG_ADC_VREF_V 3.3f
#define RIG_ADC_FULL_SCALE 4095.0f
#define RIG_CURRENT_OFFSET_V 0.0f  /* sensor output at 0 A (0 V for a low-side shunt amplifier) */
#define RIG_CURRENT_A_PER_V 2.0f   /* e.g. 0.05 ohm shunt x gain 10 = 0.5 V/A */
#define RIG_OVERCURRENT_A 2.5f     /* FAULT above this: set below the supply's current limit */

/* ---- serial link ---------------------------------------------------------------------------- */
#define RIG_UART_BAUD 460800u /* 0.16 % from 42 MHz; carries 1 kHz of 2-channel SAMPLEs (~37 kB/s) */

/* ---- independent hardware watchdog ---------------------------------------------------------- */
#define RIG_IWDG_PRESCALER_CODE 3u /* LSI / 32: ~1 kHz (LSI is 17..47 kHz over parts and temperature: F4 datasheets, from memory) */
#define RIG_IWDG_RELOAD 100u       /* ~100 ms nominal, 68..188 ms over the LSI tolerance */

#endif /* RIG_CONFIG_H */
