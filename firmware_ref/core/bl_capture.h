/*
 * The interrupt-side half of the capture queue, inline so that a port's ISR stays one function
 * (on an 8-bit AVR a call from an ISR forces every call-clobbered register onto the stack).
 *
 * One queue entry is one interrupt: the counter value, which channels changed since the previous
 * interrupt, and the levels after the change. The main loop also queues its own markers (an
 * actuator switching, a beat) so that every record leaves in tick order. The ISR leaves
 * BL_RESERVE entries free for those markers; when it finds no room it counts the edges as dropped.
 */
#ifndef BL_CAPTURE_H
#define BL_CAPTURE_H

#include <stdint.h>

#include "bl_config.h"

typedef struct {
    uint32_t tick;
    bl_mask_t changed; /* 0 marks a main-loop marker, described by `levels` */
    bl_mask_t levels;
} bl_entry_t;

#define BL_RESERVE (2u * BL_MAX_CHANNELS + 2u)

extern volatile bl_entry_t bl_q[BL_QUEUE_LEN];
extern volatile uint8_t bl_q_head; /* written by producers (ISR, or main loop with interrupts off) */
extern volatile uint8_t bl_q_tail; /* written by the main loop only */
extern volatile bl_mask_t bl_isr_levels, bl_isr_owed;
/*
 * 16-bit and never reset on the interrupt side, to keep the ISR short; the main loop extends them to
 * 32-bit totals from their change since it last looked (one atomic 16-bit read).
 */
extern volatile uint16_t bl_isr_dropped, bl_isr_short;

__attribute__((always_inline)) static inline uint8_t bl_popcount(bl_mask_t m)
{
    uint8_t n = 0;
    while (m) {
        m &= (bl_mask_t)(m - 1u);
        n++;
    }
    return n;
}

/*
 * Interrupts disabled. `levels`: 1 = contact closed, bit i = channel i. `own`: the channels whose
 * pin-change flag raised this interrupt (all of them on a port with one vector). A port with
 * several vectors samples every input in each, so one vector may consume another's change; that
 * vector then finds nothing new, which is owed to it and not counted as a too-short pulse.
 */
__attribute__((always_inline)) static inline void bl_capture_isr(uint32_t tick, bl_mask_t levels, bl_mask_t own)
{
    bl_mask_t changed = (bl_mask_t)(levels ^ bl_isr_levels);
    bl_mask_t owed = (bl_mask_t)(bl_isr_owed & own);
    bl_isr_owed = (bl_mask_t)((bl_isr_owed & ~own) | (changed & ~own));
    if (!(changed & own) && !owed)
        bl_isr_short++; /* the pin changed and changed back before we sampled it */
    if (!changed)
        return;
    bl_isr_levels = levels;
    uint8_t head = bl_q_head;
    if ((uint8_t)(BL_QUEUE_LEN - (uint8_t)(head - bl_q_tail)) <= BL_RESERVE) {
        bl_isr_dropped += bl_popcount(changed);
        return;
    }
    volatile bl_entry_t *e = &bl_q[head & (BL_QUEUE_LEN - 1u)];
    e->tick = tick;
    e->changed = changed;
    e->levels = levels;
    bl_q_head = (uint8_t)(head + 1u);
}

#endif
