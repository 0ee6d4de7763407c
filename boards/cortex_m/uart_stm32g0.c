/* STM32G0 USART2 (the Nucleo-64 boards' ST-LINK virtual COM port on PA2 TX / PA3 RX, AF1):
 * polled transmit, interrupt receive (IRQ 28). Runs from the 16 MHz HSI the part starts on. */
#include <stdint.h>

#include "cortex_m.h"

#define RCC_IOPENR REG32(0x40021034u)
#define RCC_APBENR1 REG32(0x4002103Cu)
#define GPIOA_MODER REG32(0x50000000u)
#define GPIOA_AFRL REG32(0x50000020u)
#define USART_BASE 0x40004400u
#define USART_CR1 REG32(USART_BASE + 0x00u)
#define USART_BRR REG32(USART_BASE + 0x0Cu)
#define USART_ISR REG32(USART_BASE + 0x1Cu)
#define USART_ICR REG32(USART_BASE + 0x20u)
#define USART_RDR REG32(USART_BASE + 0x24u)
#define USART_TDR REG32(USART_BASE + 0x28u)

#define ISR_RXNE 0x20u
#define ISR_TXE 0x80u
#define ISR_ORE 0x08u
#define ICR_ORECF 0x08u
#define CR1_UE 0x1u
#define CR1_RE 0x4u
#define CR1_TE 0x8u
#define CR1_RXNEIE 0x20u
#define UART_IRQ 28u
#define UART_CLOCK_HZ 16000000u

void uart_start(uint32_t baud)
{
    RCC_IOPENR |= 1u << 0;   /* GPIOA */
    RCC_APBENR1 |= 1u << 17; /* USART2 */
    (void)RCC_APBENR1;       /* the clock is on before the first register write */
    GPIOA_MODER = (GPIOA_MODER & ~(0xFu << 4)) | (0xAu << 4);      /* PA2, PA3: alternate */
    GPIOA_AFRL = (GPIOA_AFRL & ~(0xFFu << 8)) | (0x11u << 8);       /* AF1: USART2 */
    USART_BRR = (UART_CLOCK_HZ + baud / 2u) / baud;                /* oversampling by 16 */
    USART_CR1 = CR1_UE | CR1_TE | CR1_RE | CR1_RXNEIE;
    nvic_enable(UART_IRQ);
}

void uart_send(uint8_t byte)
{
    while (!(USART_ISR & ISR_TXE)) {
    }
    USART_TDR = byte;
}

/* Paused at the NVIC rather than with RXNEIE, and a byte already waiting is pended by hand on
 * resuming: emulators that raise the line only on a new byte (QEMU's STM32 USART) then behave as
 * the part does, and the part is not harmed by a spare pend (the handler loops on RXNE). */
void uart_receive_interrupt(int enabled)
{
    if (enabled) {
        nvic_enable(UART_IRQ);
        if (USART_ISR & ISR_RXNE) {
            nvic_pend(UART_IRQ);
        }
    } else {
        nvic_disable(UART_IRQ);
    }
}

void uart_interrupt(void)
{
    if (USART_ISR & ISR_ORE) {
        USART_ICR = ICR_ORECF; /* an overrun lost a byte: the protocol notices, reception goes on */
    }
    while (USART_ISR & ISR_RXNE) {
        if (!rx_queue_room()) {
            uart_receive_interrupt(0);
            break;
        }
        rx_queue_put((uint8_t)USART_RDR);
    }
}
