/*
 * board_f4.c - clocks, time base, wake timer, UART rings and hardware watchdog for STM32F4.
 *
 * Real board: the PLL runs from the 16 MHz internal oscillator (no crystal needed, the same on
 * every F4 board): 16 MHz / 16 * 336 / 4 = 84 MHz core, APB1 at 42 MHz, so the APB1 timers count
 * at 84 MHz and USART2 is clocked at 42 MHz.
 *
 * Emulated board (RIG_EMULATED=1, QEMU 7.2 machine netduinoplus2, an STM32F405): the same code
 * except three facts of the emulator, measured on it:
 *   - QEMU 7.2 has no RCC model (RCC reads as 0), so waiting for PLLRDY would never end: the PLL
 *     start is skipped;
 *   - its STM32 timers count at 1 GHz whatever the clock tree says, so the prescaler for 1 MHz
 *     is 999 instead of 83;
 *   - its SysTick counts the 168 MHz processor clock of the F405.
 * Everything else - USART2 with its interrupt, TIM5 as the free-running counter, SysTick as the
 * wake timer, the NVIC, WFI - is exercised as on the chip. (The emulator ignores the baud rate,
 * GPIO and the IWDG: writes to them are harmless there.)
 *
 * Why SysTick wakes the loop and not a timer update interrupt: QEMU 7.2's STM32 timer model
 * schedules its update interrupt at twice the current emulated time, i.e. effectively never
 * after boot (seen by experiment; the counter itself reads correctly). SysTick is the core's own
 * timer and is modelled by the Cortex-M emulation.
 */
#include "board.h"

#include "f4_regs.h"
#include "rig_config.h"

#if RIG_EMULATED
#define TIMER_CLOCK_HZ 1000000000u /* QEMU 7.2 STM32 timer model (measured: 1.000 GHz) */
#define CORE_CLOCK_HZ 168000000u   /* QEMU 7.2 netduinoplus2 SysTick (measured against TIM5) */
#else
#define TIMER_CLOCK_HZ 84000000u   /* APB1 timers: 2 x 42 MHz */
#define CORE_CLOCK_HZ 84000000u
#endif
#define APB1_HZ 42000000u
#define TIM_PSC_1MHZ (TIMER_CLOCK_HZ / 1000000u - 1u)
#define RX_LINGER_US 500u /* stay awake this long after a received byte: the rest of the frame
                             follows at once, and waking per byte costs more than polling (on the
                             chip a little current; under QEMU a thread hand-over per byte) */
#define WAKE_MAX_US 60000u /* SysTick reload is 24 bits (99 ms at 168 MHz); a longer wait wakes once more */

#define RX_SIZE 512u  /* power of two: several COMMAND frames at any rate */
#define TX_SIZE 2048u /* power of two: a burst of HELLO + FAULT + SAMPLEs without dropping */

static volatile uint8_t rx_buf[RX_SIZE];
static volatile uint32_t rx_head; /* written by the interrupt */
static volatile uint32_t rx_tail; /* written by the main loop */
static volatile uint32_t rx_lost; /* bytes dropped by the interrupt (ring full or overrun) */
static volatile uint32_t rx_last_us; /* board_time_us() of the last received byte */
static uint32_t rx_lost_seen;

static volatile uint8_t tx_buf[TX_SIZE];
static volatile uint32_t tx_head; /* written by the main loop */
static volatile uint32_t tx_tail; /* written by the interrupt */

void USART2_IRQHandler(void);
void SysTick_Handler(void);

static inline void irq_disable(void)
{
    __asm__ volatile("cpsid i" ::: "memory");
}

static inline void irq_enable(void)
{
    __asm__ volatile("cpsie i" ::: "memory");
}

static void nvic_enable(uint32_t irq, uint8_t priority)
{
    NVIC_IPR_BYTE(irq) = (uint8_t)(priority << 4); /* F4: four priority bits, upper nibble */
    NVIC_ISER(irq) = 1u << (irq % 32u);
}

static void clock_init(void)
{
#if !RIG_EMULATED
    uint32_t spins;
    FLASH_ACR = 2u | FLASH_ACR_PRFTEN | FLASH_ACR_ICEN | FLASH_ACR_DCEN; /* 2 wait states at 84 MHz, 3.3 V */
    /* HSI (16 MHz) / M 16 = 1 MHz; x N 336 = 336 MHz VCO; / P 4 = 84 MHz; / Q 7 = 48 MHz. */
    RCC_PLLCFGR = 16u | (336u << 6) | (1u << 16) | (7u << 24); /* PLLSRC = HSI (bit 22 clear) */
    RCC_CR |= RCC_CR_PLLON;
    for (spins = 0; (RCC_CR & RCC_CR_PLLRDY) == 0u && spins < 1000000u; ++spins) {
    }
    if ((RCC_CR & RCC_CR_PLLRDY) == 0u) {
        for (;;) {
            /* PLL dead: stay here with the outputs off; the hardware watchdog is not running
             * yet, so the board needs a power cycle - a broken chip must not drive a rig. */
        }
    }
    RCC_CFGR = RCC_CFGR_PPRE1_DIV2 | RCC_CFGR_SW_PLL; /* AHB /1, APB1 /2 (max 42 MHz), APB2 /1 */
    while ((RCC_CFGR & RCC_CFGR_SWS_MASK) != RCC_CFGR_SWS_PLL) {
    }
#endif
    RCC_AHB1ENR |= RCC_AHB1ENR_GPIOA | RCC_AHB1ENR_GPIOB;
    RCC_APB1ENR |= RCC_APB1ENR_TIM2 | RCC_APB1ENR_TIM3 | RCC_APB1ENR_TIM5 | RCC_APB1ENR_USART2;
    RCC_APB2ENR |= RCC_APB2ENR_ADC1 | RCC_APB2ENR_SYSCFG;
    (void)RCC_APB1ENR; /* read back: the clock is on before the first peripheral access */
}

static void time_base_init(void)
{
    /* TIM5: 32-bit, 1 MHz, free-running. board_time_us() reads its counter; nothing counts
     * interrupts, so a late interrupt can never lose time. */
    TIM_PSC(TIM5_BASE) = TIM_PSC_1MHZ;
    TIM_ARR(TIM5_BASE) = 0xFFFFFFFFu;
    TIM_EGR(TIM5_BASE) = TIM_EGR_UG; /* load the prescaler */
    TIM_SR(TIM5_BASE) = 0u;
    TIM_CR1(TIM5_BASE) = TIM_CR1_CEN;
    SYST_CSR = 0u; /* SysTick: armed per sleep by board_sleep_until */
}

static void uart_init(void)
{
    /* PA2 = USART2_TX, PA3 = USART2_RX, alternate function 7; pull-up on RX so an unplugged
     * cable reads as idle line, not as a stream of zero bytes. */
    GPIO_AFR(GPIOA_BASE, 2u) = (GPIO_AFR(GPIOA_BASE, 2u) & ~(0xFFu << 8)) | (7u << 8) | (7u << 12);
    GPIO_PUPDR(GPIOA_BASE) = (GPIO_PUPDR(GPIOA_BASE) & ~(3u << 6)) | (1u << 6);
    GPIO_MODER(GPIOA_BASE) = (GPIO_MODER(GPIOA_BASE) & ~(0xFu << 4)) | (2u << 4) | (2u << 6);
    /* Oversampling by 16: BRR = f_APB1 / baud in 1/16 steps (mantissa << 4 | fraction). */
    USART_BRR(USART2_BASE) = (APB1_HZ + RIG_UART_BAUD / 2u) / RIG_UART_BAUD;
    USART_CR1(USART2_BASE) = USART_CR1_UE | USART_CR1_TE | USART_CR1_RE | USART_CR1_RXNEIE;
    nvic_enable(IRQ_USART2, 1u);
}

void board_init(void)
{
    clock_init();
    time_base_init();
    uart_init();
    irq_enable();
}

uint32_t board_time_us(void)
{
    return TIM_CNT(TIM5_BASE);
}

void SysTick_Handler(void)
{
    SYST_CSR = 0u; /* one shot: the wake-up itself was the job; nothing is counted */
}

void board_sleep_until(uint32_t deadline_us)
{
    const uint32_t left = deadline_us - board_time_us(); /* wraps correctly */
    uint32_t wait;
    if (left == 0u || left > 0x80000000u) {
        return; /* due or past */
    }
    if (board_time_us() - rx_last_us < RX_LINGER_US) {
        return; /* a frame is arriving: poll instead of sleeping */
    }
    wait = left < WAKE_MAX_US ? left : WAKE_MAX_US;
    SYST_CSR = 0u;
    SYST_RVR = wait * (CORE_CLOCK_HZ / 1000000u) - 1u;
    SYST_CVR = 0u;
    SYST_CSR = SYST_CSR_ENABLE | SYST_CSR_TICKINT | SYST_CSR_CLKSOURCE_CPU;
    /* Check and sleep with interrupts masked: an interrupt that arrives after the check still
     * ends the WFI (a pending interrupt wakes the core even while masked), then runs at cpsie. */
    irq_disable();
    if (rx_head == rx_tail) {
        __asm__ volatile("dsb\n\twfi" ::: "memory");
    }
    irq_enable();
}

/* Receive: move every waiting byte into the ring. Transmit: fill the data register while it is
 * empty (one or two bytes on the chip; the emulator takes them all at once). */
void USART2_IRQHandler(void)
{
    uint32_t sr = USART_SR(USART2_BASE);
    while ((sr & (USART_SR_RXNE | USART_SR_ORE)) != 0u) {
        const uint8_t byte = (uint8_t)USART_DR(USART2_BASE); /* SR then DR read clears ORE too */
        const uint32_t head = rx_head;
        if ((sr & USART_SR_ORE) != 0u) {
            rx_lost = rx_lost + 1u;
        }
        if (head - rx_tail >= RX_SIZE) {
            rx_lost = rx_lost + 1u;
        } else {
            rx_buf[head % RX_SIZE] = byte;
            rx_head = head + 1u;
        }
        rx_last_us = TIM_CNT(TIM5_BASE);
        sr = USART_SR(USART2_BASE);
    }
    if ((USART_CR1(USART2_BASE) & USART_CR1_TXEIE) != 0u) {
        while ((USART_SR(USART2_BASE) & USART_SR_TXE) != 0u && tx_tail != tx_head) {
            const uint32_t tail = tx_tail;
            USART_DR(USART2_BASE) = tx_buf[tail % TX_SIZE];
            tx_tail = tail + 1u;
        }
        if (tx_tail == tx_head) {
            USART_CR1(USART2_BASE) &= ~USART_CR1_TXEIE;
        }
    }
}

size_t board_uart_read(uint8_t *buf, size_t cap)
{
    size_t n = 0;
    while (n < cap && rx_tail != rx_head) {
        const uint32_t tail = rx_tail;
        buf[n++] = rx_buf[tail % RX_SIZE];
        rx_tail = tail + 1u;
    }
    return n;
}

int board_uart_take_overflow(void)
{
    const uint32_t lost = rx_lost;
    if (lost == rx_lost_seen) {
        return 0;
    }
    rx_lost_seen = lost;
    return 1;
}

size_t board_uart_write(const uint8_t *data, size_t len)
{
    size_t i;
    for (i = 0; i < len; ++i) {
        const uint32_t head = tx_head;
        if (head - tx_tail >= TX_SIZE) {
            break;
        }
        tx_buf[head % TX_SIZE] = data[i];
        tx_head = head + 1u;
    }
    /* Start the transmit interrupt. Setting the pending bit as well starts it on models whose
     * TXE interrupt is not level-triggered; on the chip it is harmless. */
    irq_disable();
    USART_CR1(USART2_BASE) |= USART_CR1_TXEIE;
    irq_enable();
    NVIC_ISPR(IRQ_USART2) = 1u << (IRQ_USART2 % 32u);
    return i;
}

void board_watchdog_start(void)
{
    DBGMCU_APB1_FZ |= DBGMCU_APB1_FZ_IWDG; /* a debugger halt must not reset the chip */
    IWDG_KR = IWDG_KEY_START;              /* starts the LSI as well */
    IWDG_KR = IWDG_KEY_UNLOCK;
    IWDG_PR = RIG_IWDG_PRESCALER_CODE;
    IWDG_RLR = RIG_IWDG_RELOAD;
    IWDG_KR = IWDG_KEY_REFRESH;
}

void board_watchdog_refresh(void)
{
    IWDG_KR = IWDG_KEY_REFRESH;
}

int board_reset_was_watchdog(void)
{
    const int was = (RCC_CSR & RCC_CSR_IWDGRSTF) != 0u;
    RCC_CSR |= RCC_CSR_RMVF;
    return was;
}
