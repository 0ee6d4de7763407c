/* board.h for every Cortex-M board, on top of one UART driver and the core's SysTick timer.
 *
 * Receive: the UART interrupt fills a small queue; board_read_byte sleeps (WFI) while it is empty,
 * which keeps an emulator idle instead of spinning.
 *
 * Cost: SysTick counts down from 2^24 - 1 at the processor clock and its interrupt counts the
 * wraps, so a count is wraps * 2^24 + (reload - current) ticks. On a real part a tick is a clock
 * cycle. Under QEMU's -icount every instruction advances virtual time by a fixed 2^shift ns, so
 * ticks convert exactly to instructions: instructions = ticks * COST_PER_TICK_NUM /
 * COST_PER_TICK_DEN, rounded (the profile sets both from the machine's SysTick clock). The cost
 * of reading the counter itself is measured once at start and taken off every result.
 */
#include <stdint.h>

#include "board.h"
#include "cortex_m.h"

#ifndef BOARD_BAUD
#define BOARD_BAUD 115200u
#endif
#ifndef COST_PER_TICK_NUM
#define COST_PER_TICK_NUM 1u
#endif
#ifndef COST_PER_TICK_DEN
#define COST_PER_TICK_DEN 1u
#endif

#define RX_QUEUE_SIZE 64u /* a power of two */
#define SYSTICK_RELOAD 0x00FFFFFFu

static volatile uint8_t rx_queue[RX_QUEUE_SIZE];
static volatile uint32_t rx_head; /* written by the interrupt */
static volatile uint32_t rx_tail; /* written by board_read_byte */
static volatile uint32_t systick_wraps;
static uint64_t cost_start_ticks;
static uint32_t cost_overhead;

int rx_queue_room(void)
{
    return (rx_head - rx_tail) < RX_QUEUE_SIZE;
}

void rx_queue_put(uint8_t byte)
{
    uint32_t head = rx_head;
    rx_queue[head % RX_QUEUE_SIZE] = byte;
    rx_head = head + 1u;
}

void systick_interrupt(void)
{
    systick_wraps = systick_wraps + 1u;
}

/* Ticks since start, read so that a wrap between the two reads is never missed. */
static uint64_t ticks_now(void)
{
    uint32_t wraps;
    uint32_t current;
    do {
        wraps = systick_wraps;
        current = SYST_CVR;
    } while (wraps != systick_wraps);
    return ((uint64_t)wraps << 24) + (uint64_t)(SYSTICK_RELOAD - current);
}

void board_cost_begin(void)
{
    cost_start_ticks = ticks_now();
}

static uint32_t cost_raw(void)
{
    uint64_t ticks = ticks_now() - cost_start_ticks;
    uint64_t scaled = (ticks * COST_PER_TICK_NUM + COST_PER_TICK_DEN / 2u) / COST_PER_TICK_DEN;
    return scaled > UINT32_MAX ? UINT32_MAX : (uint32_t)scaled;
}

uint32_t board_cost_end(void)
{
    uint32_t cost = cost_raw();
    return cost > cost_overhead ? cost - cost_overhead : 0u;
}

void board_init(void)
{
    SYST_RVR = SYSTICK_RELOAD;
    SYST_CVR = 0u;
    SYST_CSR = 0x7u; /* processor clock, wrap interrupt, enabled */
    board_cost_begin();
    cost_overhead = cost_raw();
    uart_start(BOARD_BAUD);
    interrupts_on();
}

int board_read_byte(void)
{
    interrupts_off();
    while (rx_head == rx_tail) {
        /* WFI wakes on a pending interrupt even with interrupts off; the handler runs once they
         * are back on, so no byte can slip in between the test and the sleep. */
        wait_for_interrupt();
        interrupts_on();
        interrupts_off();
    }
    uint32_t tail = rx_tail;
    uint8_t byte = rx_queue[tail % RX_QUEUE_SIZE];
    rx_tail = tail + 1u;
    interrupts_on();
    uart_receive_interrupt(1);
    return byte;
}

void board_write(const uint8_t *bytes, size_t count)
{
    for (size_t i = 0; i < count; ++i) {
        uart_send(bytes[i]);
    }
}
