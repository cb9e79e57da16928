/*
 * Encoders for docs/protocol.md, versions 1 and 2: CRC-32/ISO-HDLC, COBS, the CRC-16 line check, and
 * the record layouts of both forms. They only fill buffers; the core decides when the bytes go out.
 * `bl_wire_version` chooses the version the announcement states and the line check (version 1: `*hh`,
 * version 2: `*LLCCCC`). The core runs version 2; the version 1 writers stay for the golden vectors.
 */
#ifndef BL_WIRE_H
#define BL_WIRE_H

#include <stdint.h>

#include "bl_config.h"

#define BL_PROTOCOL_VERSION 2

enum {
    BL_T_EDGES = 0x01,
    BL_T_DRIVE = 0x02,
    BL_T_BEAT = 0x03,
    BL_T_NOTICE = 0x04,
    BL_T_PONG = 0x05,
    BL_T_PLAN_OK = 0x06,
    BL_T_GO_OK = 0x07,
    BL_T_ANNOUNCE = 0x10
};

/* Offsets in a packed frame before COBS: type, sequence (LE u16), payload, CRC (LE u32). */
#define BL_HDR 3u
#define BL_CRC 4u
#define BL_EDGES_HEAD (BL_HDR + 8u + 1u) /* base_tick u64, count u8 */
#define BL_NOTICE_MAX 120u

/* COBS output never exceeds n + n/254 + 1 bytes, plus the 0x00 delimiter. */
#define BL_COBS_MAX(n) ((n) + (n) / 254u + 2u)

typedef void (*bl_put_fn)(uint8_t byte);

extern uint8_t bl_wire_version; /* 1 or 2; starts at BL_PROTOCOL_VERSION */

/* CRC-16/IBM-3740 (0x1021, init 0xFFFF, not reflected): the version 2 line check (0x29B1 for "123456789") */
uint16_t bl_crc16(const uint8_t *data, uint16_t n);

uint32_t bl_crc32(const uint8_t *data, uint16_t n);
uint32_t bl_crc32_update(uint32_t state, const uint8_t *data, uint16_t n);

/* COBS-encode n bytes through put, then the 0x00 delimiter. Returns bytes written. */
uint16_t bl_cobs_put(const uint8_t *raw, uint16_t n, bl_put_fn put);

void bl_le16(uint8_t *p, uint16_t v);
void bl_le32(uint8_t *p, uint32_t v);
void bl_le64_from32(uint8_t *p, uint32_t v);

/* Packed: set the header, append the CRC over [0, len) at len; returns len + 4. */
void bl_frame_header(uint8_t *raw, uint8_t type, uint16_t seq);
uint16_t bl_frame_seal(uint8_t *raw, uint16_t len);

/* Packed payload writers: each returns the frame length before sealing (header included). */
uint16_t bl_pack_drive(uint8_t *raw, uint8_t channel, uint8_t level, uint32_t tick);
uint16_t bl_pack_beat(uint8_t *raw, uint32_t tick, uint32_t captured, uint32_t dropped);
uint16_t bl_pack_pong(uint8_t *raw, uint16_t token);
uint16_t bl_pack_notice(uint8_t *raw, const char *text);
uint16_t bl_pack_announce(uint8_t *raw, uint32_t clock_hz, uint8_t bits, uint8_t channels, const char *id);
/* version 2 */
uint16_t bl_pack_drive2(uint8_t *raw, uint8_t channel, uint8_t level, uint32_t tick, uint32_t cycle);
/* beats: `listed` the channels to report (bit i = channel i, sent ascending), `cycles[i]` channel i's count */
uint16_t bl_pack_beat2(uint8_t *raw, uint32_t tick, uint32_t captured, uint32_t dropped, uint32_t short_pulses,
                       bl_mask_t listed, const uint32_t *cycles);
uint16_t bl_pack_plan_ok(uint8_t *raw, uint8_t channel, uint32_t on_us, uint32_t off_us, uint32_t cycles);
uint16_t bl_pack_go_ok(uint8_t *raw, uint16_t mask, uint32_t tick);

/* Line form: each writes one whole line with its check and "\n" into buf, returns its length. */
uint8_t bl_line_edge(char *buf, uint8_t channel, uint8_t level, uint32_t tick, uint8_t hex_digits);
uint8_t bl_line_drive(char *buf, uint8_t channel, uint8_t level, uint32_t tick, uint8_t hex_digits);
uint8_t bl_line_beat(char *buf, uint32_t tick, uint32_t captured, uint32_t dropped, uint8_t hex_digits);
uint8_t bl_line_pong(char *buf, uint16_t token);
uint8_t bl_line_notice(char *buf, const char *text);
uint8_t bl_line_announce(char *buf, uint32_t clock_hz, uint8_t bits, uint8_t channels, const char *id);
/*
 * version 2. The longest line is a beat: "B " and 8 tick digits, three counts of up to 10 digits each
 * after a space, " c:nnnnnnnn" per listed channel, then "*LLCCCC\n".
 */
#define BL_LINE_BEAT_MAX(channels) (2u + 8u + 3u * 11u + 11u * (channels) + 8u)
uint8_t bl_line_drive2(char *buf, uint8_t channel, uint8_t level, uint32_t tick, uint8_t hex_digits, uint32_t cycle);
uint8_t bl_line_beat2(char *buf, uint32_t tick, uint32_t captured, uint32_t dropped, uint8_t hex_digits,
                      uint32_t short_pulses, bl_mask_t listed, const uint32_t *cycles);
uint8_t bl_line_plan_ok(char *buf, uint8_t channel, uint32_t on_us, uint32_t off_us, uint32_t cycles);
uint8_t bl_line_go_ok(char *buf, uint16_t mask, uint32_t tick, uint8_t hex_digits);

/* Small text helpers (no printf on the target). Each returns the new end of the text. */
char *bl_put_dec(char *out, uint32_t v);
char *bl_put_hex(char *out, uint32_t v, uint8_t digits);
char *bl_put_str(char *out, const char *s, uint8_t max);
char *bl_put_fstr(char *out, const char *flash_text, uint8_t max); /* text from BL_FLASH("...") */

#endif
