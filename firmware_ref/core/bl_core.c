/*
 * The sampler core: capture queue (main-loop side), record output in either form, host commands,
 * the cycle driver and beats. No heap, no floating point; 64-bit arithmetic only where a command
 * converts microseconds to ticks.
 *
 * How records keep their order: everything that carries a tick goes through the one capture queue.
 * The pin-change ISR queues edges; the main loop queues a marker for each actuator switching and
 * for each beat, taking the tick inside the same critical section that queues the marker. The
 * queue is therefore in tick order, and a beat's captured count covers exactly the edges queued
 * (or dropped) before it. The output step drains the queue into the encoder only while the UART
 * has room for the worst case of one step, so bl_poll never blocks.
 */
#include "bl_core.h"

#include "bl_capture.h"
#include "bl_port.h"
#include "bl_wire.h"

volatile bl_entry_t bl_q[BL_QUEUE_LEN];
volatile uint8_t bl_q_head, bl_q_tail;
volatile bl_mask_t bl_isr_levels, bl_isr_owed;
volatile uint16_t bl_isr_dropped, bl_isr_short;

/* 32-bit totals since reset; the edges count those that left the queue */
static uint32_t n_dropped, n_short, n_edges_out;

/* Our own notices are short; the protocol allows 120 bytes. */
#define NOTE_MAX 64u
#define FRAME_BUF_EDGES (BL_EDGES_HEAD + 3u * BL_FRAME_EDGES + BL_CRC)
#define FRAME_BUF_OTHER (BL_HDR + 7u + 32u + BL_CRC + 24u)
#define FRAME_BUF (FRAME_BUF_EDGES > FRAME_BUF_OTHER ? FRAME_BUF_EDGES : FRAME_BUF_OTHER)
/* Bytes any single non-edge record can take on the wire, in either form. */
#define COST_RECORD (BL_COBS_MAX(FRAME_BUF_OTHER) > 80u ? BL_COBS_MAX(FRAME_BUF_OTHER) : 80u)
#define COST_LINE_EDGE 20u

#define MARK_BEAT 0x80u
#define MARK_LEVEL 0x10u

enum { PLAN_NONE, PLAN_READY, PLAN_ON, PLAN_OFF };

typedef struct {
    uint32_t on_ticks, off_ticks, cycles, done, next;
    uint8_t state;
} plan_t;

static bl_board_t board;
static uint32_t tick_mask, tick_half, flush_ticks, beat_ticks;
static uint8_t hex_digits, packed;
static uint16_t seq;

static uint8_t frame[FRAME_BUF];
static uint8_t pending; /* edges waiting in frame[] (packed form) */
static uint32_t pending_first, pending_last;

static bl_entry_t cur; /* the entry being emitted, edge by edge */

static uint32_t next_beat, snap_captured, snap_dropped, snap_short;
static uint32_t told_dropped, told_short;
static uint8_t beat_queued, note_overflow, note_short;

static plan_t plans[BL_MAX_CHANNELS];
static uint8_t go_wanted, cycling;
static bl_mask_t note_finished;

static char cmd[BL_CMD_MAX + 1];
static uint8_t cmd_len, cmd_overlong;

/* ---- ticks ---- */

static uint8_t reached(uint32_t now, uint32_t due)
{
    return ((now - due) & tick_mask) < tick_half;
}

static uint32_t us_to_ticks(uint32_t us)
{
    return (uint32_t)(((uint64_t)us * board.clock_hz + 500000u) / 1000000u);
}

static uint16_t seen_dropped, seen_short;

static uint16_t read16(volatile uint16_t *v)
{
    bl_irqstate_t s = bl_port_irq_save();
    uint16_t x = *v;
    bl_port_irq_restore(s);
    return x;
}

/* Extend the ISR's 16-bit counts (never reset) into the 32-bit totals; short critical sections. */
static void fold_counts(void)
{
    uint16_t d = read16(&bl_isr_dropped), s = read16(&bl_isr_short);
    n_dropped += (uint16_t)(d - seen_dropped);
    n_short += (uint16_t)(s - seen_short);
    seen_dropped = d;
    seen_short = s;
}

static uint8_t q_free(void)
{
    return (uint8_t)(BL_QUEUE_LEN - (uint8_t)(bl_q_head - bl_q_tail));
}

/* Main loop only, interrupts disabled. */
static void q_push_marker(uint32_t tick, bl_mask_t what)
{
    uint8_t head = bl_q_head;
    volatile bl_entry_t *e = &bl_q[head & (BL_QUEUE_LEN - 1u)];
    e->tick = tick;
    e->changed = 0;
    e->levels = what;
    bl_q_head = (uint8_t)(head + 1u);
}

/* ---- output ---- */

static uint16_t cost_flush(void)
{
    return pending ? (uint16_t)BL_COBS_MAX(BL_EDGES_HEAD + 3u * pending + BL_CRC) : 0u;
}

static void send_frame(uint8_t type, uint16_t len)
{
    bl_frame_header(frame, type, seq++);
    bl_cobs_put(frame, bl_frame_seal(frame, len), bl_port_tx);
}

static void send_line(uint8_t len)
{
    for (uint8_t i = 0; i < len; i++)
        bl_port_tx(frame[i]);
}

static void flush_edges(void)
{
    if (!pending)
        return;
    frame[BL_HDR + 8] = pending;
    send_frame(BL_T_EDGES, (uint16_t)(BL_EDGES_HEAD + 3u * pending));
    pending = 0;
}

static void add_edge(uint8_t channel, uint8_t level, uint32_t tick)
{
    uint32_t delta = 0;
    if (!packed) {
        send_line(bl_line_edge((char *)frame, channel, level, tick, hex_digits));
        return;
    }
    if (pending) {
        delta = (tick - pending_last) & tick_mask;
        if (delta > 0xFFFFu) {
            flush_edges();
            delta = 0;
        }
    }
    if (!pending) {
        bl_le64_from32(frame + BL_HDR, tick);
        pending_first = tick;
    }
    uint8_t *e = frame + BL_EDGES_HEAD + 3u * pending;
    e[0] = (uint8_t)(channel | (level ? 0x80u : 0u));
    bl_le16(e + 1, (uint16_t)delta);
    pending_last = tick;
    if (++pending >= BL_FRAME_EDGES)
        flush_edges();
}

static void send_drive(uint8_t channel, uint8_t level, uint32_t tick)
{
    flush_edges();
    if (packed)
        send_frame(BL_T_DRIVE, bl_pack_drive(frame, channel, level, tick));
    else
        send_line(bl_line_drive((char *)frame, channel, level, tick, hex_digits));
}

static void send_beat(uint32_t tick, uint32_t captured, uint32_t dropped)
{
    flush_edges();
    if (packed)
        send_frame(BL_T_BEAT, bl_pack_beat(frame, tick, captured, dropped));
    else
        send_line(bl_line_beat((char *)frame, tick, captured, dropped, hex_digits));
}

static void send_pong(uint16_t token)
{
    flush_edges();
    if (packed)
        send_frame(BL_T_PONG, bl_pack_pong(frame, token));
    else
        send_line(bl_line_pong((char *)frame, token));
}

static void send_announce(void)
{
    flush_edges();
    if (packed)
        send_frame(BL_T_ANNOUNCE, bl_pack_announce(frame, board.clock_hz, board.counter_bits,
                                                   board.channels, board.board_id));
    else
        send_line(bl_line_announce((char *)frame, board.clock_hz, board.counter_bits, board.channels,
                                   board.board_id));
}

/* Notice text is printable ASCII without '*' (the line form's checksum mark). */
static void send_notice(const char *text)
{
    char clean[NOTE_MAX + 1];
    uint8_t n = 0;
    for (; text[n] && n < NOTE_MAX; n++) {
        char c = text[n];
        clean[n] = (c < 0x20 || c > 0x7e || c == '*') ? '?' : c;
    }
    clean[n] = 0;
    flush_edges();
    if (packed)
        send_frame(BL_T_NOTICE, bl_pack_notice(frame, clean));
    else
        send_line(bl_line_notice((char *)frame, clean));
}

/* ---- commands ---- */

/* a: RAM text; f: BL_FLASH text */
static uint8_t streq(const char *a, const char *f)
{
    char c;
    while ((c = (char)BL_FLASH_BYTE(f)) != 0 && *a == c) {
        a++;
        f++;
    }
    return *a == (char)BL_FLASH_BYTE(f);
}

static uint8_t parse_u32(const char *s, uint32_t *out)
{
    uint32_t v = 0;
    if (!*s)
        return 0;
    for (; *s; s++) {
        if (*s < '0' || *s > '9')
            return 0;
        uint8_t d = (uint8_t)(*s - '0');
        if (v > (0xFFFFFFFFu - d) / 10u)
            return 0;
        v = v * 10u + d;
    }
    *out = v;
    return 1;
}

/* why: BL_FLASH text; what: RAM text */
static void refuse(const char *why, const char *what)
{
    char text[NOTE_MAX + 1];
    char *p = bl_put_fstr(text, why, 44);
    *p++ = ':';
    *p++ = ' ';
    p = bl_put_str(p, what, (uint8_t)(NOTE_MAX - 2u - (p - text)));
    *p = 0;
    send_notice(text);
}

static uint8_t any_plan(void)
{
    for (uint8_t ch = 0; ch < board.channels; ch++)
        if (plans[ch].state != PLAN_NONE)
            return 1;
    return 0;
}

static void halt(void)
{
    bl_irqstate_t s = bl_port_irq_save();
    for (uint8_t ch = 0; ch < board.channels; ch++)
        if (plans[ch].state == PLAN_ON)
            bl_port_set_actuator(ch, 0);
    uint32_t t = bl_port_now();
    for (uint8_t ch = 0; ch < board.channels; ch++) {
        if (plans[ch].state == PLAN_ON) {
            if (q_free() > 1u) /* always true: the ISR and the driver leave room for this */
                q_push_marker(t, (bl_mask_t)ch);
        }
        plans[ch].state = PLAN_NONE;
    }
    bl_port_irq_restore(s);
    cycling = 0;
    go_wanted = 0;
}

static void plan_command(char **argv)
{
    uint32_t ch, on_us, off_us, cycles;
    if (!parse_u32(argv[1], &ch) || !parse_u32(argv[2], &on_us) || !parse_u32(argv[3], &off_us) ||
        !parse_u32(argv[4], &cycles) || ch >= board.channels || on_us == 0 || off_us == 0) {
        refuse(BL_FLASH("PLAN needs channel on_us off_us cycles"), argv[1]);
        return;
    }
    if (cycling || go_wanted) {
        refuse(BL_FLASH("PLAN refused while cycling, HALT first"), argv[1]);
        return;
    }
    uint32_t on_t = us_to_ticks(on_us), off_t = us_to_ticks(off_us);
    if (on_t == 0 || off_t == 0 || on_t >= tick_half / 2u || off_t >= tick_half / 2u) {
        refuse(BL_FLASH("PLAN time outside the counter range"), argv[1]);
        return;
    }
    plan_t *p = &plans[ch];
    p->on_ticks = on_t;
    p->off_ticks = off_t;
    p->cycles = cycles;
    p->done = 0;
    p->state = PLAN_READY;
}

static void run_command(void)
{
    char *argv[6];
    uint8_t argc = 0;
    char *p = cmd;
    while (*p && argc < 6) {
        while (*p == ' ')
            *p++ = 0;
        if (!*p)
            break;
        argv[argc++] = p;
        while (*p && *p != ' ')
            p++;
    }
    if (*p)
        argc = 0; /* more than 6 words: nothing we know */
    uint32_t v;
    if (argc == 1 && streq(argv[0], BL_FLASH("WHO"))) {
        send_announce();
    } else if (argc == 2 && streq(argv[0], BL_FLASH("PING")) && parse_u32(argv[1], &v) && v <= 0xFFFFu) {
        send_pong((uint16_t)v);
    } else if (argc == 2 && streq(argv[0], BL_FLASH("FORM")) && (streq(argv[1], BL_FLASH("L")) || streq(argv[1], BL_FLASH("P")))) {
        flush_edges();
        packed = (argv[1][0] == 'P');
    } else if (argc == 5 && streq(argv[0], BL_FLASH("PLAN"))) {
        plan_command(argv);
    } else if (argc == 1 && streq(argv[0], BL_FLASH("GO"))) {
        if (cycling || go_wanted)
            refuse(BL_FLASH("GO ignored"), "already cycling");
        else if (!any_plan())
            refuse(BL_FLASH("GO ignored"), "no PLAN");
        else
            go_wanted = 1;
    } else if (argc == 1 && streq(argv[0], BL_FLASH("HALT"))) {
        halt();
    } else {
        /* restore the spaces the tokenizer cut, to quote the line as sent */
        for (uint8_t i = 0; i < cmd_len; i++)
            if (!cmd[i])
                cmd[i] = ' ';
        refuse(BL_FLASH("unknown command"), cmd);
    }
}

static void serve_commands(void)
{
    for (;;) {
        if (bl_port_tx_room() < cost_flush() + COST_RECORD)
            return;
        int c = bl_port_rx();
        if (c < 0)
            return;
        if (c == '\n') {
            if (cmd_overlong)
                refuse(BL_FLASH("command too long"), "ignored");
            else if (cmd_len) {
                cmd[cmd_len] = 0;
                run_command();
            }
            cmd_len = 0;
            cmd_overlong = 0;
        } else if (c == '\r') {
            continue;
        } else if (cmd_len < BL_CMD_MAX) {
            cmd[cmd_len++] = (char)c;
        } else {
            cmd_overlong = 1;
        }
    }
}

/* ---- cycle driver ---- */

static void start_cycling(void)
{
    uint8_t k = 0;
    for (uint8_t ch = 0; ch < board.channels; ch++)
        k += plans[ch].state == PLAN_READY;
    if (q_free() <= BL_MAX_CHANNELS + k)
        return; /* try again next pass */
    /* switch every output first, then read the tick: the record then lags the pins by a few
     * cycles rather than leading them by the loop */
    bl_irqstate_t s = bl_port_irq_save();
    for (uint8_t ch = 0; ch < board.channels; ch++)
        if (plans[ch].state == PLAN_READY)
            bl_port_set_actuator(ch, 1);
    uint32_t t = bl_port_now();
    for (uint8_t ch = 0; ch < board.channels; ch++) {
        plan_t *p = &plans[ch];
        if (p->state != PLAN_READY)
            continue;
        q_push_marker(t, (bl_mask_t)(ch | MARK_LEVEL));
        p->state = PLAN_ON;
        p->done = 0;
        p->next = (t + p->on_ticks) & tick_mask;
    }
    bl_port_irq_restore(s);
    go_wanted = 0;
    cycling = 1;
}

static void serve_plans(void)
{
    if (go_wanted)
        start_cycling();
    if (!cycling)
        return;
    uint8_t active = 0;
    for (uint8_t ch = 0; ch < board.channels; ch++) {
        plan_t *p = &plans[ch];
        if (p->state != PLAN_ON && p->state != PLAN_OFF)
            continue;
        active = 1;
        if (!reached(bl_port_now(), p->next) || q_free() <= BL_MAX_CHANNELS + 1u)
            continue;
        uint8_t on = p->state == PLAN_OFF;
        if (on && p->cycles && p->done >= p->cycles) {
            p->state = PLAN_READY; /* finished: output stays off, the plan is kept for another GO */
            note_finished |= (bl_mask_t)(1u << ch);
            continue;
        }
        bl_irqstate_t s = bl_port_irq_save();
        bl_port_set_actuator(ch, on);
        uint32_t t = bl_port_now();
        q_push_marker(t, (bl_mask_t)(ch | (on ? MARK_LEVEL : 0u)));
        bl_port_irq_restore(s);
        p->state = on ? PLAN_ON : PLAN_OFF;
        if (!on)
            p->done++;
        p->next = (p->next + (on ? p->on_ticks : p->off_ticks)) & tick_mask;
        if (reached(t, p->next)) /* more than a period late: restart the schedule from now */
            p->next = (t + (on ? p->on_ticks : p->off_ticks)) & tick_mask;
    }
    if (!active)
        cycling = 0;
}

/* ---- beats ---- */

static void serve_beat(void)
{
    if (beat_queued || !reached(bl_port_now(), next_beat) || q_free() <= BL_MAX_CHANNELS)
        return;
    bl_irqstate_t s = bl_port_irq_save();
    uint32_t t = bl_port_now();
    fold_counts(); /* nests: interrupts stay off, so tick and counts are one snapshot */
    snap_dropped = n_dropped;
    snap_short = n_short;
    q_push_marker(t, MARK_BEAT);
    bl_port_irq_restore(s);
    beat_queued = 1;
    next_beat = (t + beat_ticks) & tick_mask;
}

/* ---- output ---- */

static uint8_t serve_notes(void)
{
    char text[NOTE_MAX + 1];
    char *p = text;
    if (note_overflow) {
        p = bl_put_fstr(p, BL_FLASH("capture queue full: "), 32);
        p = bl_put_dec(p, told_dropped);
        p = bl_put_fstr(p, BL_FLASH(" edges dropped since reset"), 32);
        note_overflow = 0;
    } else if (note_short) {
        p = bl_put_dec(p, told_short);
        p = bl_put_fstr(p, BL_FLASH(" pin changes too short to time since reset"), 48);
        note_short = 0;
    } else if (note_finished) {
        uint8_t ch = 0;
        while (!(note_finished & (1u << ch)))
            ch++;
        note_finished &= (bl_mask_t)~(1u << ch);
        p = bl_put_fstr(p, BL_FLASH("channel "), 8);
        p = bl_put_dec(p, ch);
        p = bl_put_fstr(p, BL_FLASH(" finished its plan: "), 24);
        p = bl_put_dec(p, plans[ch].done);
        p = bl_put_fstr(p, BL_FLASH(" cycles"), 8);
    } else {
        return 0;
    }
    *p = 0;
    send_notice(text);
    return 1;
}

static void serve_output(void)
{
    for (;;) {
        uint16_t room = bl_port_tx_room();
        uint16_t flush = cost_flush();
        if (room < flush + COST_RECORD)
            return;
        if (serve_notes())
            continue;
        if (!cur.changed) {
            if (bl_q_head == bl_q_tail)
                break;
            uint8_t tail = bl_q_tail;
            volatile bl_entry_t *e = &bl_q[tail & (BL_QUEUE_LEN - 1u)];
            cur.tick = e->tick;
            cur.changed = e->changed;
            cur.levels = e->levels;
            bl_q_tail = (uint8_t)(tail + 1u);
            n_edges_out += bl_popcount(cur.changed);
            if (!cur.changed) {
                if (cur.levels & MARK_BEAT) {
                    /* every edge before the marker has left the queue: captured = sent + dropped */
                    snap_captured = n_edges_out + snap_dropped;
                    send_beat(cur.tick, snap_captured, snap_dropped);
                    beat_queued = 0;
                    if (snap_dropped != told_dropped) {
                        told_dropped = snap_dropped;
                        note_overflow = 1;
                    }
                    if (snap_short != told_short) {
                        told_short = snap_short;
                        note_short = 1;
                    }
                } else {
                    send_drive((uint8_t)(cur.levels & 0x0Fu), (cur.levels & MARK_LEVEL) ? 1u : 0u, cur.tick);
                }
                continue;
            }
        }
        if (!packed && room < COST_LINE_EDGE + COST_RECORD)
            return;
        uint8_t ch = 0;
        while (!(cur.changed & (1u << ch)))
            ch++;
        cur.changed &= (bl_mask_t)~(1u << ch);
        add_edge(ch, (uint8_t)((cur.levels >> ch) & 1u), cur.tick);
    }
    if (pending && bl_port_tx_room() >= cost_flush() &&
        reached(bl_port_now(), (pending_first + flush_ticks) & tick_mask))
        flush_edges();
}

/* ---- public ---- */

void bl_init(const bl_board_t *b)
{
    board = *b;
    tick_mask = board.counter_bits >= 32 ? 0xFFFFFFFFu : ((1ul << board.counter_bits) - 1u);
    tick_half = (tick_mask >> 1) + 1u;
    hex_digits = (uint8_t)((board.counter_bits + 3u) / 4u);
    packed = board.packed;
    flush_ticks = us_to_ticks(BL_FLUSH_US);
    /* a beat at least every second and every quarter wrap: aim for half of the tighter one */
    beat_ticks = board.clock_hz / 2u;
    if (beat_ticks > (tick_half >> 2))
        beat_ticks = tick_half >> 2;
    bl_q_head = bl_q_tail = 0;
    bl_isr_dropped = bl_isr_short = 0;
    seen_dropped = seen_short = 0;
    n_dropped = n_short = n_edges_out = 0;
    bl_isr_levels = bl_port_read_levels();
    bl_isr_owed = 0;
    for (uint8_t ch = 0; ch < BL_MAX_CHANNELS; ch++) {
        plans[ch].state = PLAN_NONE;
        bl_port_set_actuator(ch, 0);
    }
    send_announce();
    next_beat = bl_port_now();
}

void bl_poll(void)
{
    fold_counts();
    serve_commands();
    serve_plans();
    serve_beat();
    serve_output();
}

uint32_t bl_captured(void)
{
    uint8_t queued = 0;
    bl_irqstate_t s = bl_port_irq_save();
    fold_counts();
    for (uint8_t i = bl_q_tail; i != bl_q_head; i++)
        queued = (uint8_t)(queued + bl_popcount(bl_q[i & (BL_QUEUE_LEN - 1u)].changed));
    uint32_t v = n_edges_out + queued + n_dropped;
    bl_port_irq_restore(s);
    return v;
}

uint32_t bl_dropped(void)
{
    bl_irqstate_t s = bl_port_irq_save();
    fold_counts();
    uint32_t v = n_dropped;
    bl_port_irq_restore(s);
    return v;
}

uint32_t bl_short_pulses(void)
{
    bl_irqstate_t s = bl_port_irq_save();
    fold_counts();
    uint32_t v = n_short;
    bl_port_irq_restore(s);
    return v;
}
