/* A two-way serial link to an AVR simulated by simavr's library: the firmware's USART0 on a local
 * TCP socket, like QEMU's "-serial tcp:...,server=on,wait=on". simavr's own runner only prints
 * what the firmware sends; this program also feeds it what the host sends, and keeps simavr's
 * exact cycle count (so Timer1 counts real AVR cycles).
 *
 *   simavr_link MCU HZ PORT IMAGE
 *
 * It listens on 127.0.0.1:PORT and starts the AVR only once the host connects (no byte lost). It
 * ends when the firmware sleeps with interrupts off (exit code: GPIOR0, where board_finish puts
 * it), when the AVR crashes (exit 70), or a simulated second after the host disconnects (exit 0,
 * time enough for the firmware to act on the last bytes it was sent). Host program, built
 * with the host compiler against libsimavr (Debian: libsimavr-dev).
 */
#define _POSIX_C_SOURCE 200809L
#include <arpa/inet.h>
#include <errno.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <poll.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <unistd.h>

#include <simavr/avr_uart.h>
#include <simavr/sim_avr.h>
#include <simavr/sim_elf.h>
#include <simavr/sim_irq.h>

#define GPIOR0_ADDRESS 0x3E

static int peer = -1;
static int input_open = 1; /* the AVR's receive FIFO has room (simavr's XON/XOFF) */
static uint8_t pending[4096];
static size_t pending_count;
static size_t pending_at;
static int host_gone;

static void on_output(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)param;
    uint8_t byte = (uint8_t)value;
    while (!host_gone && send(peer, &byte, 1, MSG_NOSIGNAL) < 0) {
        if (errno != EINTR) {
            host_gone = 1;
        }
    }
}

static void on_xon(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)value;
    (void)param;
    input_open = 1;
}

static void on_xoff(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)value;
    (void)param;
    input_open = 0;
}

/* Take what the host sent, waiting up to wait_ms for it; feed it while the AVR has room. */
static void serve_host(avr_t *avr, avr_irq_t *input, int wait_ms)
{
    if (pending_at == pending_count && !host_gone) {
        struct pollfd watch = {peer, POLLIN, 0};
        if (poll(&watch, 1, wait_ms) > 0) {
            ssize_t got = recv(peer, pending, sizeof pending, 0);
            if (got <= 0) {
                host_gone = 1;
            } else {
                pending_count = (size_t)got;
                pending_at = 0;
            }
        }
    }
    while (input_open && pending_at < pending_count) {
        avr_raise_irq(input, pending[pending_at++]);
    }
    (void)avr;
}

static avr_irq_t *uart_input;

/* While the firmware sleeps until the next timed event, wait for the host instead of the wall
 * clock (up to that event's simulated time, at most 20 ms); simulated time then jumps to it. */
static void sleep_for_host(avr_t *avr, avr_cycle_count_t cycles)
{
    uint64_t ms = avr->frequency ? (uint64_t)cycles * 1000u / avr->frequency : 0u;
    serve_host(avr, uart_input, host_gone ? 0 : (int)(ms < 20u ? ms : 20u));
}

int main(int argc, char **argv)
{
    if (argc != 5) {
        fprintf(stderr, "usage: %s MCU HZ PORT IMAGE\n", argv[0]);
        return 2;
    }
    elf_firmware_t firmware;
    memset(&firmware, 0, sizeof firmware);
    if (elf_read_firmware(argv[4], &firmware) != 0) {
        fprintf(stderr, "simavr_link: cannot read %s\n", argv[4]);
        return 2;
    }
    avr_t *avr = avr_make_mcu_by_name(argv[1]);
    if (avr == NULL) {
        fprintf(stderr, "simavr_link: unknown part %s\n", argv[1]);
        return 2;
    }
    avr_init(avr);
    avr->frequency = (uint32_t)strtoul(argv[2], NULL, 10);
    avr_load_firmware(avr, &firmware);
    avr->log = 0;

    int listener = socket(AF_INET, SOCK_STREAM, 0);
    int yes = 1;
    setsockopt(listener, SOL_SOCKET, SO_REUSEADDR, &yes, sizeof yes);
    struct sockaddr_in address;
    memset(&address, 0, sizeof address);
    address.sin_family = AF_INET;
    address.sin_port = htons((uint16_t)atoi(argv[3]));
    address.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    if (bind(listener, (struct sockaddr *)&address, sizeof address) != 0 || listen(listener, 1) != 0) {
        fprintf(stderr, "simavr_link: cannot listen on port %s: %s\n", argv[3], strerror(errno));
        return 2;
    }
    fprintf(stderr, "simavr_link: waiting for connection on 127.0.0.1:%s\n", argv[3]);
    peer = accept(listener, NULL, NULL);
    close(listener);
    setsockopt(peer, IPPROTO_TCP, TCP_NODELAY, &yes, sizeof yes);

    uint32_t flags = 0;
    avr_ioctl(avr, AVR_IOCTL_UART_GET_FLAGS('0'), &flags);
    flags &= ~(uint32_t)(AVR_UART_FLAG_STDIO | AVR_UART_FLAG_POLL_SLEEP);
    avr_ioctl(avr, AVR_IOCTL_UART_SET_FLAGS('0'), &flags);
    uart_input = avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_INPUT);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_OUTPUT), on_output, NULL);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_OUT_XON), on_xon, NULL);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_OUT_XOFF), on_xoff, NULL);
    avr->sleep = sleep_for_host;

    unsigned long turn = 0;
    avr_cycle_count_t give_up = 0;
    for (;;) {
        int state = avr_run(avr);
        if (state == cpu_Done) {
            close(peer);
            return avr->data[GPIOR0_ADDRESS];
        }
        if (state == cpu_Crashed) {
            fprintf(stderr, "simavr_link: the AVR crashed at pc 0x%x\n", (unsigned int)avr->pc);
            close(peer);
            return 70;
        }
        if (++turn % 256u == 0u || (input_open && pending_at < pending_count)) {
            serve_host(avr, uart_input, 0);
        }
        if (host_gone && pending_at == pending_count) {
            if (give_up == 0) {
                give_up = avr->cycle + avr->frequency;
            } else if (avr->cycle >= give_up) {
                return 0;
            }
        }
    }
}
