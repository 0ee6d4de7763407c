/* Reset and vectors for every Cortex-M board: copy .data from flash, zero .bss, give the FPU
 * access on parts that have one, call main. Every external interrupt goes to the UART driver's
 * handler (the only interrupt the glue enables); SysTick counts the cost counter's wraps. */
#include <stdint.h>

#include "board.h"
#include "cortex_m.h"

extern uint32_t _data_load[], _data_start[], _data_end[], _bss_start[], _bss_end[], _stack_top[];

int main(void);
void reset_handler(void);
void fault_handler(void);

void reset_handler(void)
{
    const uint32_t *from = _data_load;
    for (uint32_t *to = _data_start; to < _data_end; ++to, ++from) {
        *to = *from;
    }
    for (uint32_t *to = _bss_start; to < _bss_end; ++to) {
        *to = 0u;
    }
#if defined(__ARM_FP)
    /* Full access to coprocessors 10 and 11 (the FPU); without it the first float instruction
     * faults. */
    SCB_CPACR |= 0xFu << 20;
    __asm__ volatile ("dsb\n\tisb" ::: "memory");
#endif
    board_finish(main());
}

/* A fault ends the run with code 70, so a host sees it rather than a silent hang. */
void fault_handler(void)
{
    board_finish(70);
}

typedef void (*vector_t)(void);

#define EXTERNAL_VECTORS 48
#define UART4 uart_interrupt, uart_interrupt, uart_interrupt, uart_interrupt
#define UART16 UART4, UART4, UART4, UART4

/* The initial stack pointer, then the handlers, as the core reads them at reset. */
struct vector_table {
    uint32_t *stack_top;
    vector_t handlers[15 + EXTERNAL_VECTORS];
};

__attribute__((section(".vectors"), used)) static const struct vector_table vectors = {
    _stack_top,
    {
        reset_handler,
        fault_handler, /* NMI */
        fault_handler, /* HardFault */
        fault_handler, /* MemManage */
        fault_handler, /* BusFault */
        fault_handler, /* UsageFault */
        0, 0, 0, 0,
        fault_handler, /* SVCall */
        0, 0,
        fault_handler, /* PendSV */
        systick_interrupt,
        UART16, UART16, UART16, /* EXTERNAL_VECTORS of them */
    },
};
