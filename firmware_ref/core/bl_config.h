/*
 * Compile-time sizes of the core. A port may override any of them with -D on the command line.
 */
#ifndef BL_CONFIG_H
#define BL_CONFIG_H

#include <stdint.h>

/* Most channels this build can carry (the protocol allows 16). */
#ifndef BL_MAX_CHANNELS
#define BL_MAX_CHANNELS 8
#endif

/* Capture queue entries; a power of two, at most 128. Each entry is one interrupt's worth of edges. */
#ifndef BL_QUEUE_LEN
#define BL_QUEUE_LEN 64
#endif

/* Edges per packed frame before it is flushed, and the flush timeout in microseconds. */
#ifndef BL_FRAME_EDGES
#define BL_FRAME_EDGES 32
#endif
#ifndef BL_FLUSH_US
#define BL_FLUSH_US 5000u
#endif

/* Longest host command line accepted (longer lines are discarded with a notice). */
#ifndef BL_CMD_MAX
#define BL_CMD_MAX 48
#endif

/* What the port's critical section saves (the status register on an AVR). */
#ifndef BL_IRQSTATE_T
#define BL_IRQSTATE_T uint8_t
#endif
typedef BL_IRQSTATE_T bl_irqstate_t;

/*
 * Constant text and tables in program memory. On a Harvard part (an AVR) literals would otherwise
 * be copied into RAM at boot; elsewhere these are plain pointers.
 */
#ifdef __AVR__
#include <avr/pgmspace.h>
#define BL_FLASH(s) PSTR(s)
#define BL_IN_FLASH PROGMEM
#define BL_FLASH_BYTE(p) pgm_read_byte(p)
#define BL_FLASH_U32(p) pgm_read_dword(p)
#else
#define BL_FLASH(s) (s)
#define BL_IN_FLASH
#define BL_FLASH_BYTE(p) (*(const uint8_t *)(p))
#define BL_FLASH_U32(p) (*(const uint32_t *)(p))
#endif

#if BL_MAX_CHANNELS <= 8
typedef uint8_t bl_mask_t;
#elif BL_MAX_CHANNELS <= 16
typedef uint16_t bl_mask_t;
#else
#error "the protocol carries at most 16 channels"
#endif

#if (BL_QUEUE_LEN & (BL_QUEUE_LEN - 1)) != 0 || BL_QUEUE_LEN > 128 || BL_QUEUE_LEN < 8
#error "BL_QUEUE_LEN must be a power of two from 8 to 128"
#endif

#if 2 * BL_MAX_CHANNELS + 2 >= BL_QUEUE_LEN / 2
#error "BL_QUEUE_LEN too small for the markers it must hold for BL_MAX_CHANNELS"
#endif

#endif
