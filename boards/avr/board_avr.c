/* board.h for the ATmega328P (avr-libc): USART0 with interrupt receive into a small queue and
 * idle sleep while it is empty; Timer1 as the cost counter; sleep with interrupts off to end.
 *
 * Cost: Timer1 counts at F_CPU / 8 and its overflow interrupt counts the wraps; cycles = ticks *
 * COST_PER_TICK_NUM / COST_PER_TICK_DEN (8/1 from the profile). Exact on a real part and under
 * simavr (which counts cycles); QEMU's AVR model paces the timer by host time. The counter's own
 * read cost is measured once at start and taken off. An overflow interrupt inside a measured
 * piece (one every 2^19 cycles) is counted with it.
 */
#include <stdint.h>

#include <avr/interrupt.h>
#include <avr/io.h>
#include <avr/sleep.h>

#include "board.h"

#ifndef BOARD_BAUD
#define BOARD_BAUD 1000000u
#endif
#ifndef COST_PER_TICK_NUM
#define COST_PER_TICK_NUM 8u
#endif
#ifndef COST_PER_TICK_DEN
#define COST_PER_TICK_DEN 1u
#endif

/* 1: sleep (idle mode) while waiting for a byte; 0: spin with interrupts on (for a simulator
 * that does not wake from SLEEP on the USART interrupt, as QEMU 7.2's AVR model, measured). */
#ifndef AVR_IDLE_SLEEP
#define AVR_IDLE_SLEEP 1
#endif

#define RX_QUEUE_SIZE 32u /* a power of two */

static volatile uint8_t rx_queue[RX_QUEUE_SIZE];
static volatile uint8_t rx_head; /* written by the interrupt */
static volatile uint8_t rx_tail; /* written by board_read_byte */
static volatile uint16_t timer_wraps;
static uint32_t cost_start_ticks;
static uint32_t cost_overhead;

ISR(USART_RX_vect)
{
    uint8_t head = rx_head;
    if ((uint8_t)(head - rx_tail) >= RX_QUEUE_SIZE) {
        UCSR0B = (uint8_t)(UCSR0B & ~(1u << RXCIE0)); /* full: hold further bytes in the UART */
        return;
    }
    rx_queue[head % RX_QUEUE_SIZE] = UDR0;
    rx_head = (uint8_t)(head + 1u);
}

ISR(TIMER1_OVF_vect)
{
    timer_wraps = (uint16_t)(timer_wraps + 1u);
}

static uint32_t ticks_now(void)
{
    uint8_t saved = SREG;
    cli();
    uint16_t count = TCNT1;
    uint16_t wraps = timer_wraps;
    if ((TIFR1 & (1u << TOV1)) && count < 0x8000u) {
        wraps = (uint16_t)(wraps + 1u); /* wrapped after interrupts went off */
    }
    SREG = saved;
    return ((uint32_t)wraps << 16) | count;
}

void board_cost_begin(void)
{
    cost_start_ticks = ticks_now();
}

static uint32_t cost_raw(void)
{
    uint32_t ticks = ticks_now() - cost_start_ticks;
    uint64_t scaled = ((uint64_t)ticks * COST_PER_TICK_NUM + COST_PER_TICK_DEN / 2u) / COST_PER_TICK_DEN;
    return scaled > UINT32_MAX ? UINT32_MAX : (uint32_t)scaled;
}

uint32_t board_cost_end(void)
{
    uint32_t cost = cost_raw();
    return cost > cost_overhead ? cost - cost_overhead : 0u;
}

void board_init(void)
{
    uint32_t divider = (F_CPU / 8u + BOARD_BAUD / 2u) / BOARD_BAUD;
    UBRR0 = (uint16_t)(divider > 0u ? divider - 1u : 0u);
    UCSR0A = (uint8_t)(1u << U2X0);
    UCSR0C = (uint8_t)((1u << UCSZ01) | (1u << UCSZ00)); /* 8 data bits, no parity, 1 stop */
    UCSR0B = (uint8_t)((1u << RXEN0) | (1u << TXEN0) | (1u << RXCIE0));
    TCCR1A = 0u;
    TCCR1B = (uint8_t)(1u << CS11); /* F_CPU / 8 */
    TIMSK1 = (uint8_t)(1u << TOIE1);
    SMCR = 0u; /* idle sleep (SM2..SM0 = 0), the mode that keeps the UART and timers running */
    sei();
    board_cost_begin();
    cost_overhead = cost_raw();
}

int board_read_byte(void)
{
    cli();
    while (rx_head == rx_tail) {
#if AVR_IDLE_SLEEP
        /* SEI takes effect after the next instruction, so the sleep is entered before any
         * interrupt can run: a byte arriving between the test and the sleep wakes it. */
        sleep_enable();
        sei();
        sleep_cpu();
        sleep_disable();
#else
        sei();
#endif
        cli();
    }
    uint8_t tail = rx_tail;
    uint8_t byte = rx_queue[tail % RX_QUEUE_SIZE];
    rx_tail = (uint8_t)(tail + 1u);
    UCSR0B = (uint8_t)(UCSR0B | (1u << RXCIE0));
    sei();
    return byte;
}

void board_write(const uint8_t *bytes, size_t count)
{
    for (size_t i = 0; i < count; ++i) {
        while (!(UCSR0A & (1u << UDRE0))) {
        }
        UDR0 = bytes[i];
    }
}

void board_finish(int code)
{
    GPIOR0 = (uint8_t)code; /* where a simulator or debugger can read it */
    while (!(UCSR0A & (1u << TXC0))) {
    }
    cli();
    sleep_enable();
    for (;;) {
        sleep_cpu();
    }
}
