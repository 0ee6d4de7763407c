/* STM32F4 USART2 (the Nucleo-64 boards' ST-LINK virtual COM port on PA2 TX / PA3 RX, AF7):
 * polled transmit, interrupt receive (IRQ 38). Runs from the 16 MHz HSI the part starts on. */
#include <stdint.h>

#include "cortex_m.h"

#define RCC_AHB1ENR REG32(0x40023830u)
#define RCC_APB1ENR REG32(0x40023840u)
#define GPIOA_MODER REG32(0x40020000u)
#define GPIOA_AFRL REG32(0x40020020u)
#define USART_BASE 0x40004400u
#define USART_SR REG32(USART_BASE + 0x00u)
#define USART_DR REG32(USART_BASE + 0x04u)
#define USART_BRR REG32(USART_BASE + 0x08u)
#define USART_CR1 REG32(USART_BASE + 0x0Cu)

#define SR_RXNE 0x20u
#define SR_TXE 0x80u
#define SR_ORE 0x08u
#define CR1_UE 0x2000u
#define CR1_TE 0x8u
#define CR1_RE 0x4u
#define CR1_RXNEIE 0x20u
#define UART_IRQ 38u
#define UART_CLOCK_HZ 16000000u

void uart_start(uint32_t baud)
{
    RCC_AHB1ENR |= 1u << 0;  /* GPIOA */
    RCC_APB1ENR |= 1u << 17; /* USART2 */
    (void)RCC_APB1ENR;       /* the clock is on before the first register write */
    GPIOA_MODER = (GPIOA_MODER & ~(0xFu << 4)) | (0xAu << 4);      /* PA2, PA3: alternate */
    GPIOA_AFRL = (GPIOA_AFRL & ~(0xFFu << 8)) | (0x77u << 8);       /* AF7: USART2 */
    USART_BRR = (UART_CLOCK_HZ + baud / 2u) / baud;                /* oversampling by 16 */
    USART_CR1 = CR1_UE | CR1_TE | CR1_RE | CR1_RXNEIE;
    nvic_enable(UART_IRQ);
}

void uart_send(uint8_t byte)
{
    while (!(USART_SR & SR_TXE)) {
    }
    USART_DR = byte;
}

/* Paused at the NVIC rather than with RXNEIE, and a byte already waiting is pended by hand on
 * resuming: emulators that raise the line only on a new byte (QEMU's STM32 USART) then behave as
 * the part does, and the part is not harmed by a spare pend (the handler loops on RXNE). */
void uart_receive_interrupt(int enabled)
{
    if (enabled) {
        nvic_enable(UART_IRQ);
        if (USART_SR & SR_RXNE) {
            nvic_pend(UART_IRQ);
        }
    } else {
        nvic_disable(UART_IRQ);
    }
}

void uart_interrupt(void)
{
    /* Reading SR then DR also clears an overrun; the lost byte is the protocol's to notice. */
    while (USART_SR & (SR_RXNE | SR_ORE)) {
        if (!rx_queue_room()) {
            uart_receive_interrupt(0);
            break;
        }
        rx_queue_put((uint8_t)USART_DR);
    }
}
