/*
 * The sampler core: capture queue (main-loop side), record output in either form, host commands,
 * the cycle driver and beats; protocol version 2 (docs/protocol.md). No heap, no floating point;
 * 64-bit arithmetic only where a command converts between microseconds and ticks.
 *
 * How records keep their order: everything that carries a tick goes through the one capture queue.
 * The pin-change ISR queues edges; the main loop queues a marker for each actuator switching and
 * for each beat, taking the tick inside the same critical section that queues the marker. The
 * queue is therefore in tick order, and a beat's captured count covers exactly the edges queued
 * (or dropped) before it. The output step drains the queue into the encoder only while the UART
 * has room for the worst case of one step, so bl_poll never blocks.
 *
 * How cycles are counted: on the output side, as the drive markers leave the queue, so that a drive
 * record's cycle and a beat's counts always agree with the records before them in the stream. The
 * marker of a channel's first switching after GO carries a flag that restarts its count there; the
 * GO-accepted record is a marker too, queued just before those, in the same critical section.
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
#define MAX2(a, b) ((a) > (b) ? (a) : (b))
/*
 * The longest of each form (the frame buffer holds a line too). Packed: a beat with every channel
 * listed, or a notice; the announcement (at most 46 bytes) is shorter. Line: a beat with every channel
 * listed, or a notice; an announcement is at most 61 bytes, a plan accepted 45.
 */
#define FRAME_BUF_EDGES (BL_EDGES_HEAD + 3u * BL_FRAME_EDGES + BL_CRC)
#define PACKED_OTHER MAX2(BL_HDR + 25u + 5u * BL_MAX_CHANNELS + BL_CRC, BL_HDR + NOTE_MAX + BL_CRC)
#define LINE_OTHER MAX2(BL_LINE_BEAT_MAX(BL_MAX_CHANNELS), 2u + NOTE_MAX + 8u)
#define FRAME_BUF MAX2(FRAME_BUF_EDGES, MAX2(PACKED_OTHER, LINE_OTHER))
/* Bytes any single non-edge record can take on the wire (with the 0x00 or the empty line a fresh stream
 * starts with; a fresh line stream's first line is the announcement, never an edge). */
#define COST_PACKED (BL_COBS_MAX(PACKED_OTHER) + 1u)
#define COST_LINE (LINE_OTHER + 2u)
#define COST_LINE_EDGE 22u /* "E c l tttttttt*LLCCCC\n" */

/*
 * Markers (queue entries with changed = 0), told apart by `levels`: a beat; GO accepted (its channels
 * are the first-switching markers queued right after it); or an actuator switching: channel in bits
 * 0-3, the new level, and whether it is the channel's first switching after GO.
 */
#define MARK_BEAT 0x80u
#define MARK_GO 0x40u
#define MARK_FIRST 0x20u
#define MARK_LEVEL 0x10u

enum { PLAN_NONE, PLAN_READY, PLAN_ON, PLAN_OFF };

typedef struct {
    uint32_t on_ticks, off_ticks, cycles, done, next;
    uint8_t state;
} plan_t;

static bl_board_t board;
static uint32_t tick_mask, tick_half, flush_ticks, beat_ticks;
static uint8_t hex_digits, packed;
static uint8_t fresh; /* nothing sent since reset (or no frame since FORM P): a 0x00 or an empty line first */
static uint16_t seq;

static uint8_t frame[FRAME_BUF];
static uint8_t pending; /* edges waiting in frame[] (packed form) */
static uint32_t pending_first, pending_last;

static bl_entry_t cur; /* the entry being emitted, edge by edge */

static uint32_t next_beat, snap_dropped, snap_short;
static uint32_t told_dropped, told_short;
static uint8_t beat_queued, note_overflow, note_short;

static plan_t plans[BL_MAX_CHANNELS];
static uint8_t go_wanted, cycling;
static bl_mask_t note_finished;

/* the output side's count: cycles completed per channel since its plan started, and the channels
 * that started one since reset (every beat lists them) */
static uint32_t out_cycles[BL_MAX_CHANNELS];
static bl_mask_t out_listed;

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

static uint32_t ticks_to_us(uint32_t ticks)
{
    return (uint32_t)(((uint64_t)ticks * 1000000u + board.clock_hz / 2u) / board.clock_hz);
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
    return pending ? (uint16_t)(BL_COBS_MAX(BL_EDGES_HEAD + 3u * pending + BL_CRC) + 1u) : 0u;
}

static uint16_t cost_record(void)
{
    return packed ? COST_PACKED : COST_LINE;
}

static void send_frame(uint8_t type, uint16_t len)
{
    if (fresh) { /* whatever the host received before (half a frame, noise at power-up) ends here */
        bl_port_tx(0);
        fresh = 0;
    }
    bl_frame_header(frame, type, seq++);
    bl_cobs_put(frame, bl_frame_seal(frame, len), bl_port_tx);
}

static void send_line(uint8_t len)
{
    if (fresh) { /* a line the reset cut (or power-up noise) ends here, not in the announcement */
        bl_port_tx('\r');
        bl_port_tx('\n');
        fresh = 0;
    }
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

static void send_drive(uint8_t channel, uint8_t level, uint32_t tick, uint32_t cycle)
{
    flush_edges();
    if (packed)
        send_frame(BL_T_DRIVE, bl_pack_drive2(frame, channel, level, tick, cycle));
    else
        send_line(bl_line_drive2((char *)frame, channel, level, tick, hex_digits, cycle));
}

static void send_beat(uint32_t tick, uint32_t captured, uint32_t dropped, uint32_t short_pulses)
{
    flush_edges();
    if (packed)
        send_frame(BL_T_BEAT, bl_pack_beat2(frame, tick, captured, dropped, short_pulses, out_listed, out_cycles));
    else
        send_line(bl_line_beat2((char *)frame, tick, captured, dropped, hex_digits, short_pulses, out_listed,
                                out_cycles));
}

static void send_plan_ok(uint8_t channel, const plan_t *p)
{
    uint32_t on_us = ticks_to_us(p->on_ticks), off_us = ticks_to_us(p->off_ticks);
    flush_edges();
    if (packed)
        send_frame(BL_T_PLAN_OK, bl_pack_plan_ok(frame, channel, on_us, off_us, p->cycles));
    else
        send_line(bl_line_plan_ok((char *)frame, channel, on_us, off_us, p->cycles));
}

static void send_go_ok(bl_mask_t channels, uint32_t tick)
{
    flush_edges();
    if (packed)
        send_frame(BL_T_GO_OK, bl_pack_go_ok(frame, channels, tick));
    else
        send_line(bl_line_go_ok((char *)frame, channels, tick, hex_digits));
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

/*
 * Notice text is printable ASCII without '*' (the line form's checksum mark). Made so in place: both
 * callers build the text in their own buffer of NOTE_MAX + 1 bytes, and a second copy here would
 * cost 65 bytes of the stack on its deepest path.
 */
static void send_notice(char *text)
{
    uint8_t n = 0;
    for (; text[n] && n < NOTE_MAX; n++) {
        char c = text[n];
        if (c < 0x20 || c > 0x7e || c == '*')
            text[n] = '?';
    }
    text[n] = 0;
    flush_edges();
    if (packed)
        send_frame(BL_T_NOTICE, bl_pack_notice(frame, text));
    else
        send_line(bl_line_notice((char *)frame, text));
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

/* why: BL_FLASH text; what: RAM text, or BL_FLASH text when what_in_flash (no RAM copy at boot) */
static void refuse_text(const char *why, const char *what, uint8_t what_in_flash)
{
    char text[NOTE_MAX + 1];
    char *p = bl_put_fstr(text, why, 44);
    uint8_t room;
    *p++ = ':';
    *p++ = ' ';
    room = (uint8_t)(NOTE_MAX - (p - text));
    p = what_in_flash ? bl_put_fstr(p, what, room) : bl_put_str(p, what, room);
    *p = 0;
    send_notice(text);
}

static void refuse(const char *why, const char *what)
{
    refuse_text(why, what, 0);
}

static void refuse_f(const char *why, const char *what)
{
    refuse_text(why, what, 1);
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
    send_plan_ok((uint8_t)ch, p);
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
        if (argv[1][0] == 'P' && !packed)
            fresh = 1;
        packed = (argv[1][0] == 'P');
    } else if (argc == 5 && streq(argv[0], BL_FLASH("PLAN"))) {
        plan_command(argv);
    } else if (argc == 1 && streq(argv[0], BL_FLASH("GO"))) {
        /* channels already cycling go on; GO starts the others that have a plan (none: an empty
         * acknowledgement, as the simulated sampler gives) */
        if (go_wanted)
            refuse_f(BL_FLASH("GO ignored"), BL_FLASH("already starting"));
        else if (!any_plan())
            refuse_f(BL_FLASH("GO ignored"), BL_FLASH("no PLAN"));
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
        if (bl_port_tx_room() < cost_flush() + cost_record())
            return;
        int c = bl_port_rx();
        if (c < 0)
            return;
        if (c == '\n') {
            if (cmd_overlong)
                refuse_f(BL_FLASH("command too long"), BL_FLASH("ignored"));
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
    if (q_free() <= BL_MAX_CHANNELS + k + 1u)
        return; /* try again next pass */
    /* switch every output first, then read the tick: the record then lags the pins by a few
     * cycles rather than leading them by the loop */
    bl_irqstate_t s = bl_port_irq_save();
    for (uint8_t ch = 0; ch < board.channels; ch++)
        if (plans[ch].state == PLAN_READY)
            bl_port_set_actuator(ch, 1);
    uint32_t t = bl_port_now();
    q_push_marker(t, MARK_GO);
    for (uint8_t ch = 0; ch < board.channels; ch++) {
        plan_t *p = &plans[ch];
        if (p->state != PLAN_READY)
            continue;
        q_push_marker(t, (bl_mask_t)(ch | MARK_LEVEL | MARK_FIRST));
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

/* The channels of a GO-accepted marker: the first-switching markers queued right behind it. */
static bl_mask_t go_channels(uint32_t tick)
{
    bl_mask_t channels = 0;
    for (uint8_t i = bl_q_tail; i != bl_q_head; i++) {
        volatile bl_entry_t *e = &bl_q[i & (BL_QUEUE_LEN - 1u)];
        if (e->changed || (e->levels & (MARK_BEAT | MARK_GO | MARK_FIRST)) != MARK_FIRST || e->tick != tick)
            break;
        channels |= (bl_mask_t)(1u << (e->levels & 0x0Fu));
    }
    return channels;
}

/* A drive marker leaves the queue: count the channel's cycles here, in stream order. */
static void out_drive(const bl_entry_t *m)
{
    uint8_t ch = (uint8_t)(m->levels & 0x0Fu);
    uint8_t on = (m->levels & MARK_LEVEL) ? 1u : 0u;
    if (m->levels & MARK_FIRST) {
        out_cycles[ch] = 0;
        out_listed |= (bl_mask_t)(1u << ch);
    }
    if (!on)
        out_cycles[ch]++; /* a cycle is completed when its actuator switches off */
    send_drive(ch, on, m->tick, on ? out_cycles[ch] + 1u : out_cycles[ch]);
}

/* not inlined: its text buffer then takes stack only while a notice is made, not under every other
 * call bl_poll makes */
__attribute__((noinline)) static uint8_t serve_notes(void)
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
        if (room < flush + cost_record())
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
                    send_beat(cur.tick, n_edges_out + snap_dropped, snap_dropped, snap_short);
                    beat_queued = 0;
                    if (snap_dropped != told_dropped) {
                        told_dropped = snap_dropped;
                        note_overflow = 1;
                    }
                    if (snap_short != told_short) {
                        told_short = snap_short;
                        note_short = 1;
                    }
                } else if (cur.levels & MARK_GO) {
                    send_go_ok(go_channels(cur.tick), cur.tick);
                } else {
                    out_drive(&cur);
                }
                continue;
            }
        }
        if (!packed && room < COST_LINE_EDGE + COST_LINE)
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
    fresh = 1;
    out_listed = 0;
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
        out_cycles[ch] = 0;
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
