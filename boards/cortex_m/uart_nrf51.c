/* Nordic nRF51 UART (the BBC micro:bit's, pins 24 TX and 25 RX): polled transmit, interrupt
 * receive on the RXDRDY event (IRQ 2). */
#include <stdint.h>

#include "cortex_m.h"

#define UART_BASE 0x40002000u
#define UART_STARTRX REG32(UART_BASE + 0x000u)
#define UART_STARTTX REG32(UART_BASE + 0x008u)
#define UART_EVENTS_RXDRDY REG32(UART_BASE + 0x108u)
#define UART_EVENTS_TXDRDY REG32(UART_BASE + 0x11Cu)
#define UART_INTENSET REG32(UART_BASE + 0x304u)
#define UART_INTENCLR REG32(UART_BASE + 0x308u)
#define UART_ENABLE REG32(UART_BASE + 0x500u)
#define UART_PSELTXD REG32(UART_BASE + 0x50Cu)
#define UART_PSELRXD REG32(UART_BASE + 0x514u)
#define UART_RXD REG32(UART_BASE + 0x518u)
#define UART_TXD REG32(UART_BASE + 0x51Cu)
#define UART_BAUDRATE REG32(UART_BASE + 0x524u)

#define INT_RXDRDY 0x4u
#define UART_IRQ 2u
#define PIN_TX 24u
#define PIN_RX 25u

/* The BAUDRATE register takes fixed codes (nRF51 reference manual), not a divider. */
static uint32_t baud_code(uint32_t baud)
{
    switch (baud) {
    case 9600u: return 0x00275000u;
    case 38400u: return 0x009D5000u;
    case 57600u: return 0x00EBF000u;
    case 230400u: return 0x03AFB000u;
    case 460800u: return 0x075F7000u;
    case 921600u: return 0x0EBEDFA4u;
    case 1000000u: return 0x10000000u;
    default: return 0x01D7E000u; /* 115200 */
    }
}

void uart_start(uint32_t baud)
{
    UART_PSELTXD = PIN_TX;
    UART_PSELRXD = PIN_RX;
    UART_BAUDRATE = baud_code(baud);
    UART_ENABLE = 4u;
    UART_EVENTS_RXDRDY = 0u;
    UART_EVENTS_TXDRDY = 0u;
    UART_INTENSET = INT_RXDRDY;
    UART_STARTRX = 1u;
    UART_STARTTX = 1u;
    nvic_enable(UART_IRQ);
}

void uart_send(uint8_t byte)
{
    UART_TXD = byte;
    while (UART_EVENTS_TXDRDY == 0u) {
    }
    UART_EVENTS_TXDRDY = 0u;
}

void uart_receive_interrupt(int enabled)
{
    if (enabled) {
        UART_INTENSET = INT_RXDRDY;
    } else {
        UART_INTENCLR = INT_RXDRDY;
    }
}

void uart_interrupt(void)
{
    while (UART_EVENTS_RXDRDY != 0u) {
        if (!rx_queue_room()) {
            uart_receive_interrupt(0);
            break;
        }
        UART_EVENTS_RXDRDY = 0u;
        rx_queue_put((uint8_t)UART_RXD);
    }
}
