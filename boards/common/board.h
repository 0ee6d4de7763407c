/* The few things the firmware harness needs from a board: a byte link, a cost counter, an end.
 *
 * Each board's glue (under boards/) implements these for its CPU and UART. The harness and the
 * generated step are the same C on every board; only this layer differs.
 */
#ifndef ORBITFIX_BOARD_H
#define ORBITFIX_BOARD_H

#include <stddef.h>
#include <stdint.h>

/* Bring up clocks, the UART at the profile's baud rate and the cost counter. */
void board_init(void);

/* Wait for the next byte from the host and return it (0..255). Waits asleep where it can. */
int board_read_byte(void);

/* Send bytes to the host; returns when they are queued or sent. */
void board_write(const uint8_t *bytes, size_t count);

/* Start measuring the cost of a piece of work. */
void board_cost_begin(void);

/* The cost since board_cost_begin, in the profile's cost unit (instructions, cycles or
 * nanoseconds). */
uint32_t board_cost_end(void);

/* End the run: an emulator exits with this code, a real board stops and waits. */
void board_finish(int code);

#endif
