/*
 * The portable sampler core. A port calls:
 *
 *   bl_init(&board)            once, with interrupts still disabled; sends the announcement
 *   bl_poll()                  from its main loop, as often as it can
 *   bl_capture_isr(t, levels, own)  from its pin-change interrupt (bl_capture.h, inline), with
 *                              the counter value and contact levels it read first thing in the
 *                              ISR, and the channels that interrupt watches
 *
 * and supplies the functions in bl_port.h.
 */
#ifndef BL_CORE_H
#define BL_CORE_H

#include <stdint.h>

#include "bl_config.h"

typedef struct {
    uint32_t clock_hz;     /* counter rate */
    uint8_t counter_bits;  /* 16..32 */
    uint8_t channels;      /* 1..BL_MAX_CHANNELS */
    uint8_t packed;        /* boot in the packed form (1) or the line form (0) */
    const char *board_id;  /* 1-32 printable ASCII characters, no spaces */
} bl_board_t;

void bl_init(const bl_board_t *board);
void bl_poll(void);

/* Totals since reset (read in a critical section). */
uint32_t bl_captured(void);
uint32_t bl_dropped(void);
uint32_t bl_short_pulses(void);

#endif
