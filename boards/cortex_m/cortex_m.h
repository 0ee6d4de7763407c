/* What the Cortex-M glue files share: core registers (SysTick, NVIC, SCB), the receive queue,
 * and the calls between the common board layer and one UART driver.
 *
 * Every Cortex-M board is: startup.c (vectors, memory, FPU) + board_cortex_m.c (board.h on top of
 * a UART driver and SysTick) + one uart_*.c + one finish_*.c.
 */
#ifndef ORBITFIX_CORTEX_M_H
#define ORBITFIX_CORTEX_M_H

#include <stdint.h>

#define REG32(address) (*(volatile uint32_t *)(address))

/* Core registers, the same on every Cortex-M (Armv6-M and Armv7-M). */
#define SYST_CSR REG32(0xE000E010u)
#define SYST_RVR REG32(0xE000E014u)
#define SYST_CVR REG32(0xE000E018u)
#define NVIC_ISER0 REG32(0xE000E100u)
#define NVIC_ISER(n) REG32(0xE000E100u + 4u * (uint32_t)(n))
#define NVIC_ICER(n) REG32(0xE000E180u + 4u * (uint32_t)(n))
#define NVIC_ISPR(n) REG32(0xE000E200u + 4u * (uint32_t)(n))
#define SCB_CPACR REG32(0xE000ED88u)

static inline void nvic_enable(unsigned int irq)
{
    NVIC_ISER(irq / 32u) = 1u << (irq % 32u);
}

static inline void nvic_disable(unsigned int irq)
{
    NVIC_ICER(irq / 32u) = 1u << (irq % 32u);
}

static inline void nvic_pend(unsigned int irq)
{
    NVIC_ISPR(irq / 32u) = 1u << (irq % 32u);
}

static inline void interrupts_off(void) { __asm__ volatile ("cpsid i" ::: "memory"); }
static inline void interrupts_on(void) { __asm__ volatile ("cpsie i" ::: "memory"); }
static inline void wait_for_interrupt(void) { __asm__ volatile ("wfi" ::: "memory"); }

/* One UART driver per board family provides these. */
void uart_start(uint32_t baud);
void uart_send(uint8_t byte);
/* Let (1) or stop (0) the receive interrupt; stopped while the queue is full, so an emulated UART
 * holds the next byte back instead of losing it. */
void uart_receive_interrupt(int enabled);
/* The UART's interrupt handler (every external interrupt vector points here). */
void uart_interrupt(void);

/* The receive queue, filled by the driver's interrupt handler: it reads a byte from the UART
 * only while there is room, and otherwise stops its receive interrupt and leaves the byte in the
 * UART (a pended interrupt can still run once after that, so it must check again). */
int rx_queue_room(void);
void rx_queue_put(uint8_t byte);

/* SysTick-based cost counter (systick_cost in board_cortex_m.c). */
void systick_interrupt(void);

#endif
