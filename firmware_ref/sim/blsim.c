/*
 * Emulator harness: runs the AVR build in libsimavr, drives its contact inputs from a script at
 * exact emulated times, and bridges its UART to a pseudo-terminal (or a file).
 *
 *   blsim --elf FILE --script FILE [--pty | --out FILE] [--packed-strap] [--actuator-log FILE]
 *         [--relay US]
 *
 * Script lines (emulated nanoseconds since reset, non-decreasing; '#' starts a comment):
 *
 *   NS edge CHANNEL LEVEL     contact CHANNEL closes (1) or opens (0): its pull-up pin goes low/high
 *   NS cmd TEXT               send the command line TEXT to the sampler's UART
 *   NS end                    stop the emulation
 *
 * A pin changes at the first instruction boundary at or after its cycle (at most 4 cycles, 250 ns,
 * late at 16 MHz). With --pty the harness prints "pty PATH" on stdout, waits for a line on stdin
 * (so the reader can open the port first), runs no faster than real time (so the host's commands
 * arrive when a bench's would), prints "done CYCLES cycles, stack N bytes at most", and keeps the terminal
 * open until stdin closes. Bytes the host writes to the terminal reach the emulated UART receiver. The
 * line "reset" on stdin while the emulation runs power-cycles the board (see power_cycle; logged as
 * "NS reset" in the actuator log); any other line (or the end) ends it, as an `end` event would.
 *
 * --relay US puts a relay on every channel: its contact follows its actuator, closing US microseconds
 * after the actuator switches on (touching, reopening 40 us later, closing for good 60 us after that)
 * and opening US / 2 microseconds after it switches off (with one reclosure of 30 us). Script edges and
 * relay edges on one channel are not meant to be mixed.
 * Wiring (as on the board, see ../README.md): channels 0-5 on PD2-PD7, 6-7 on PB0-PB1; actuators
 * 0-5 on PC0-PC5, 6-7 on PB2-PB3; strap PB4.
 */
#define _DEFAULT_SOURCE
#include <errno.h>
#include <fcntl.h>
#include <poll.h>
#include <pty.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <termios.h>
#include <time.h>
#include <unistd.h>

#include <avr_ioport.h>
#include <avr_uart.h>
#include <sim_avr.h>
#include <sim_elf.h>
#include <sim_irq.h>

#define FREQ 16000000u

enum { EV_EDGE, EV_CMD, EV_END };

typedef struct {
    uint64_t cycle, ns;
    int kind, channel, level;
    char *text;
} event_t;

static avr_t *avr;
static int out_fd = -1;
static FILE *actuator_log;
static avr_irq_t *pin_irq[8];
static int trace_uart; /* BLSIM_TRACE=1: each UART byte and its cycle on stderr */

static uint8_t rx_queue[65536];
static size_t rx_head, rx_tail;
static int uart_ready = 1;
static avr_irq_t *uart_in;
static uint8_t last_portc, last_portb;

/* relay contacts that follow the actuators (--relay): pending contact changes, any order */
typedef struct {
    uint64_t cycle;
    int channel, level;
} relay_ev_t;
static relay_ev_t relay_ev[256];
static unsigned relay_n;
static uint64_t relay_cycles; /* operate delay in CPU cycles; 0 = no relays */

static avr_ioport_external_t ext_d = {.name = 'D', .mask = 0xFC, .value = 0xFC};
static avr_ioport_external_t ext_b = {.name = 'B', .mask = 0x13, .value = 0x13};

static void set_external(void)
{
    avr_ioctl(avr, AVR_IOCTL_IOPORT_SET_EXTERNAL('D'), &ext_d);
    avr_ioctl(avr, AVR_IOCTL_IOPORT_SET_EXTERNAL('B'), &ext_b);
}

static void die(const char *what)
{
    fprintf(stderr, "blsim: %s\n", what);
    exit(2);
}

static void write_all(int fd, const uint8_t *p, size_t n)
{
    while (n) {
        ssize_t w = write(fd, p, n);
        if (w < 0) {
            if (errno == EINTR || errno == EAGAIN)
                continue;
            die("cannot write the UART output");
        }
        p += w;
        n -= (size_t)w;
    }
}

static void uart_out(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)param;
    uint8_t b = (uint8_t)value;
    write_all(out_fd, &b, 1);
    if (trace_uart)
        fprintf(stderr, "uart %llu %02x\n", (unsigned long long)avr->cycle, b);
}

static void feed_uart(void)
{
    while (uart_ready && rx_tail != rx_head)
        avr_raise_irq(uart_in, rx_queue[rx_tail++ % sizeof rx_queue]);
}

static void uart_xon(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)value;
    (void)param;
    uart_ready = 1;
    feed_uart();
}

static void uart_xoff(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)value;
    (void)param;
    uart_ready = 0;
}

static void queue_rx(const uint8_t *p, size_t n)
{
    while (n--)
        rx_queue[rx_head++ % sizeof rx_queue] = *p++;
    feed_uart();
}

static void relay_add(uint64_t cycle, int channel, int level)
{
    if (relay_n == sizeof relay_ev / sizeof relay_ev[0])
        die("too many relay contact changes pending");
    relay_ev[relay_n++] = (relay_ev_t){cycle, channel, level};
}

/* A relay's contact answers its coil: a make with one reopening, a break with one reclosure. */
static void relay_follow(int channel, int on)
{
    uint64_t us = FREQ / 1000000u;
    if (on) {
        uint64_t t = avr->cycle + relay_cycles;
        relay_add(t, channel, 1);
        relay_add(t + 40 * us, channel, 0);
        relay_add(t + 100 * us, channel, 1);
    } else {
        uint64_t t = avr->cycle + relay_cycles / 2;
        relay_add(t, channel, 0);
        relay_add(t + 30 * us, channel, 1);
        relay_add(t + 80 * us, channel, 0);
    }
}

/* Actuator outputs: log each switching with its emulated time; relays follow them. */
static void port_changed(uint8_t now, uint8_t *last, uint8_t mask, int shift, int first_channel)
{
    uint8_t changed = (uint8_t)((now ^ *last) & mask);
    *last = now;
    for (int bit = 0; bit < 8; bit++) {
        if (!(changed & (1u << bit)))
            continue;
        if (actuator_log)
            fprintf(actuator_log, "%llu %d %d\n", (unsigned long long)(avr->cycle * 1000000000ull / FREQ),
                    first_channel + bit - shift, (now >> bit) & 1);
        if (relay_cycles)
            relay_follow(first_channel + bit - shift, (now >> bit) & 1);
    }
}

static void portc_out(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)param;
    port_changed((uint8_t)value, &last_portc, 0x3F, 0, 0);
}

static void portb_out(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)param;
    port_changed((uint8_t)value, &last_portb, 0x0C, 2, 6);
}

/* Raise a pin's level even where its IRQ already holds it (simavr passes on only a change). */
static void raise_again(avr_irq_t *irq, uint32_t level)
{
    irq->value = !level;
    avr_raise_irq(irq, level);
}

/*
 * The board loses its supply and gets it back (a bus-powered board whose cable was pulled): the
 * actuators drop out (logged as switching off; relays follow), bytes not yet through the UART are lost,
 * and the firmware starts again at its reset vector. The contacts keep their levels; the reset vector
 * finds them as they are.
 */
static void power_cycle(void)
{
    port_changed(0, &last_portc, 0x3F, 0, 0);
    port_changed((uint8_t)(last_portb & ~0x0Cu), &last_portb, 0x0C, 2, 6);
    if (actuator_log)
        fprintf(actuator_log, "%llu reset\n", (unsigned long long)(avr->cycle * 1000000000ull / FREQ));
    rx_tail = rx_head;
    avr_reset(avr);
    uart_ready = 1;
    set_external();
    /*
     * The reset cleared the PIN registers, but each pin's IRQ still holds its level: raised again (the
     * stored level flipped first, with no notification, so no pin change reaches the part).
     */
    for (int ch = 0; ch < 8; ch++)
        raise_again(pin_irq[ch], ch < 6 ? (ext_d.value >> (ch + 2)) & 1 : (ext_b.value >> (ch - 6)) & 1);
    raise_again(avr_io_getirq(avr, AVR_IOCTL_IOPORT_GETIRQ('B'), IOPORT_IRQ_PIN4), (ext_b.value >> 4) & 1);
}

/* A contact closes (1) or opens (0): its pull-up pin goes low or high. */
static void set_contact(int channel, int level)
{
    int high = !level;
    if (channel < 6)
        ext_d.value = (ext_d.value & ~(1u << (channel + 2))) | (unsigned)high << (channel + 2);
    else
        ext_b.value = (ext_b.value & ~(1u << (channel - 6))) | (unsigned)high << (channel - 6);
    set_external();
    avr_raise_irq(pin_irq[channel], (uint32_t)high);
}

static size_t load_script(const char *path, event_t **out)
{
    FILE *f = fopen(path, "r");
    if (!f)
        die("cannot open the script");
    char line[512];
    size_t n = 0, cap = 256;
    event_t *ev = malloc(cap * sizeof *ev);
    uint64_t last = 0;
    unsigned no = 0;
    while (fgets(line, sizeof line, f)) {
        no++;
        char *hash = strchr(line, '#');
        if (hash)
            *hash = 0;
        line[strcspn(line, "\r\n")] = 0;
        char *p = line + strspn(line, " \t");
        if (!*p)
            continue;
        char *end;
        unsigned long long ns = strtoull(p, &end, 10);
        if (end == p || ns < last) {
            fprintf(stderr, "blsim: script line %u: expected a non-decreasing time in ns\n", no);
            exit(2);
        }
        last = ns;
        p = end + strspn(end, " \t");
        if (n == cap)
            ev = realloc(ev, (cap *= 2) * sizeof *ev);
        event_t *e = &ev[n];
        memset(e, 0, sizeof *e);
        e->ns = ns;
        e->cycle = ns * FREQ / 1000000000ull;
        if (strncmp(p, "edge ", 5) == 0 && sscanf(p + 5, "%d %d", &e->channel, &e->level) == 2 &&
            e->channel >= 0 && e->channel < 8 && (e->level == 0 || e->level == 1)) {
            e->kind = EV_EDGE;
        } else if (strncmp(p, "cmd ", 4) == 0) {
            e->kind = EV_CMD;
            e->text = strdup(p + 4);
        } else if (strcmp(p, "end") == 0) {
            e->kind = EV_END;
        } else {
            fprintf(stderr, "blsim: script line %u: expected edge, cmd or end\n", no);
            exit(2);
        }
        n++;
    }
    fclose(f);
    *out = ev;
    return n;
}

static void raw_mode(int fd)
{
    struct termios t;
    if (tcgetattr(fd, &t) == 0) {
        cfmakeraw(&t);
        tcsetattr(fd, TCSANOW, &t);
    }
}

int main(int argc, char **argv)
{
    const char *elf = NULL, *script = NULL, *out_path = NULL, *log_path = NULL;
    int use_pty = 0, packed_strap = 0;
    for (int i = 1; i < argc; i++) {
        if (!strcmp(argv[i], "--elf") && i + 1 < argc)
            elf = argv[++i];
        else if (!strcmp(argv[i], "--script") && i + 1 < argc)
            script = argv[++i];
        else if (!strcmp(argv[i], "--out") && i + 1 < argc)
            out_path = argv[++i];
        else if (!strcmp(argv[i], "--actuator-log") && i + 1 < argc)
            log_path = argv[++i];
        else if (!strcmp(argv[i], "--pty"))
            use_pty = 1;
        else if (!strcmp(argv[i], "--packed-strap"))
            packed_strap = 1;
        else if (!strcmp(argv[i], "--relay") && i + 1 < argc && atoi(argv[i + 1]) > 0)
            relay_cycles = (uint64_t)atoi(argv[++i]) * (FREQ / 1000000u);
        else
            die("usage: blsim --elf FILE --script FILE [--pty | --out FILE] [--packed-strap] "
                "[--actuator-log FILE] [--relay US]");
    }
    if (!elf || !script || use_pty == !!out_path)
        die("usage: blsim --elf FILE --script FILE [--pty | --out FILE] [--packed-strap] "
            "[--actuator-log FILE] [--relay US]");

    event_t *ev;
    size_t n = load_script(script, &ev);
    trace_uart = getenv("BLSIM_TRACE") != NULL;
    if (log_path && !(actuator_log = fopen(log_path, "w")))
        die("cannot open the actuator log");

    int master = -1, slave = -1;
    char slave_name[128];
    if (use_pty) {
        if (openpty(&master, &slave, slave_name, NULL, NULL) < 0)
            die("cannot open a pseudo-terminal");
        raw_mode(slave); /* no echo, no line editing: the host sees exactly the UART's bytes */
        out_fd = master;
    } else {
        out_fd = open(out_path, O_WRONLY | O_CREAT | O_TRUNC, 0644);
        if (out_fd < 0)
            die("cannot open the output file");
    }

    elf_firmware_t fw;
    memset(&fw, 0, sizeof fw);
    if (elf_read_firmware(elf, &fw) != 0)
        die("cannot read the ELF file");
    avr = avr_make_mcu_by_name("atmega328p");
    if (!avr)
        die("simavr does not know the atmega328p");
    avr_init(avr);
    avr->frequency = FREQ;
    avr_load_firmware(avr, &fw);

    uint32_t flags = 0;
    avr_ioctl(avr, AVR_IOCTL_UART_GET_FLAGS('0'), &flags);
    flags &= ~(uint32_t)(AVR_UART_FLAG_STDIO | AVR_UART_FLAG_POLL_SLEEP);
    avr_ioctl(avr, AVR_IOCTL_UART_SET_FLAGS('0'), &flags);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_OUTPUT), uart_out, NULL);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_OUT_XON), uart_xon, NULL);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_OUT_XOFF), uart_xoff, NULL);
    uart_in = avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_INPUT);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_IOPORT_GETIRQ('C'), IOPORT_IRQ_PIN_ALL), portc_out, NULL);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_IOPORT_GETIRQ('B'), IOPORT_IRQ_PIN_ALL), portb_out, NULL);

    /*
     * Every contact open at reset (pins high) and the strap as asked. The levels are also declared
     * as the ports' external drive: simavr re-applies an input's internal pull-up whenever the
     * firmware writes its PORT register (the actuators share PORTB), and the external value is what
     * it applies instead.
     */
    for (int ch = 0; ch < 8; ch++) {
        pin_irq[ch] = ch < 6 ? avr_io_getirq(avr, AVR_IOCTL_IOPORT_GETIRQ('D'), IOPORT_IRQ_PIN0 + 2 + ch)
                             : avr_io_getirq(avr, AVR_IOCTL_IOPORT_GETIRQ('B'), IOPORT_IRQ_PIN0 + ch - 6);
    }
    ext_b.value = packed_strap ? 0x03 : 0x13;
    set_external();
    for (int ch = 0; ch < 8; ch++)
        avr_raise_irq(pin_irq[ch], 1);
    avr_raise_irq(avr_io_getirq(avr, AVR_IOCTL_IOPORT_GETIRQ('B'), IOPORT_IRQ_PIN4), packed_strap ? 0 : 1);

    if (use_pty) {
        printf("pty %s\n", slave_name);
        fflush(stdout);
        char go[64];
        if (!fgets(go, sizeof go, stdin))
            return 0;
        fcntl(master, F_SETFL, fcntl(master, F_GETFL) | O_NONBLOCK);
    }

    struct timespec started;
    clock_gettime(CLOCK_MONOTONIC, &started);
    size_t i = 0;
    uint64_t stop = n ? ev[n - 1].cycle + FREQ / 50u : FREQ / 10u;
    uint64_t next_poll = 0;
    int state = cpu_Running;
    /*
     * Deepest stack seen (SPL/SPH at data 0x5D/0x5E). A frame the compiler allocates writes SPH and SPL
     * in two instructions with one between them, so SP reads up to 256 bytes off for two samples; only
     * a depth held for three samples in a row counts.
     */
    uint16_t min_sp = 0xFFFF, sp1 = 0xFFFF, sp2 = 0xFFFF;
    while (state != cpu_Done && state != cpu_Crashed && avr->cycle < stop) {
        while (i < n && ev[i].cycle <= avr->cycle) {
            event_t *e = &ev[i++];
            if (e->kind == EV_EDGE) {
                set_contact(e->channel, e->level);
            } else if (e->kind == EV_CMD) {
                queue_rx((const uint8_t *)e->text, strlen(e->text));
                queue_rx((const uint8_t *)"\n", 1);
            } else {
                stop = e->cycle;
            }
        }
        for (unsigned k = 0; k < relay_n;) {
            if (relay_ev[k].cycle <= avr->cycle) {
                set_contact(relay_ev[k].channel, relay_ev[k].level);
                relay_ev[k] = relay_ev[--relay_n];
            } else {
                k++;
            }
        }
        if (use_pty && avr->cycle >= next_poll) {
            /* with --pty, emulated time never runs ahead of the wall clock: a host answers in time */
            struct timespec now;
            clock_gettime(CLOCK_MONOTONIC, &now);
            int64_t wall_ns = (int64_t)(now.tv_sec - started.tv_sec) * 1000000000 + (now.tv_nsec - started.tv_nsec);
            int64_t emu_ns = (int64_t)(avr->cycle * 1000000000ull / FREQ);
            if (emu_ns > wall_ns + 1000000)
                usleep((useconds_t)((emu_ns - wall_ns) / 1000));
            uint8_t buf[256];
            ssize_t r = read(master, buf, sizeof buf);
            if (r > 0)
                queue_rx(buf, (size_t)r);
            struct pollfd host = {.fd = 0, .events = POLLIN};
            if (poll(&host, 1, 0) > 0) {
                char said[64];
                if (fgets(said, sizeof said, stdin) && !strcmp(said, "reset\n"))
                    power_cycle(); /* the host pulled the board's supply */
                else
                    stop = avr->cycle; /* the host is done (another line or the end on stdin) */
            }
            next_poll = avr->cycle + 1600; /* every 100 us of emulated time */
        }
        state = avr_run(avr);
        uint16_t sp = (uint16_t)(avr->data[0x5D] | avr->data[0x5E] << 8);
        uint16_t held = sp > sp1 ? sp : sp1;
        if (sp2 > held)
            held = sp2;
        if (held < min_sp)
            min_sp = held;
        sp2 = sp1;
        sp1 = sp;
    }
    if (state == cpu_Crashed)
        die("the firmware crashed");
    if (actuator_log)
        fclose(actuator_log);
    if (use_pty) {
        printf("done %llu cycles, stack %u bytes at most\n", (unsigned long long)avr->cycle,
               (unsigned)(0x8FF - min_sp));
        fflush(stdout);
        char rest[64];
        while (fgets(rest, sizeof rest, stdin)) {
        }
        close(slave);
    } else {
        close(out_fd);
        fprintf(stderr, "blsim: done %llu cycles, stack %u bytes at most\n", (unsigned long long)avr->cycle,
                (unsigned)(0x8FF - min_sp)); /* RAMEND of the part */
    }
    return 0;
}
