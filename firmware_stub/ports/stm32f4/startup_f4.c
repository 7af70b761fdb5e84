/*
 * startup_f4.c - reset handler and vector table for STM32F4 (Cortex-M4F), in C.
 *
 * Reset: copy initialised data from flash, clear .bss, allow the FPU (CP10/CP11 full access),
 * then main(). Every interrupt this port does not use goes to a handler that drives the outputs
 * off and waits for the hardware watchdog. Also the two memory routines GCC may call for
 * structure copies, since the build links no C library.
 */
#include <stddef.h>
#include <stdint.h>

#include "f4_regs.h"
#include "rig_io.h"

extern uint32_t _sidata, _sdata, _edata, _sbss, _ebss, _estack;
int main(void);

void Reset_Handler(void);
void Default_Handler(void);
void HardFault_Handler(void);
void USART2_IRQHandler(void);
void SysTick_Handler(void);
void TIM2_IRQHandler(void) __attribute__((weak, alias("Default_Handler")));
void EXTI0_IRQHandler(void) __attribute__((weak, alias("Default_Handler")));
void *memcpy(void *dst, const void *src, size_t n);
void *memset(void *dst, int c, size_t n);

void Default_Handler(void)
{
    rig_io_emergency_off();
    for (;;) {
    }
}

void Reset_Handler(void)
{
    const uint32_t *src = &_sidata;
    uint32_t *dst;
    for (dst = &_sdata; dst < &_edata; ++dst) {
        *dst = *src++;
    }
    for (dst = &_sbss; dst < &_ebss; ++dst) {
        *dst = 0u;
    }
    SCB_CPACR |= 0xFu << 20; /* CP10, CP11: full access to the FPU */
    __asm__ volatile("dsb\n\tisb" ::: "memory");
    (void)main();
    for (;;) {
    }
}

typedef void (*vector)(void);

#define N_IRQ 82u /* STM32F405: 82 interrupt lines (F401/F411 have fewer, F446 more) */

__attribute__((section(".isr_vector"), used)) static const vector vectors[16u + N_IRQ] = {
    [0] = (vector)(uintptr_t)&_estack,
    [1] = Reset_Handler,
    [2] = Default_Handler,   /* NMI */
    [3] = HardFault_Handler,
    [4] = Default_Handler,   /* MemManage */
    [5] = Default_Handler,   /* BusFault */
    [6] = Default_Handler,   /* UsageFault */
    [11] = Default_Handler,  /* SVCall */
    [12] = Default_Handler,  /* DebugMonitor */
    [14] = Default_Handler,  /* PendSV */
    [15] = SysTick_Handler,  /* wakes the main loop only; time comes from TIM5's counter */
    [16u + IRQ_EXTI0] = EXTI0_IRQHandler,
    [16u + IRQ_TIM2] = TIM2_IRQHandler,
    [16u + IRQ_USART2] = USART2_IRQHandler,
};

/* Byte loops on purpose (the build passes -fno-tree-loop-distribute-patterns, so GCC does not
 * turn them back into calls to themselves). */
void *memcpy(void *dst, const void *src, size_t n)
{
    uint8_t *d = (uint8_t *)dst;
    const uint8_t *s = (const uint8_t *)src;
    while (n-- > 0u) {
        *d++ = *s++;
    }
    return dst;
}

void *memset(void *dst, int c, size_t n)
{
    uint8_t *d = (uint8_t *)dst;
    while (n-- > 0u) {
        *d++ = (uint8_t)c;
    }
    return dst;
}
