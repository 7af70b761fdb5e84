/*
 * f4_regs.h - the STM32F4 registers this port touches, and nothing else.
 *
 * Addresses, offsets and bit positions are those of the STM32F405/415/407/417/427/437/429/439
 * reference manual (RM0090) and the STM32F401 reference manual (RM0368); the peripherals used
 * here sit at the same addresses on F401, F405, F411 and F446. Interrupt numbers are the
 * positions in the vector table of those manuals. Checked: the IWDG keys and prescaler codes
 * against RM0090 section 21; USART1/USART2, TIM5's counter, SysTick and the USART2 interrupt by
 * running them under QEMU 7.2's STM32F405. The rest is from memory of those manuals: check a
 * value against your part's manual before relying on it.
 * Written out by hand so the port needs no vendor header and downloads nothing at build time.
 */
#ifndef F4_REGS_H
#define F4_REGS_H

#include <stdint.h>

#define F4_REG(addr) (*(volatile uint32_t *)(uintptr_t)(addr))

/* ---- reset and clock control (RCC) -------------------------------------------------------- */
#define RCC_BASE 0x40023800u
#define RCC_CR F4_REG(RCC_BASE + 0x00u)
#define RCC_PLLCFGR F4_REG(RCC_BASE + 0x04u)
#define RCC_CFGR F4_REG(RCC_BASE + 0x08u)
#define RCC_AHB1ENR F4_REG(RCC_BASE + 0x30u)
#define RCC_APB1ENR F4_REG(RCC_BASE + 0x40u)
#define RCC_APB2ENR F4_REG(RCC_BASE + 0x44u)
#define RCC_CSR F4_REG(RCC_BASE + 0x74u)
#define RCC_CR_HSIRDY (1u << 1)
#define RCC_CR_PLLON (1u << 24)
#define RCC_CR_PLLRDY (1u << 25)
#define RCC_CFGR_SW_PLL 2u
#define RCC_CFGR_SWS_MASK (3u << 2)
#define RCC_CFGR_SWS_PLL (2u << 2)
#define RCC_CFGR_PPRE1_DIV2 (4u << 10)
#define RCC_AHB1ENR_GPIOA (1u << 0)
#define RCC_AHB1ENR_GPIOB (1u << 1)
#define RCC_APB1ENR_TIM2 (1u << 0)
#define RCC_APB1ENR_TIM3 (1u << 1)
#define RCC_APB1ENR_TIM5 (1u << 3)
#define RCC_APB1ENR_USART2 (1u << 17)
#define RCC_APB2ENR_ADC1 (1u << 8)
#define RCC_APB2ENR_SYSCFG (1u << 14)
#define RCC_CSR_RMVF (1u << 24)
#define RCC_CSR_IWDGRSTF (1u << 29)

/* ---- flash interface ---------------------------------------------------------------------- */
#define FLASH_ACR F4_REG(0x40023C00u)
#define FLASH_ACR_PRFTEN (1u << 8)
#define FLASH_ACR_ICEN (1u << 9)
#define FLASH_ACR_DCEN (1u << 10)

/* ---- general-purpose I/O ------------------------------------------------------------------ */
#define GPIOA_BASE 0x40020000u
#define GPIOB_BASE 0x40020400u
#define GPIO_MODER(port) F4_REG((port) + 0x00u)   /* 2 bits per pin: 00 in, 01 out, 10 AF, 11 analog */
#define GPIO_OTYPER(port) F4_REG((port) + 0x04u)  /* 1 = open drain */
#define GPIO_OSPEEDR(port) F4_REG((port) + 0x08u)
#define GPIO_PUPDR(port) F4_REG((port) + 0x0Cu)   /* 2 bits per pin: 01 pull-up, 10 pull-down */
#define GPIO_IDR(port) F4_REG((port) + 0x10u)
#define GPIO_BSRR(port) F4_REG((port) + 0x18u)    /* low half sets, high half resets */
#define GPIO_AFR(port, pin) F4_REG((port) + 0x20u + 4u * ((pin) / 8u))

/* ---- general-purpose timers TIM2..TIM5 (TIM2 and TIM5 have 32-bit counters) ---------------- */
#define TIM2_BASE 0x40000000u
#define TIM3_BASE 0x40000400u
#define TIM5_BASE 0x40000C00u
#define TIM_CR1(t) F4_REG((t) + 0x00u)
#define TIM_DIER(t) F4_REG((t) + 0x0Cu)
#define TIM_SR(t) F4_REG((t) + 0x10u)
#define TIM_EGR(t) F4_REG((t) + 0x14u)
#define TIM_CCMR1(t) F4_REG((t) + 0x18u)
#define TIM_CCMR2(t) F4_REG((t) + 0x1Cu)
#define TIM_CCER(t) F4_REG((t) + 0x20u)
#define TIM_CNT(t) F4_REG((t) + 0x24u)
#define TIM_PSC(t) F4_REG((t) + 0x28u)
#define TIM_ARR(t) F4_REG((t) + 0x2Cu)
#define TIM_CCR1(t) F4_REG((t) + 0x34u)
#define TIM_CCR3(t) F4_REG((t) + 0x3Cu)
#define TIM_CR1_CEN (1u << 0)
#define TIM_CR1_URS (1u << 2)  /* only counter overflow raises the update interrupt */
#define TIM_CR1_OPM (1u << 3)  /* one-pulse: stop at the next update */
#define TIM_CR1_ARPE (1u << 7)
#define TIM_DIER_UIE (1u << 0)
#define TIM_DIER_CC3IE (1u << 3)
#define TIM_SR_UIF (1u << 0)
#define TIM_SR_CC3IF (1u << 3)
#define TIM_EGR_UG (1u << 0)
#define TIM_CCMR1_OC1M_PWM1 (6u << 4)
#define TIM_CCMR1_OC1PE (1u << 3)
#define TIM_CCMR2_CC3S_TI3 (1u << 0)
#define TIM_CCMR2_IC3F_SHIFT 4u
#define TIM_CCER_CC1E (1u << 0)
#define TIM_CCER_CC1P (1u << 1)
#define TIM_CCER_CC3E (1u << 8)

/* ---- USART (USART2: the ST-LINK virtual COM port on Nucleo-64 boards) ----------------------- */
#define USART2_BASE 0x40004400u
#define USART_SR(u) F4_REG((u) + 0x00u)
#define USART_DR(u) F4_REG((u) + 0x04u)
#define USART_BRR(u) F4_REG((u) + 0x08u)
#define USART_CR1(u) F4_REG((u) + 0x0Cu)
#define USART_SR_ORE (1u << 3)
#define USART_SR_RXNE (1u << 5)
#define USART_SR_TXE (1u << 7)
#define USART_CR1_RE (1u << 2)
#define USART_CR1_TE (1u << 3)
#define USART_CR1_RXNEIE (1u << 5)
#define USART_CR1_TXEIE (1u << 7)
#define USART_CR1_UE (1u << 13)

/* ---- ADC1 --------------------------------------------------------------------------------- */
#define ADC1_BASE 0x40012000u
#define ADC_SR F4_REG(ADC1_BASE + 0x00u)
#define ADC_CR2 F4_REG(ADC1_BASE + 0x08u)
#define ADC_SMPR2 F4_REG(ADC1_BASE + 0x10u)
#define ADC_SQR1 F4_REG(ADC1_BASE + 0x2Cu)
#define ADC_SQR3 F4_REG(ADC1_BASE + 0x34u)
#define ADC_DR F4_REG(ADC1_BASE + 0x4Cu)
#define ADC_CCR F4_REG(0x40012300u + 0x04u)
#define ADC_SR_EOC (1u << 1)
#define ADC_CR2_ADON (1u << 0)
#define ADC_CR2_SWSTART (1u << 30)
#define ADC_CCR_ADCPRE_DIV4 (1u << 16)

/* ---- independent watchdog (IWDG), clocked by the ~32 kHz LSI ------------------------------- */
#define IWDG_KR F4_REG(0x40003000u)
#define IWDG_PR F4_REG(0x40003004u)
#define IWDG_RLR F4_REG(0x40003008u)
#define IWDG_KEY_UNLOCK 0x5555u
#define IWDG_KEY_REFRESH 0xAAAAu
#define IWDG_KEY_START 0xCCCCu

/* ---- debug MCU: freeze the IWDG while a debugger halts the core ---------------------------- */
#define DBGMCU_APB1_FZ F4_REG(0xE0042008u)
#define DBGMCU_APB1_FZ_IWDG (1u << 12)

/* ---- SYSCFG and EXTI (external interrupt lines) -------------------------------------------- */
#define SYSCFG_EXTICR1 F4_REG(0x40013800u + 0x08u)
#define EXTI_IMR F4_REG(0x40013C00u + 0x00u)
#define EXTI_RTSR F4_REG(0x40013C00u + 0x08u)
#define EXTI_FTSR F4_REG(0x40013C00u + 0x0Cu)
#define EXTI_PR F4_REG(0x40013C00u + 0x14u)

/* ---- Cortex-M4 core: NVIC, SCB ------------------------------------------------------------ */
#define NVIC_ISER(n) F4_REG(0xE000E100u + 4u * ((n) / 32u))
#define NVIC_ISPR(n) F4_REG(0xE000E200u + 4u * ((n) / 32u))
#define NVIC_IPR_BYTE(n) (*(volatile uint8_t *)(uintptr_t)(0xE000E400u + (n)))
#define SCB_CPACR F4_REG(0xE000ED88u)
#define SYST_CSR F4_REG(0xE000E010u) /* SysTick control and status */
#define SYST_RVR F4_REG(0xE000E014u) /* reload value, 24 bits */
#define SYST_CVR F4_REG(0xE000E018u) /* current value; any write clears it */
#define SYST_CSR_ENABLE (1u << 0)
#define SYST_CSR_TICKINT (1u << 1)
#define SYST_CSR_CLKSOURCE_CPU (1u << 2)

/* Interrupt numbers (vector table position minus 16). */
#define IRQ_EXTI0 6u
#define IRQ_TIM2 28u
#define IRQ_TIM3 29u
#define IRQ_USART2 38u

#endif /* F4_REGS_H */
