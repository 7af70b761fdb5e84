/*
 * rig_io_plant.c - the emulated board's rig: an on-chip model of a small fan in place of the
 * PWM output, the tachometer and the current sense, so the processor-in-the-loop build runs the
 * real main loop and board layer (UART interrupt, time base, wake timer) against a plant.
 *
 * The fan (single precision, no libm):
 *     tau * w' = -w + gain * u          speed w in rpm, duty u in percent
 *     i = i0 + k_i * (u / 100) * (w / w_full)   supply current in A
 * gain 30 rpm/% (3000 rpm at full duty) and tau 0.5 s are round numbers of our own choosing,
 * of the order of a small 12 V fan; the host is not told them (a model-free loop only needs
 * alpha ~ gain / tau = 60 rpm/s per %). Speed is read as a 2-pulse tachometer would give it over one
 * sample (quantised), current as a 12-bit ADC reading; a small deterministic dither stands in
 * for sensor noise.
 *
 * Integration: the held input makes the step exact, w(t+h) = w_ss + (w - w_ss) e^(-h/tau);
 * e^(-x) is the (2,2) Pade approximant (1 - x/2 + x^2/12) / (1 + x/2 + x^2/12), relative error
 * below x^5/720 (from memory), i.e. < 1e-14 for the steps of at most 2 ms used here.
 */
#include "rig_io.h"

#include "rig_config.h"
#include "rl_proto.h"

#define FAN_GAIN_RPM_PER_PCT 30.0f
#define FAN_TAU_S 0.5f
#define FAN_FULL_RPM 3000.0f
#define FAN_I0_A 0.04f
#define FAN_KI_A 0.9f
#define STEP_MAX_US 2000u
#define CURRENT_LSB_A (RIG_ADC_VREF_V / RIG_ADC_FULL_SCALE * RIG_CURRENT_A_PER_V)
#define DITHER_RPM 2.0f

typedef struct fan_model {
    float w_rpm;
    float u_pct;
    uint64_t t_us;
    uint32_t noise; /* LCG state */
    int started;
} fan_model;

static fan_model fan;

static float decay(float x)
{
    const float x2 = x * x * (1.0f / 12.0f);
    return (1.0f - 0.5f * x + x2) / (1.0f + 0.5f * x + x2);
}

static void advance(uint64_t now_us)
{
    if (!fan.started) {
        fan.t_us = now_us;
        fan.started = 1;
        return;
    }
    while (fan.t_us < now_us) {
        const uint64_t left = now_us - fan.t_us;
        const uint32_t h_us = left > STEP_MAX_US ? STEP_MAX_US : (uint32_t)left;
        const float w_ss = FAN_GAIN_RPM_PER_PCT * fan.u_pct;
        fan.w_rpm = w_ss + (fan.w_rpm - w_ss) * decay((float)h_us * (1.0e-6f / FAN_TAU_S));
        fan.t_us += h_us;
    }
}

/* Uniform in [-1, 1): a 32-bit linear congruential generator (Numerical Recipes constants). */
static float dither(void)
{
    fan.noise = fan.noise * 1664525u + 1013904223u;
    return (float)(fan.noise >> 8) * (2.0f / 16777216.0f) - 1.0f;
}

void rig_io_init(void)
{
    fan.w_rpm = 0.0f;
    fan.u_pct = 0.0f;
    fan.noise = 12345u;
    fan.started = 0;
}

void rig_io_set_output(float duty_percent, uint64_t now_us)
{
    if (!(duty_percent > 0.0f)) {
        duty_percent = 0.0f;
    }
    if (duty_percent > 100.0f) {
        duty_percent = 100.0f;
    }
    advance(now_us);
    fan.u_pct = duty_percent;
}

void rig_io_set_enable(int on)
{
    (void)on; /* no power stage on the emulated board */
}

int rig_io_read(float *speed_rpm, float *current_a, uint64_t now_us)
{
    float i;
    uint32_t counts;
    advance(now_us);
    *speed_rpm = fan.w_rpm + DITHER_RPM * dither();
    if (*speed_rpm < 0.0f) {
        *speed_rpm = 0.0f;
    }
    i = FAN_I0_A + FAN_KI_A * (fan.u_pct / 100.0f) * (fan.w_rpm / FAN_FULL_RPM);
    counts = (uint32_t)(i / CURRENT_LSB_A + 0.5f);
    *current_a = (float)counts * CURRENT_LSB_A;
    return 0;
}

uint16_t rig_io_fault(float *value)
{
    (void)value;
    return 0u; /* the emulated board has no stop contact and cannot over-current */
}

void rig_io_emergency_off(void)
{
    fan.u_pct = 0.0f;
}
