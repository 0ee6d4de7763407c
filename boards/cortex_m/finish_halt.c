/* End a run on a real part: interrupts off, sleep for good (a debugger or reset takes over). The
 * code is kept in a variable a debugger can read. */
#include <stdint.h>

#include "board.h"
#include "cortex_m.h"

volatile int board_exit_code;

void board_finish(int code)
{
    board_exit_code = code;
    interrupts_off();
    for (;;) {
        wait_for_interrupt();
    }
}
