/* The host board: board.h for a process on the development machine, so the firmware harness and
 * the link run in host-only CI. The link is standard input and output (the verifier puts the
 * process behind a pseudo-terminal); the cost counter is CLOCK_MONOTONIC in nanoseconds.
 */
#define _POSIX_C_SOURCE 200809L

#include <errno.h>
#include <stdlib.h>
#include <time.h>
#include <unistd.h>

#include "board.h"

static uint8_t in_buffer[512];
static size_t in_count;
static size_t in_next;
static struct timespec cost_start;

void board_init(void)
{
    in_count = 0u;
    in_next = 0u;
}

int board_read_byte(void)
{
    while (in_next == in_count) {
        const ssize_t got = read(STDIN_FILENO, in_buffer, sizeof in_buffer);
        if (got > 0) {
            in_count = (size_t)got;
            in_next = 0u;
        } else if (got < 0 && errno == EINTR) {
            continue;
        } else {
            board_finish(0); /* the host closed the link: the run is over */
        }
    }
    return in_buffer[in_next++];
}

void board_write(const uint8_t *bytes, size_t count)
{
    while (count > 0u) {
        const ssize_t put = write(STDOUT_FILENO, bytes, count);
        if (put > 0) {
            bytes += put;
            count -= (size_t)put;
        } else if (put < 0 && errno != EINTR && errno != EAGAIN) {
            board_finish(1);
        }
    }
}

void board_cost_begin(void)
{
    (void)clock_gettime(CLOCK_MONOTONIC, &cost_start);
}

uint32_t board_cost_end(void)
{
    struct timespec now;
    int64_t spent;
    (void)clock_gettime(CLOCK_MONOTONIC, &now);
    spent = ((int64_t)now.tv_sec - (int64_t)cost_start.tv_sec) * INT64_C(1000000000)
        + ((int64_t)now.tv_nsec - (int64_t)cost_start.tv_nsec);
    if (spent < 0) {
        return 0u;
    }
    return spent > (int64_t)UINT32_MAX ? UINT32_MAX : (uint32_t)spent;
}

void board_finish(int code)
{
    exit(code);
}
