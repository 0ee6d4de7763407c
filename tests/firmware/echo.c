/* Test firmware for the board glue alone (no protocol): announces itself, then serves three
 * one-byte commands from the host.
 *   'H'            send the announcement again (bytes sent at start can be lost on some
 *                  emulators, so a host asks)
 *   'E' n b1..bn   send the n bytes back
 *   'P'            pause (a busy loop of about a million instructions) while bytes pile up
 *   'S' n          stream n blocks of 64 bytes (0, 1, ..., 63 each) to the host
 *   'C'            cost of a counted loop of 1000 and of 2000 turns (two uint32, little-endian)
 *   'Q' c          end the run with exit code c
 */
#include <stdint.h>

#include "board.h"

static const uint8_t hello[] = "orbitfix echo " BOARD_NAME "\n";

/* A loop of exactly two instructions per turn (decrement and branch), written in assembly so
 * the count does not depend on the compiler. */
static void counted_loop(uint16_t turns)
{
#if defined(__arm__) && defined(__thumb2__)
    uint32_t count = turns;
    __asm__ volatile ("1: subs %0, %0, #1\n\tbne 1b" : "+l"(count) : : "cc");
#elif defined(__arm__)
    /* Thumb-1 inline assembly is read in the older divided syntax: SUB here sets the flags. */
    uint32_t count = turns;
    __asm__ volatile ("1: sub %0, #1\n\tbne 1b" : "+l"(count) : : "cc");
#elif defined(__AVR__)
    uint16_t count = turns;
    __asm__ volatile ("1: sbiw %0, 1\n\tbrne 1b" : "+w"(count) : : "cc");
#else
    volatile uint16_t count = turns;
    while (count != 0u) {
        count = (uint16_t)(count - 1u);
    }
#endif
}

static uint32_t loop_cost(uint16_t turns)
{
    board_cost_begin();
    counted_loop(turns);
    return board_cost_end();
}

static void put_u32(uint32_t value)
{
    uint8_t bytes[4];
    for (unsigned int i = 0; i < 4u; ++i) {
        bytes[i] = (uint8_t)(value >> (8u * i));
    }
    board_write(bytes, 4u);
}


int main(void)
{
    board_init();
    board_write(hello, sizeof hello - 1u);
    for (;;) {
        int command = board_read_byte();
        if (command == 'H') {
            board_write(hello, sizeof hello - 1u);
        } else if (command == 'E') {
            int count = board_read_byte();
            for (int i = 0; i < count; ++i) {
                uint8_t byte = (uint8_t)board_read_byte();
                board_write(&byte, 1u);
            }
        } else if (command == 'P') {
            for (unsigned int i = 0; i < 8u; ++i) {
                counted_loop(60000u);
            }
        } else if (command == 'S') {
            uint8_t block[64];
            for (unsigned int i = 0; i < sizeof block; ++i) {
                block[i] = (uint8_t)i;
            }
            for (int blocks = board_read_byte(); blocks > 0; --blocks) {
                board_write(block, sizeof block);
            }
        } else if (command == 'C') {
            put_u32(loop_cost(1000u));
            put_u32(loop_cost(2000u));
        } else if (command == 'Q') {
            board_finish(board_read_byte());
        }
    }
}
