/*
 * Host port: the same core, on Linux, against a script of pin changes in virtual time.
 *
 *   blhost run [options] SCRIPT      run the core; the bytes it sends go to stdout
 *   blhost encode                    encode records given as text on stdin (golden vectors):
 *                                    form L|P, seq N, bits N, maxedges N, version 1|2, then one
 *                                    record a line: announce HZ BITS CHANNELS ID |
 *                                    drive CH LEVEL TICK [CYCLE] |
 *                                    beat TICK CAPTURED DROPPED [SHORT CH:CYCLES ...] |
 *                                    planok CH ON_US OFF_US CYCLES | gook MASK TICK |
 *                                    pong TOKEN | notice TEXT | edges CH:LEVEL:TICK ...
 *   blhost cobs | crc                COBS-encode stdin / print the CRC-32 of stdin
 *   blhost selftest                  the core's own C checks
 *
 * A script has one event a line, in non-decreasing tick order ('#' starts a comment):
 *
 *   TICK edge CHANNEL LEVEL          contact CHANNEL becomes LEVEL (1 = closed) at TICK
 *   TICK cmd TEXT                    the host sends the command line TEXT at TICK
 *   TICK end                         stop
 *
 * Edges at the same tick reach the core as one interrupt, as simultaneous pin changes would; a
 * channel that changes and changes back within one tick is a pulse too short to time.
 *
 * Virtual time: the main loop takes --step ticks a pass; an edge is timestamped at its exact tick
 * however long the pass (zero interrupt latency). With --baud the UART drains at baud/10 bytes a
 * second of virtual time through a 256-byte ring, as on the board; without it output never waits.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../core/bl_capture.h"
#include "../core/bl_core.h"
#include "../core/bl_port.h"
#include "../core/bl_wire.h"

#define TX_RING 256u
#define RX_BUF 8192u

static uint64_t vt;
static uint32_t vt_mask = 0xFFFFFFFFu;
static bl_mask_t pins;
static uint8_t actuator[BL_MAX_CHANNELS];
static FILE *actuator_log;

static uint32_t baud;
static uint8_t tx_ring[TX_RING];
static uint16_t tx_len;
static uint64_t tx_credit; /* bytes * clock_hz, drained by virtual time */
static uint32_t clock_hz = 1000000u;

static char rx_buf[RX_BUF];
static uint32_t rx_head, rx_tail;

uint32_t bl_port_now(void)
{
    return (uint32_t)vt & vt_mask;
}

bl_mask_t bl_port_read_levels(void)
{
    return pins;
}

void bl_port_set_actuator(uint8_t channel, uint8_t on)
{
    if (channel >= BL_MAX_CHANNELS || actuator[channel] == on)
        return;
    actuator[channel] = on;
    if (actuator_log)
        fprintf(actuator_log, "%llu %u %u\n", (unsigned long long)vt, channel, on);
}

uint16_t bl_port_tx_room(void)
{
    return baud ? (uint16_t)(TX_RING - 1u - tx_len) : 0xFFFFu;
}

void bl_port_tx(uint8_t byte)
{
    if (!baud) {
        putchar(byte);
        return;
    }
    if (tx_len >= TX_RING - 1u) {
        fprintf(stderr, "blhost: the core wrote to a full UART ring\n");
        exit(3);
    }
    tx_ring[tx_len++] = byte;
}

int bl_port_rx(void)
{
    if (rx_tail == rx_head)
        return -1;
    return (unsigned char)rx_buf[rx_tail++ % RX_BUF];
}

bl_irqstate_t bl_port_irq_save(void)
{
    return 0; /* nothing runs concurrently in virtual time */
}

void bl_port_irq_restore(bl_irqstate_t state)
{
    (void)state;
}

static void tx_drain(uint32_t ticks)
{
    if (!baud)
        return;
    tx_credit += (uint64_t)ticks * (baud / 10u);
    uint32_t n = (uint32_t)(tx_credit / clock_hz);
    if (n > tx_len)
        n = tx_len;
    tx_credit -= (uint64_t)n * clock_hz;
    if (!tx_len)
        tx_credit = 0; /* an idle line saves no credit */
    fwrite(tx_ring, 1, n, stdout);
    memmove(tx_ring, tx_ring + n, tx_len - n);
    tx_len = (uint16_t)(tx_len - n);
}

/* ---- script ---- */

enum { EV_EDGE, EV_CMD, EV_END };

typedef struct {
    uint64_t tick;
    uint8_t kind, channel, level;
    char *text;
} event_t;

static int fail(const char *what, unsigned line)
{
    fprintf(stderr, "blhost: script line %u: %s\n", line, what);
    return 2;
}

static int load_script(FILE *f, event_t **out, size_t *count, unsigned channels)
{
    char line[512];
    unsigned no = 0;
    size_t n = 0, cap = 256;
    event_t *ev = malloc(cap * sizeof *ev); /* the host tool may use the heap; the core never does */
    uint64_t last = 0;
    while (fgets(line, sizeof line, f)) {
        no++;
        char *hash = strchr(line, '#');
        if (hash)
            *hash = 0;
        line[strcspn(line, "\r\n")] = 0;
        char *p = line;
        while (*p == ' ' || *p == '\t')
            p++;
        if (!*p)
            continue;
        char *end;
        unsigned long long t = strtoull(p, &end, 10);
        if (end == p)
            return fail("expected a tick", no);
        if (t < last)
            return fail("ticks must not decrease", no);
        last = t;
        p = end + strspn(end, " \t");
        if (n == cap)
            ev = realloc(ev, (cap *= 2) * sizeof *ev);
        event_t *e = &ev[n];
        memset(e, 0, sizeof *e);
        e->tick = t;
        unsigned ch, lv;
        if (strncmp(p, "edge ", 5) == 0 && sscanf(p + 5, "%u %u", &ch, &lv) == 2) {
            if (ch >= channels || lv > 1)
                return fail("channel or level out of range", no);
            e->kind = EV_EDGE;
            e->channel = (uint8_t)ch;
            e->level = (uint8_t)lv;
        } else if (strncmp(p, "cmd ", 4) == 0) {
            e->kind = EV_CMD;
            e->text = strdup(p + 4);
        } else if (strcmp(p, "end") == 0) {
            e->kind = EV_END;
        } else {
            return fail("expected edge, cmd or end", no);
        }
        n++;
    }
    *out = ev;
    *count = n;
    return 0;
}

static void usage(void)
{
    fprintf(stderr,
            "usage: blhost run [--clock-hz N] [--bits N] [--channels N] [--form L|P] [--baud N]\n"
            "                  [--step N] [--board ID] [--actuator-log FILE] SCRIPT\n"
            "       blhost encode | cobs | crc | selftest\n");
}

static int run(int argc, char **argv)
{
    bl_board_t board = {.clock_hz = 1000000u, .counter_bits = 32, .channels = 8, .packed = 0,
                        .board_id = "blref-host"};
    uint32_t step = 10;
    const char *path = NULL;
    for (int i = 0; i < argc; i++) {
        const char *a = argv[i];
        const char *v = i + 1 < argc ? argv[i + 1] : NULL;
        if (a[0] != '-' || !a[1]) {
            path = a;
            continue;
        }
        if (!v) {
            usage();
            return 2;
        }
        i++;
        if (!strcmp(a, "--clock-hz"))
            board.clock_hz = (uint32_t)strtoul(v, NULL, 10);
        else if (!strcmp(a, "--bits"))
            board.counter_bits = (uint8_t)atoi(v);
        else if (!strcmp(a, "--channels"))
            board.channels = (uint8_t)atoi(v);
        else if (!strcmp(a, "--form"))
            board.packed = v[0] == 'P';
        else if (!strcmp(a, "--baud"))
            baud = (uint32_t)strtoul(v, NULL, 10);
        else if (!strcmp(a, "--step"))
            step = (uint32_t)strtoul(v, NULL, 10);
        else if (!strcmp(a, "--board"))
            board.board_id = v;
        else if (!strcmp(a, "--actuator-log"))
            actuator_log = fopen(v, "w");
        else {
            usage();
            return 2;
        }
    }
    if (!path || board.counter_bits < 16 || board.counter_bits > 32 || !board.channels ||
        board.channels > BL_MAX_CHANNELS || !board.clock_hz || !step) {
        usage();
        return 2;
    }
    FILE *f = strcmp(path, "-") ? fopen(path, "r") : stdin;
    if (!f) {
        perror(path);
        return 2;
    }
    event_t *ev;
    size_t n;
    int rc = load_script(f, &ev, &n, board.channels);
    if (rc)
        return rc;
    clock_hz = board.clock_hz;
    vt_mask = board.counter_bits >= 32 ? 0xFFFFFFFFu : ((1u << board.counter_bits) - 1u);

    /* without an end event, run on for 20 ms so the last frame's flush timeout passes */
    uint64_t end_tick = n ? ev[n - 1].tick + board.clock_hz / 50u : 0;
    for (size_t k = 0; k < n; k++)
        if (ev[k].kind == EV_END) {
            end_tick = ev[k].tick;
            break;
        }

    bl_init(&board);
    size_t i = 0;
    int done = 0;
    while (!done) {
        while (i < n && ev[i].tick <= vt) {
            uint64_t t = ev[i].tick;
            uint8_t edges = 0;
            for (; i < n && ev[i].tick == t && ev[i].kind == EV_EDGE; i++) {
                bl_mask_t bit = (bl_mask_t)(1u << ev[i].channel);
                pins = ev[i].level ? (bl_mask_t)(pins | bit) : (bl_mask_t)(pins & ~bit);
                edges = 1;
            }
            if (edges) {
                bl_capture_isr((uint32_t)t & vt_mask, pins, (bl_mask_t)~0u);
                continue;
            }
            if (ev[i].kind == EV_CMD) {
                for (const char *c = ev[i].text; *c; c++)
                    rx_buf[rx_head++ % RX_BUF] = *c;
                rx_buf[rx_head++ % RX_BUF] = '\n';
            }
            i++;
        }
        bl_poll();
        tx_drain(step);
        if (vt >= end_tick)
            done = 1;
        vt += step;
    }
    fwrite(tx_ring, 1, tx_len, stdout);
    fflush(stdout);
    if (actuator_log)
        fclose(actuator_log);
    fprintf(stderr, "blhost: captured %u dropped %u short %u\n", bl_captured(), bl_dropped(),
            bl_short_pulses());
    return 0;
}

/* ---- golden-vector encoder ---- */

static void put_stdout(uint8_t b)
{
    putchar(b);
}

static int encode(void)
{
    uint8_t raw[1100];
    char line[4096];
    uint16_t seq = 0;
    int packed = 1;
    uint8_t digits = 8;
    uint32_t tick_mask = 0xFFFFFFFFu;
    unsigned max_edges = BL_FRAME_EDGES;
    unsigned no = 0;
    while (fgets(line, sizeof line, stdin)) {
        no++;
        line[strcspn(line, "\r\n")] = 0;
        char word[16] = "";
        int used = 0;
        if (sscanf(line, "%15s %n", word, &used) < 1)
            continue;
        const char *rest = line + used;
        uint16_t len = 0;
        uint8_t ll = 0;
        char *text = (char *)raw;
        unsigned a, b;
        unsigned long t, c, d;
        if (!strcmp(word, "form")) {
            packed = rest[0] == 'P';
            continue;
        } else if (!strcmp(word, "seq")) {
            seq = (uint16_t)strtoul(rest, NULL, 10);
            continue;
        } else if (!strcmp(word, "bits")) {
            unsigned bits = (unsigned)atoi(rest);
            if (bits < 16 || bits > 32)
                return fail("the reference core carries counters of 16 to 32 bits", no);
            digits = (uint8_t)((bits + 3u) / 4u);
            tick_mask = bits == 32 ? 0xFFFFFFFFu : ((1u << bits) - 1u);
            continue;
        } else if (!strcmp(word, "maxedges")) {
            max_edges = (unsigned)atoi(rest);
            continue;
        } else if (!strcmp(word, "announce")) {
            unsigned long hz;
            char id[64];
            if (sscanf(rest, "%lu %u %u %63s", &hz, &a, &b, id) != 4)
                return fail("announce CLOCK BITS CHANNELS ID", no);
            if (packed)
                len = bl_pack_announce(raw, (uint32_t)hz, (uint8_t)a, (uint8_t)b, id);
            else
                ll = bl_line_announce(text, (uint32_t)hz, (uint8_t)a, (uint8_t)b, id);
        } else if (!strcmp(word, "version")) {
            bl_wire_version = (uint8_t)atoi(rest);
            continue;
        } else if (!strcmp(word, "drive")) {
            unsigned long cyc;
            int got = sscanf(rest, "%u %u %lu %lu", &a, &b, &t, &cyc);
            if (got < 3)
                return fail("drive CH LEVEL TICK [CYCLE]", no);
            if (got == 4 && packed)
                len = bl_pack_drive2(raw, (uint8_t)a, (uint8_t)b, (uint32_t)t, (uint32_t)cyc);
            else if (got == 4)
                ll = bl_line_drive2(text, (uint8_t)a, (uint8_t)b, (uint32_t)t, digits, (uint32_t)cyc);
            else if (packed)
                len = bl_pack_drive(raw, (uint8_t)a, (uint8_t)b, (uint32_t)t);
            else
                ll = bl_line_drive(text, (uint8_t)a, (uint8_t)b, (uint32_t)t, digits);
        } else if (!strcmp(word, "beat")) {
            /* beat TICK CAPTURED DROPPED [SHORT CH:CYCLES ...] */
            unsigned long sp;
            int k = 0;
            if (sscanf(rest, "%lu %lu %lu%n", &t, &c, &d, &k) != 3)
                return fail("beat TICK CAPTURED DROPPED [SHORT CH:CYCLES ...]", no);
            const char *q = rest + k;
            int k2 = 0;
            if (sscanf(q, " %lu%n", &sp, &k2) == 1) {
                uint32_t cycles[BL_MAX_CHANNELS] = {0};
                bl_mask_t listed = 0;
                unsigned ch;
                unsigned long cy;
                q += k2;
                while (sscanf(q, " %u:%lu%n", &ch, &cy, &k2) == 2) {
                    if (ch >= BL_MAX_CHANNELS || (listed >> ch) & 1u)
                        return fail("beat counts need distinct channels below BL_MAX_CHANNELS", no);
                    listed |= (bl_mask_t)(1u << ch);
                    cycles[ch] = (uint32_t)cy;
                    q += k2;
                }
                if (packed)
                    len = bl_pack_beat2(raw, (uint32_t)t, (uint32_t)c, (uint32_t)d, (uint32_t)sp, listed, cycles);
                else
                    ll = bl_line_beat2(text, (uint32_t)t, (uint32_t)c, (uint32_t)d, digits, (uint32_t)sp, listed,
                                       cycles);
            } else if (packed)
                len = bl_pack_beat(raw, (uint32_t)t, (uint32_t)c, (uint32_t)d);
            else
                ll = bl_line_beat(text, (uint32_t)t, (uint32_t)c, (uint32_t)d, digits);
        } else if (!strcmp(word, "planok")) {
            unsigned long on, off, cy;
            if (sscanf(rest, "%u %lu %lu %lu", &a, &on, &off, &cy) != 4)
                return fail("planok CH ON_US OFF_US CYCLES", no);
            if (packed)
                len = bl_pack_plan_ok(raw, (uint8_t)a, (uint32_t)on, (uint32_t)off, (uint32_t)cy);
            else
                ll = bl_line_plan_ok(text, (uint8_t)a, (uint32_t)on, (uint32_t)off, (uint32_t)cy);
        } else if (!strcmp(word, "gook")) {
            if (sscanf(rest, "%u %lu", &a, &t) != 2)
                return fail("gook MASK TICK", no);
            if (packed)
                len = bl_pack_go_ok(raw, (uint16_t)a, (uint32_t)t);
            else
                ll = bl_line_go_ok(text, (uint16_t)a, (uint32_t)t, digits);
        } else if (!strcmp(word, "pong")) {
            if (sscanf(rest, "%u", &a) != 1)
                return fail("pong TOKEN", no);
            if (packed)
                len = bl_pack_pong(raw, (uint16_t)a);
            else
                ll = bl_line_pong(text, (uint16_t)a);
        } else if (!strcmp(word, "notice")) {
            if (packed)
                len = bl_pack_notice(raw, rest);
            else
                ll = bl_line_notice(text, rest);
        } else if (!strcmp(word, "edges")) {
            /*
             * edges CH:LEVEL:TICK ... : absolute ticks, split into packed frames the way the core
             * splits them (a new frame at max_edges or when a delta would pass 65535), or one
             * line per edge
             */
            char *p = (char *)rest;
            uint32_t last = 0;
            uint8_t count = 0;
            for (;;) {
                unsigned ch, lv;
                unsigned long tick;
                int k = 0;
                int more = sscanf(p, " %u:%u:%lu%n", &ch, &lv, &tick, &k) == 3;
                uint32_t delta = more ? ((uint32_t)tick - last) & tick_mask : 0;
                if (packed && count && (!more || count >= max_edges || delta > 0xFFFFu)) {
                    raw[BL_HDR + 8] = count;
                    bl_frame_header(raw, BL_T_EDGES, seq++);
                    bl_cobs_put(raw, bl_frame_seal(raw, (uint16_t)(BL_EDGES_HEAD + 3u * count)), put_stdout);
                    count = 0;
                }
                if (!more)
                    break;
                p += k;
                if (!packed) {
                    char l[48];
                    fwrite(l, 1, bl_line_edge(l, (uint8_t)ch, (uint8_t)lv, (uint32_t)tick, digits), stdout);
                    continue;
                }
                if (!count) {
                    bl_le64_from32(raw + BL_HDR, (uint32_t)tick);
                    delta = 0;
                }
                raw[BL_EDGES_HEAD + 3u * count] = (uint8_t)(ch | (lv ? 0x80u : 0u));
                bl_le16(raw + BL_EDGES_HEAD + 3u * count + 1, (uint16_t)delta);
                count++;
                last = (uint32_t)tick;
            }
            continue;
        } else {
            return fail("unknown record", no);
        }
        if (packed) {
            static const struct {
                const char *w;
                uint8_t t;
            } types[] = {{"announce", BL_T_ANNOUNCE}, {"drive", BL_T_DRIVE}, {"beat", BL_T_BEAT},
                         {"pong", BL_T_PONG},         {"notice", BL_T_NOTICE}, {"planok", BL_T_PLAN_OK},
                         {"gook", BL_T_GO_OK}};
            uint8_t type = 0;
            for (unsigned k = 0; k < sizeof types / sizeof types[0]; k++)
                if (!strcmp(word, types[k].w))
                    type = types[k].t;
            bl_frame_header(raw, type, seq++);
            bl_cobs_put(raw, bl_frame_seal(raw, len), put_stdout);
        } else {
            fwrite(text, 1, ll, stdout);
        }
    }
    fflush(stdout);
    return 0;
}

static size_t slurp(uint8_t *buf, size_t cap)
{
    return fread(buf, 1, cap, stdin);
}

int bl_selftest(void);

int main(int argc, char **argv)
{
    if (argc < 2) {
        usage();
        return 2;
    }
    if (!strcmp(argv[1], "run"))
        return run(argc - 2, argv + 2);
    if (!strcmp(argv[1], "encode"))
        return encode();
    if (!strcmp(argv[1], "selftest"))
        return bl_selftest();
    if (!strcmp(argv[1], "cobs") || !strcmp(argv[1], "crc")) {
        static uint8_t buf[65535];
        size_t n = slurp(buf, sizeof buf);
        if (argv[1][0] == 'c' && argv[1][1] == 'o')
            bl_cobs_put(buf, (uint16_t)n, put_stdout);
        else
            printf("%08x\n", bl_crc32(buf, (uint16_t)n));
        return 0;
    }
    usage();
    return 2;
}
