/* End an emulated run: semihosting SYS_EXIT_EXTENDED makes the emulator exit with the code
 * (QEMU needs -semihosting-config enable=on,target=native). */
#include <stdint.h>

#include "board.h"

#define SYS_EXIT_EXTENDED 0x20u
#define ADP_STOPPED_APPLICATION_EXIT 0x20026u

void board_finish(int code)
{
    volatile uint32_t block[2] = {ADP_STOPPED_APPLICATION_EXIT, (uint32_t)code};
    register uint32_t operation __asm__("r0") = SYS_EXIT_EXTENDED;
    register volatile uint32_t *argument __asm__("r1") = block;
    for (;;) {
        __asm__ volatile ("bkpt 0xAB" : : "r"(operation), "r"(argument) : "memory");
    }
}
