/*
 * rig_io.h - the rig's actuator and sensors, as the main loop sees them.
 *
 * Two implementations with the same interface:
 *   rig_io_f4.c     the real board: PWM (fan 25 kHz or servo/ESC pulse), power-stage enable,
 *                   tachometer input capture, ADC current sense, external stop contact;
 *   rig_io_plant.c  the emulated board: an on-chip fan model in place of all of these, so the
 *                   processor-in-the-loop build runs the same main loop and board layer.
 */
#ifndef RIG_IO_H
#define RIG_IO_H

#include <stdint.h>

/* Board-specific FAULT code for the external stop contact (docs/protocol.md: >= 0x8000). */
#define RIG_FAULT_STOP_INPUT 0x8001u

/* Outputs to their off state. First thing after reset, before clocks are even raised. */
void rig_io_init(void);

/* Drive the actuator (duty in percent, already clamped by the core; clamped again here). */
void rig_io_set_output(float duty_percent, uint64_t now_us);

/* Power-stage enable line: on only while the device is armed and no fault is latched. */
void rig_io_set_enable(int on);

/* Read speed_rpm and current_a. Returns nonzero on a sensor fault (ADC did not convert). */
int rig_io_read(float *speed_rpm, float *current_a, uint64_t now_us);

/*
 * A fault condition that must stop the rig: returns 0 if none, else a FAULT code
 * (RIG_FAULT_STOP_INPUT or RL_FAULT_HARDWARE for over-current) and the offending value.
 * Called on every main-loop pass while the condition lasts.
 */
uint16_t rig_io_fault(float *value);

/* Everything off at once from any context (hard fault, fault input interrupt). */
void rig_io_emergency_off(void);

#endif /* RIG_IO_H */
