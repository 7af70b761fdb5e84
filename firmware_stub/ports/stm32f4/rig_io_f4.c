/*
 * rig_io_f4.c - actuator and sensors of the real board (STM32F4, Nucleo-64 pin names in
 * brackets; docs/bring-up.md has the wiring):
 *
 *   PA6  [D12] TIM3_CH1 (AF2)  PWM out: 25 kHz for a 4-wire fan, or a 50 Hz servo/ESC pulse
 *   PB5  [D4]  GPIO out        power-stage enable: high only while armed
 *   PB10 [D6]  TIM2_CH3 (AF1)  tachometer input capture, 1 MHz, rising edges
 *   PA1  [A1]  ADC1_IN1        current-sense amplifier output
 *   PB0  [A3]  EXTI0           external stop contact (normally closed to GND; open = stop)
 *
 * Off by hardware default: after reset every pin is a floating input, so the external
 * pull-downs on PA6 and PB5 (10 kohm, in the wiring table) hold the power stage off during
 * reset, flashing and a crash; rig_io_init() drives both low before anything else runs.
 */
#include "rig_io.h"

#include "f4_regs.h"
#include "rig_config.h"
#include "rl_proto.h"

#define TIMER_CLOCK_HZ 84000000u
#define PIN_PWM 6u     /* PA6 */
#define PIN_ENABLE 5u  /* PB5 */
#define PIN_TACH 10u   /* PB10 */
#define PIN_STOP 0u    /* PB0 */
#define ADC_CHANNEL 1u /* PA1 */
#define ADC_SPIN_LIMIT 10000u

#if RIG_PWM_MODE == RIG_PWM_FAN
#define PWM_PSC 0u
#define PWM_TOP (TIMER_CLOCK_HZ / 25000u) /* 3360 counts per 40 us period */
#elif RIG_PWM_MODE == RIG_PWM_SERVO
#define PWM_PSC (TIMER_CLOCK_HZ / 1000000u - 1u) /* 1 us per count */
#define PWM_TOP 20000u                           /* 20 ms frame */
#else
#error "RIG_PWM_MODE must be RIG_PWM_FAN or RIG_PWM_SERVO"
#endif

/* Tachometer: written by the capture interrupt, read in the main loop with interrupts off. */
static volatile uint32_t tach_edges;
static volatile uint32_t tach_last_capture;
static uint32_t seen_edges;
static uint32_t seen_capture;
static float last_rpm;
static float last_current;
static volatile uint32_t stop_input_tripped;

void TIM2_IRQHandler(void);
void EXTI0_IRQHandler(void);

static void set_mode(uint32_t port, uint32_t pin, uint32_t mode)
{
    GPIO_MODER(port) = (GPIO_MODER(port) & ~(3u << (2u * pin))) | (mode << (2u * pin));
}

static void set_af(uint32_t port, uint32_t pin, uint32_t af)
{
    const uint32_t shift = 4u * (pin % 8u);
    GPIO_AFR(port, pin) = (GPIO_AFR(port, pin) & ~(0xFu << shift)) | (af << shift);
}

static uint32_t compare_for(float duty)
{
    if (!(duty > 0.0f)) { /* also NaN */
        duty = 0.0f;
    }
    if (duty > 100.0f) {
        duty = 100.0f;
    }
#if RIG_PWM_MODE == RIG_PWM_FAN
    return (uint32_t)(duty * ((float)PWM_TOP / 100.0f));
#else
    return RIG_SERVO_MIN_US +
           (uint32_t)(duty * ((float)(RIG_SERVO_MAX_US - RIG_SERVO_MIN_US) / 100.0f));
#endif
}

void rig_io_emergency_off(void)
{
    GPIO_BSRR(GPIOB_BASE) = 1u << (PIN_ENABLE + 16u);
    TIM_CCR1(TIM3_BASE) = compare_for(0.0f);
}

void rig_io_init(void)
{
    RCC_AHB1ENR |= RCC_AHB1ENR_GPIOA | RCC_AHB1ENR_GPIOB;
    RCC_APB1ENR |= RCC_APB1ENR_TIM2 | RCC_APB1ENR_TIM3;
    RCC_APB2ENR |= RCC_APB2ENR_ADC1 | RCC_APB2ENR_SYSCFG;
    (void)RCC_APB2ENR;

    /* Enable line: output, driven low, pull-down as well. */
    GPIO_BSRR(GPIOB_BASE) = 1u << (PIN_ENABLE + 16u);
    GPIO_PUPDR(GPIOB_BASE) = (GPIO_PUPDR(GPIOB_BASE) & ~(3u << (2u * PIN_ENABLE))) | (2u << (2u * PIN_ENABLE));
    set_mode(GPIOB_BASE, PIN_ENABLE, 1u);

    /* PWM: TIM3 channel 1, PWM mode 1, preloaded compare, starting at the off level. */
    TIM_PSC(TIM3_BASE) = PWM_PSC;
    TIM_ARR(TIM3_BASE) = PWM_TOP - 1u;
    TIM_CCR1(TIM3_BASE) = compare_for(0.0f);
    TIM_CCMR1(TIM3_BASE) = TIM_CCMR1_OC1M_PWM1 | TIM_CCMR1_OC1PE;
    TIM_CCER(TIM3_BASE) = TIM_CCER_CC1E | (RIG_PWM_INVERT ? TIM_CCER_CC1P : 0u);
    TIM_EGR(TIM3_BASE) = TIM_EGR_UG;
    TIM_CR1(TIM3_BASE) = TIM_CR1_ARPE | TIM_CR1_CEN;
    set_af(GPIOA_BASE, PIN_PWM, 2u);
    set_mode(GPIOA_BASE, PIN_PWM, 2u);

    /* Tachometer: TIM2 channel 3 captures rising edges at 1 MHz into a 32-bit counter. The open
     * collector needs a pull-up: internal here, an external 10 kohm to 3.3 V is better. */
    GPIO_PUPDR(GPIOB_BASE) = (GPIO_PUPDR(GPIOB_BASE) & ~(3u << (2u * PIN_TACH))) | (1u << (2u * PIN_TACH));
    set_af(GPIOB_BASE, PIN_TACH, 1u);
    set_mode(GPIOB_BASE, PIN_TACH, 2u);
    TIM_PSC(TIM2_BASE) = TIMER_CLOCK_HZ / 1000000u - 1u;
    TIM_ARR(TIM2_BASE) = 0xFFFFFFFFu;
    TIM_CCMR2(TIM2_BASE) = TIM_CCMR2_CC3S_TI3 | (RIG_TACH_FILTER << TIM_CCMR2_IC3F_SHIFT);
    TIM_CCER(TIM2_BASE) = TIM_CCER_CC3E; /* rising edge */
    TIM_EGR(TIM2_BASE) = TIM_EGR_UG;
    TIM_SR(TIM2_BASE) = 0u;
    TIM_DIER(TIM2_BASE) = TIM_DIER_CC3IE;
    TIM_CR1(TIM2_BASE) = TIM_CR1_CEN;
    NVIC_IPR_BYTE(IRQ_TIM2) = 2u << 4;
    NVIC_ISER(IRQ_TIM2) = 1u << (IRQ_TIM2 % 32u);

    /* Current sense: PA1 analog, ADC1 channel 1, 84-cycle sample time, software start. */
    set_mode(GPIOA_BASE, 1u, 3u);
    ADC_CCR = ADC_CCR_ADCPRE_DIV4; /* 84 MHz / 4 = 21 MHz ADC clock (F4 maximum 36 MHz, from memory) */
    ADC_SMPR2 = 4u << (3u * ADC_CHANNEL);
    ADC_SQR1 = 0u; /* one conversion */
    ADC_SQR3 = ADC_CHANNEL;
    ADC_CR2 = ADC_CR2_ADON;

    /* Stop contact: PB0 with pull-up; contact open (or wire cut) -> high -> EXTI0, highest
     * priority: outputs off inside the interrupt, FAULT from the main loop. */
    GPIO_PUPDR(GPIOB_BASE) = (GPIO_PUPDR(GPIOB_BASE) & ~(3u << (2u * PIN_STOP))) | (1u << (2u * PIN_STOP));
    set_mode(GPIOB_BASE, PIN_STOP, 0u);
    SYSCFG_EXTICR1 = (SYSCFG_EXTICR1 & ~0xFu) | 1u; /* EXTI0 <- port B */
    EXTI_RTSR |= 1u << PIN_STOP;
    EXTI_IMR |= 1u << PIN_STOP;
    NVIC_IPR_BYTE(IRQ_EXTI0) = 0u;
    NVIC_ISER(IRQ_EXTI0) = 1u << (IRQ_EXTI0 % 32u);
}

void TIM2_IRQHandler(void)
{
    if ((TIM_SR(TIM2_BASE) & TIM_SR_CC3IF) != 0u) {
        tach_last_capture = TIM_CCR3(TIM2_BASE); /* reading CCR3 clears CC3IF */
        tach_edges = tach_edges + 1u;
    }
    TIM_SR(TIM2_BASE) = 0u;
}

void EXTI0_IRQHandler(void)
{
    EXTI_PR = 1u << PIN_STOP;
    rig_io_emergency_off();
    stop_input_tripped = 1u;
}

void rig_io_set_output(float duty_percent, uint64_t now_us)
{
    (void)now_us;
    if (stop_input_tripped != 0u) {
        duty_percent = 0.0f; /* the contact is open: nothing but off until the main loop has reported it */
    }
    TIM_CCR1(TIM3_BASE) = compare_for(duty_percent);
}

void rig_io_set_enable(int on)
{
    if (on && stop_input_tripped == 0u) {
        GPIO_BSRR(GPIOB_BASE) = 1u << PIN_ENABLE;
    } else {
        GPIO_BSRR(GPIOB_BASE) = 1u << (PIN_ENABLE + 16u);
    }
}

static int read_current(float *amps)
{
    uint32_t spins;
    ADC_SR = 0u;
    ADC_CR2 = ADC_CR2_ADON | ADC_CR2_SWSTART;
    for (spins = 0; (ADC_SR & ADC_SR_EOC) == 0u; ++spins) {
        if (spins > ADC_SPIN_LIMIT) {
            return 1;
        }
    }
    *amps = ((float)(ADC_DR & 0xFFFu) * (RIG_ADC_VREF_V / RIG_ADC_FULL_SCALE) - RIG_CURRENT_OFFSET_V) *
            RIG_CURRENT_A_PER_V;
    return 0;
}

int rig_io_read(float *speed_rpm, float *current_a, uint64_t now_us)
{
    (void)now_us; /* the tachometer has its own capture clock */
    uint32_t edges, capture;
    __asm__ volatile("cpsid i" ::: "memory");
    edges = tach_edges;
    capture = tach_last_capture;
    __asm__ volatile("cpsie i" ::: "memory");

    if (edges != seen_edges) {
        /* Mean over every whole tach period since the last sample: exact, and no division by a
         * single jittery period. */
        const uint32_t span_us = capture - seen_capture;
        if (edges - seen_edges > 0u && span_us > 0u && seen_edges != 0u) {
            last_rpm = (float)(edges - seen_edges) * (60.0e6f / (float)RIG_TACH_PULSES_PER_REV) / (float)span_us;
        }
        seen_edges = edges;
        seen_capture = capture;
    } else if (TIM_CNT(TIM2_BASE) - capture > RIG_TACH_TIMEOUT_US) {
        last_rpm = 0.0f; /* no edge for the timeout: stopped (or slower than we can see) */
    }
    *speed_rpm = last_rpm;
    if (read_current(&last_current) != 0) {
        return 1;
    }
    *current_a = last_current;
    return 0;
}

uint16_t rig_io_fault(float *value)
{
    if ((GPIO_IDR(GPIOB_BASE) & (1u << PIN_STOP)) != 0u || stop_input_tripped != 0u) {
        /* Latched until the contact is closed again and the main loop has reported it. */
        stop_input_tripped = (GPIO_IDR(GPIOB_BASE) & (1u << PIN_STOP)) != 0u;
        *value = 1.0f;
        return (uint16_t)RIG_FAULT_STOP_INPUT;
    }
    if (last_current > RIG_OVERCURRENT_A) {
        *value = last_current;
        return (uint16_t)RL_FAULT_HARDWARE;
    }
    return 0u;
}
