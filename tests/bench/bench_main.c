/* Board benchmark firmware: the cost of one step of the generated Van der Pol step, the
 * hand-written integer reference and its float twin, each measured around single calls
 * (the counter's own cost taken off by the glue) and summed over BENCH_STEPS steps. Prints one
 * text line per step kind, then the generated state after BENCH_STEPS steps (for the golden
 * check), then "end", and ends the run. */
#include <stdint.h>

#include "board.h"
#include "vanderpol.h"
#include "vdp_reference.h"

#ifndef BENCH_STEPS
#define BENCH_STEPS 100
#endif

static void put_text(const char *text)
{
    const char *end = text;
    while (*end != '\0') {
        ++end;
    }
    board_write((const uint8_t *)text, (size_t)(end - text));
}

static void put_unsigned(uint32_t value)
{
    uint8_t digits[11];
    unsigned int at = sizeof digits;
    do {
        digits[--at] = (uint8_t)('0' + value % 10u);
        value /= 10u;
    } while (value != 0u);
    board_write(&digits[at], sizeof digits - at);
}

static void report(const char *name, uint32_t total)
{
    put_text(name);
    put_text(" ");
    put_unsigned(total);
    put_text(" ");
    put_unsigned((uint32_t)BENCH_STEPS);
    put_text("\n");
}

int main(void)
{
    board_init();
    put_text("bench " BOARD_NAME "\n");

    vanderpol_state_t generated;
    vanderpol_init(&generated);
    uint32_t total = 0u;
    for (int i = 0; i < BENCH_STEPS; ++i) {
        board_cost_begin();
        vanderpol_step(&generated);
        total += board_cost_end();
    }
    report("generated", total);

    int32_t reference[2] = {INT32_C(1) << 23, 0}; /* x = 0.5 in Q8.24 */
    total = 0u;
    for (int i = 0; i < BENCH_STEPS; ++i) {
        board_cost_begin();
        vdp_reference_step(reference);
        total += board_cost_end();
    }
    report("reference", total);

    float twin[2] = {0.5f, 0.0f};
    total = 0u;
    for (int i = 0; i < BENCH_STEPS; ++i) {
        board_cost_begin();
        vdp_float_step(twin);
        total += board_cost_end();
    }
    report("float", total);

    put_text("state ");
    put_unsigned((uint32_t)generated.x);
    put_text(" ");
    put_unsigned((uint32_t)generated.y);
    put_text("\nend\n");
    board_finish(0);
    return 0;
}
