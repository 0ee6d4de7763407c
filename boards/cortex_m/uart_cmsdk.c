/* Arm CMSDK APB UART (UART0 of the MPS2 boards): polled transmit, interrupt receive (IRQ 0). */
#include <stdint.h>

#include "cortex_m.h"

#define UART_BASE 0x40004000u
#define UART_DATA REG32(UART_BASE + 0x00u)
#define UART_STATE REG32(UART_BASE + 0x04u)
#define UART_CTRL REG32(UART_BASE + 0x08u)
#define UART_INTSTATUS REG32(UART_BASE + 0x0Cu)
#define UART_BAUDDIV REG32(UART_BASE + 0x10u)

#define STATE_TX_FULL 0x1u
#define STATE_RX_FULL 0x2u
#define CTRL_TX_ENABLE 0x1u
#define CTRL_RX_ENABLE 0x2u
#define CTRL_RX_INTERRUPT 0x8u
#define INT_RX 0x2u
#define UART_IRQ 0u
#define UART_CLOCK_HZ 25000000u

void uart_start(uint32_t baud)
{
    uint32_t divider = UART_CLOCK_HZ / baud;
    UART_BAUDDIV = divider < 16u ? 16u : divider;
    UART_CTRL = CTRL_TX_ENABLE | CTRL_RX_ENABLE | CTRL_RX_INTERRUPT;
    nvic_enable(UART_IRQ);
}

void uart_send(uint8_t byte)
{
    while (UART_STATE & STATE_TX_FULL) {
    }
    UART_DATA = byte;
}

/* The interrupt line follows the RX flag alone (QEMU's model; CTRL's enable only gates setting the
 * flag), so the pause is done at the NVIC: the flag stays set and re-enabling brings the handler
 * back. */
void uart_receive_interrupt(int enabled)
{
    if (enabled) {
        nvic_enable(UART_IRQ);
    } else {
        nvic_disable(UART_IRQ);
    }
}

/* The RX interrupt flag is cleared just before its byte is taken. The UART holds one byte, so no
 * other can arrive in between; a byte that arrives while (or after) DATA is read sets the flag
 * anew and keeps it, also when the queue is full and the handler leaves it in the UART, so the
 * handler always comes back for it. (Clearing after the read could wipe the flag of a byte that
 * arrived during the read: reception then stalled for good, seen under load.) */
void uart_interrupt(void)
{
    while (UART_STATE & STATE_RX_FULL) {
        if (!rx_queue_room()) {
            uart_receive_interrupt(0);
            return;
        }
        UART_INTSTATUS = INT_RX;
        rx_queue_put((uint8_t)UART_DATA);
    }
}
