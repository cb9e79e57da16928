#include "bl_wire.h"

/*
 * CRC-32/ISO-HDLC (reflected 0x04C11DB7, init and final XOR 0xFFFFFFFF), four bits at a time: a
 * 16-entry table is 64 bytes, small enough for an 8-bit part's RAM, and twice as fast as bitwise.
 */
static const uint32_t crc_nibble[16] BL_IN_FLASH = {
    0x00000000u, 0x1DB71064u, 0x3B6E20C8u, 0x26D930ACu, 0x76DC4190u, 0x6B6B51F4u,
    0x4DB26158u, 0x5005713Cu, 0xEDB88320u, 0xF00F9344u, 0xD6D6A3E8u, 0xCB61B38Cu,
    0x9B64C2B0u, 0x86D3D2D4u, 0xA00AE278u, 0xBDBDF21Cu,
};

uint32_t bl_crc32_update(uint32_t c, const uint8_t *data, uint16_t n)
{
    while (n--) {
        c ^= *data++;
        c = (c >> 4) ^ BL_FLASH_U32(&crc_nibble[c & 0x0Fu]);
        c = (c >> 4) ^ BL_FLASH_U32(&crc_nibble[c & 0x0Fu]);
    }
    return c;
}

uint32_t bl_crc32(const uint8_t *data, uint16_t n)
{
    return bl_crc32_update(0xFFFFFFFFu, data, n) ^ 0xFFFFFFFFu;
}

uint8_t bl_wire_version = BL_PROTOCOL_VERSION;

uint16_t bl_crc16(const uint8_t *data, uint16_t n)
{
    uint16_t c = 0xFFFFu;
    while (n--) {
        c ^= (uint16_t)((uint16_t)*data++ << 8);
        for (uint8_t k = 0; k < 8u; k++)
            c = (c & 0x8000u) ? (uint16_t)((c << 1) ^ 0x1021u) : (uint16_t)(c << 1);
    }
    return c;
}

uint16_t bl_cobs_put(const uint8_t *raw, uint16_t n, bl_put_fn put)
{
    uint16_t pos = 0, written = 0;
    for (;;) {
        uint16_t run = 0;
        while (pos + run < n && raw[pos + run] != 0 && run < 254u)
            run++;
        put((uint8_t)(run + 1u));
        for (uint16_t i = 0; i < run; i++)
            put(raw[pos + i]);
        written += run + 1u;
        pos += run;
        if (pos >= n)
            break;
        if (run == 254u)
            continue; /* a full block carries no implied zero */
        pos++;        /* the zero this block's code stands for */
        if (pos == n) {
            put(1u);
            written++;
            break;
        }
    }
    put(0u);
    return (uint16_t)(written + 1u);
}

void bl_le16(uint8_t *p, uint16_t v)
{
    p[0] = (uint8_t)v;
    p[1] = (uint8_t)(v >> 8);
}

void bl_le32(uint8_t *p, uint32_t v)
{
    p[0] = (uint8_t)v;
    p[1] = (uint8_t)(v >> 8);
    p[2] = (uint8_t)(v >> 16);
    p[3] = (uint8_t)(v >> 24);
}

void bl_le64_from32(uint8_t *p, uint32_t v)
{
    bl_le32(p, v);
    bl_le32(p + 4, 0);
}

void bl_frame_header(uint8_t *raw, uint8_t type, uint16_t seq)
{
    raw[0] = type;
    bl_le16(raw + 1, seq);
}

uint16_t bl_frame_seal(uint8_t *raw, uint16_t len)
{
    bl_le32(raw + len, bl_crc32(raw, len));
    return (uint16_t)(len + BL_CRC);
}

uint16_t bl_pack_drive(uint8_t *raw, uint8_t channel, uint8_t level, uint32_t tick)
{
    raw[BL_HDR] = channel;
    raw[BL_HDR + 1] = level;
    bl_le64_from32(raw + BL_HDR + 2, tick);
    return BL_HDR + 10u;
}

uint16_t bl_pack_beat(uint8_t *raw, uint32_t tick, uint32_t captured, uint32_t dropped)
{
    bl_le64_from32(raw + BL_HDR, tick);
    bl_le32(raw + BL_HDR + 8, captured);
    bl_le32(raw + BL_HDR + 12, dropped);
    return BL_HDR + 16u;
}

uint16_t bl_pack_pong(uint8_t *raw, uint16_t token)
{
    bl_le16(raw + BL_HDR, token);
    return BL_HDR + 2u;
}

uint16_t bl_pack_notice(uint8_t *raw, const char *text)
{
    uint16_t n = 0;
    while (text[n] && n < BL_NOTICE_MAX) {
        raw[BL_HDR + n] = (uint8_t)text[n];
        n++;
    }
    return (uint16_t)(BL_HDR + n);
}

uint16_t bl_pack_announce(uint8_t *raw, uint32_t clock_hz, uint8_t bits, uint8_t channels, const char *id)
{
    uint16_t n = 0;
    raw[BL_HDR] = bl_wire_version;
    bl_le32(raw + BL_HDR + 1, clock_hz);
    raw[BL_HDR + 5] = bits;
    raw[BL_HDR + 6] = channels;
    while (id[n] && n < 32u) {
        raw[BL_HDR + 7 + n] = (uint8_t)id[n];
        n++;
    }
    return (uint16_t)(BL_HDR + 7u + n);
}

char *bl_put_dec(char *out, uint32_t v)
{
    char tmp[10];
    uint8_t n = 0;
    do {
        tmp[n++] = (char)('0' + (uint8_t)(v % 10u));
        v /= 10u;
    } while (v);
    while (n)
        *out++ = tmp[--n];
    return out;
}

char *bl_put_hex(char *out, uint32_t v, uint8_t digits)
{
    for (int8_t i = (int8_t)(digits - 1); i >= 0; i--) {
        uint8_t d = (uint8_t)((v >> (4 * i)) & 0x0Fu);
        *out++ = (char)(d < 10u ? '0' + d : 'a' - 10 + d);
    }
    return out;
}

char *bl_put_str(char *out, const char *s, uint8_t max)
{
    while (*s && max--)
        *out++ = *s++;
    return out;
}

char *bl_put_fstr(char *out, const char *flash_text, uint8_t max)
{
    char c;
    while ((c = (char)BL_FLASH_BYTE(flash_text)) != 0 && max--) {
        *out++ = c;
        flash_text++;
    }
    return out;
}

static uint8_t line_end(char *buf, char *end)
{
    uint8_t len = (uint8_t)(end - buf);
    if (bl_wire_version >= 2) { /* "*LLCCCC": the body's length and CRC-16 */
        uint16_t crc = bl_crc16((const uint8_t *)buf, len);
        *end++ = '*';
        end = bl_put_hex(end, len, 2);
        end = bl_put_hex(end, crc, 4);
        *end++ = '\n';
        return (uint8_t)(end - buf);
    }
    uint8_t x = 0;
    for (char *p = buf; p < end; p++)
        x ^= (uint8_t)*p;
    *end++ = '*';
    end = bl_put_hex(end, x, 2);
    *end++ = '\n';
    return (uint8_t)(end - buf);
}

static char *chan_level(char *p, char kind, uint8_t channel, uint8_t level)
{
    *p++ = kind;
    *p++ = ' ';
    p = bl_put_hex(p, channel, 1);
    *p++ = ' ';
    *p++ = level ? '1' : '0';
    *p++ = ' ';
    return p;
}

uint8_t bl_line_edge(char *buf, uint8_t channel, uint8_t level, uint32_t tick, uint8_t hex_digits)
{
    char *p = chan_level(buf, 'E', channel, level);
    return line_end(buf, bl_put_hex(p, tick, hex_digits));
}

uint8_t bl_line_drive(char *buf, uint8_t channel, uint8_t level, uint32_t tick, uint8_t hex_digits)
{
    char *p = chan_level(buf, 'D', channel, level);
    return line_end(buf, bl_put_hex(p, tick, hex_digits));
}

uint8_t bl_line_beat(char *buf, uint32_t tick, uint32_t captured, uint32_t dropped, uint8_t hex_digits)
{
    char *p = buf;
    *p++ = 'B';
    *p++ = ' ';
    p = bl_put_hex(p, tick, hex_digits);
    *p++ = ' ';
    p = bl_put_dec(p, captured);
    *p++ = ' ';
    p = bl_put_dec(p, dropped);
    return line_end(buf, p);
}

uint8_t bl_line_pong(char *buf, uint16_t token)
{
    char *p = buf;
    *p++ = 'P';
    *p++ = ' ';
    return line_end(buf, bl_put_dec(p, token));
}

uint8_t bl_line_notice(char *buf, const char *text)
{
    char *p = buf;
    *p++ = 'N';
    *p++ = ' ';
    return line_end(buf, bl_put_str(p, text, BL_NOTICE_MAX));
}

uint8_t bl_line_announce(char *buf, uint32_t clock_hz, uint8_t bits, uint8_t channels, const char *id)
{
    char *p = buf;
    *p++ = 'A';
    *p++ = ' ';
    p = bl_put_dec(p, bl_wire_version);
    *p++ = ' ';
    p = bl_put_dec(p, clock_hz);
    *p++ = ' ';
    p = bl_put_dec(p, bits);
    *p++ = ' ';
    p = bl_put_dec(p, channels);
    *p++ = ' ';
    return line_end(buf, bl_put_str(p, id, 32));
}

/* ---- version 2 records ---- */

uint16_t bl_pack_drive2(uint8_t *raw, uint8_t channel, uint8_t level, uint32_t tick, uint32_t cycle)
{
    uint16_t len = bl_pack_drive(raw, channel, level, tick);
    bl_le32(raw + len, cycle);
    return (uint16_t)(len + 4u);
}

uint16_t bl_pack_beat2(uint8_t *raw, uint32_t tick, uint32_t captured, uint32_t dropped, uint32_t short_pulses,
                       bl_mask_t listed, const uint32_t *cycles)
{
    uint16_t len = bl_pack_beat(raw, tick, captured, dropped);
    uint16_t count_at = (uint16_t)(len + 4u);
    bl_le32(raw + len, short_pulses);
    raw[count_at] = 0;
    len += 5u;
    for (uint8_t ch = 0; listed; ch++, listed >>= 1) {
        if (!(listed & 1u))
            continue;
        raw[len] = ch;
        bl_le32(raw + len + 1, cycles[ch]);
        raw[count_at]++;
        len += 5u;
    }
    return len;
}

uint16_t bl_pack_plan_ok(uint8_t *raw, uint8_t channel, uint32_t on_us, uint32_t off_us, uint32_t cycles)
{
    raw[BL_HDR] = channel;
    bl_le32(raw + BL_HDR + 1, on_us);
    bl_le32(raw + BL_HDR + 5, off_us);
    bl_le32(raw + BL_HDR + 9, cycles);
    return BL_HDR + 13u;
}

uint16_t bl_pack_go_ok(uint8_t *raw, uint16_t mask, uint32_t tick)
{
    bl_le16(raw + BL_HDR, mask);
    bl_le64_from32(raw + BL_HDR + 2, tick);
    return BL_HDR + 10u;
}

static uint8_t hex_len(uint32_t v)
{
    uint8_t n = 1;
    while (v >>= 4)
        n++;
    return n;
}

uint8_t bl_line_drive2(char *buf, uint8_t channel, uint8_t level, uint32_t tick, uint8_t hex_digits, uint32_t cycle)
{
    char *p = chan_level(buf, 'D', channel, level);
    p = bl_put_hex(p, tick, hex_digits);
    *p++ = ' ';
    return line_end(buf, bl_put_dec(p, cycle));
}

uint8_t bl_line_beat2(char *buf, uint32_t tick, uint32_t captured, uint32_t dropped, uint8_t hex_digits,
                      uint32_t short_pulses, bl_mask_t listed, const uint32_t *cycles)
{
    char *p = buf;
    *p++ = 'B';
    *p++ = ' ';
    p = bl_put_hex(p, tick, hex_digits);
    *p++ = ' ';
    p = bl_put_dec(p, captured);
    *p++ = ' ';
    p = bl_put_dec(p, dropped);
    *p++ = ' ';
    p = bl_put_dec(p, short_pulses);
    for (uint8_t ch = 0; listed; ch++, listed >>= 1) {
        if (!(listed & 1u))
            continue;
        *p++ = ' ';
        p = bl_put_hex(p, ch, 1);
        *p++ = ':';
        p = bl_put_hex(p, cycles[ch], hex_len(cycles[ch]));
    }
    return line_end(buf, p);
}

uint8_t bl_line_plan_ok(char *buf, uint8_t channel, uint32_t on_us, uint32_t off_us, uint32_t cycles)
{
    char *p = buf;
    *p++ = 'K';
    *p++ = ' ';
    p = bl_put_dec(p, channel);
    *p++ = ' ';
    p = bl_put_dec(p, on_us);
    *p++ = ' ';
    p = bl_put_dec(p, off_us);
    *p++ = ' ';
    return line_end(buf, bl_put_dec(p, cycles));
}

uint8_t bl_line_go_ok(char *buf, uint16_t mask, uint32_t tick, uint8_t hex_digits)
{
    char *p = buf;
    *p++ = 'G';
    *p++ = ' ';
    p = bl_put_hex(p, mask, hex_len(mask));
    *p++ = ' ';
    return line_end(buf, bl_put_hex(p, tick, hex_digits));
}
