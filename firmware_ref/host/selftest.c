/*
 * The core's own C checks, run by `blhost selftest` (and by the pytest suite). Checks against
 * outside values name their source; everything else is covered end to end from Python.
 */
#include <stdio.h>
#include <string.h>

#include "../core/bl_wire.h"

static int checks, failures;

static void check(int ok, const char *what)
{
    checks++;
    if (!ok) {
        failures++;
        fprintf(stderr, "selftest: FAILED %s\n", what);
    }
}

static uint8_t out[600];
static uint16_t out_n;

static void put(uint8_t b)
{
    out[out_n++] = b;
}

static int cobs_is(const uint8_t *raw, uint16_t n, const uint8_t *want, uint16_t want_n)
{
    out_n = 0;
    uint16_t w = bl_cobs_put(raw, n, put);
    return w == out_n && out_n == want_n && memcmp(out, want, want_n) == 0;
}

int bl_selftest(void)
{
    /* CRC catalogue, CRC-32/ISO-HDLC: check value of ASCII "123456789" (also docs/protocol.md) */
    check(bl_crc32((const uint8_t *)"123456789", 9) == 0xCBF43926u, "CRC-32 check value");
    check(bl_crc32((const uint8_t *)"", 0) == 0x00000000u, "CRC-32 of nothing");
    /* CRC-16/IBM-3740 check value from the CRC catalogue */
    check(bl_crc16((const uint8_t *)"123456789", 9) == 0x29B1u, "CRC-16 check value");
    /* incremental CRC equals the one-shot CRC */
    uint32_t c = bl_crc32_update(0xFFFFFFFFu, (const uint8_t *)"1234", 4);
    c = bl_crc32_update(c, (const uint8_t *)"56789", 5) ^ 0xFFFFFFFFu;
    check(c == 0xCBF43926u, "CRC-32 in two parts");

    /* COBS: the worked examples in Cheshire and Baker's paper and its common restatements */
    {
        static const uint8_t r1[] = {0x00}, w1[] = {0x01, 0x01, 0x00};
        static const uint8_t r2[] = {0x00, 0x00}, w2[] = {0x01, 0x01, 0x01, 0x00};
        static const uint8_t r3[] = {0x11, 0x22, 0x00, 0x33}, w3[] = {0x03, 0x11, 0x22, 0x02, 0x33, 0x00};
        static const uint8_t r4[] = {0x11, 0x22, 0x33, 0x44}, w4[] = {0x05, 0x11, 0x22, 0x33, 0x44, 0x00};
        static const uint8_t r5[] = {0x11, 0x00, 0x00, 0x00}, w5[] = {0x02, 0x11, 0x01, 0x01, 0x01, 0x00};
        static const uint8_t w6[] = {0x01, 0x00};
        check(cobs_is(r1, 1, w1, 3), "COBS 00");
        check(cobs_is(r2, 2, w2, 4), "COBS 00 00");
        check(cobs_is(r3, 4, w3, 6), "COBS 11 22 00 33");
        check(cobs_is(r4, 4, w4, 6), "COBS 11 22 33 44");
        check(cobs_is(r5, 4, w5, 6), "COBS 11 00 00 00");
        check(cobs_is(r1, 0, w6, 2), "COBS empty");
    }
    {
        /* 254 non-zero bytes: one full block and no trailing code; 255: a second block */
        uint8_t raw[255], want[260];
        for (int i = 0; i < 255; i++)
            raw[i] = (uint8_t)(i + 1);
        want[0] = 0xFF;
        memcpy(want + 1, raw, 254);
        want[255] = 0x00;
        check(cobs_is(raw, 254, want, 256), "COBS 254 non-zero bytes");
        want[255] = 0x02;
        want[256] = 0xFF;
        want[257] = 0x00;
        check(cobs_is(raw, 255, want, 258), "COBS 255 non-zero bytes");
    }

    /* line form, version 1: the checksum is the XOR of every byte before '*' (docs/protocol.md) */
    {
        char line[64];
        uint8_t version = bl_wire_version;
        bl_wire_version = 1;
        uint8_t n = bl_line_edge(line, 3, 1, 0x0003d090u, 8);
        line[n] = 0;
        uint8_t x = 0;
        for (const char *p = line; *p != '*'; p++)
            x ^= (uint8_t)*p;
        char want[64];
        snprintf(want, sizeof want, "E 3 1 0003d090*%02x\n", x);
        check(strcmp(line, want) == 0, "line edge");
        n = bl_line_beat(line, 0x000f4240u, 1520, 0, 8);
        line[n] = 0;
        check(strncmp(line, "B 000f4240 1520 0*", 18) == 0 && n == 21, "line beat");
        bl_wire_version = version;
    }

    /*
     * line form, version 2 (what the core sends): "*LLCCCC", the body's length and its CRC-16/IBM-3740;
     * the examples of docs/protocol.md, whose checks were computed with Python's binascii.crc_hqx
     * (init 0xFFFF), a reference implementation of the same CRC
     */
    {
        char line[240];
        const uint32_t counts[4] = {0x10e, 0, 0, 0x10d};
        check(BL_PROTOCOL_VERSION == 2 && bl_wire_version == 2, "the core speaks version 2");
        uint8_t n = bl_line_edge(line, 3, 1, 0x0003d090u, 8);
        line[n] = 0;
        check(strcmp(line, "E 3 1 0003d090*0eb777\n") == 0, "line edge, version 2");
        n = bl_line_beat2(line, 0x000f4240u, 1520, 0, 8, 3, 0x09u, counts);
        line[n] = 0;
        check(strcmp(line, "B 000f4240 1520 0 3 0:10e 3:10d*1f04ab\n") == 0, "line beat, version 2");
        /* the longest beat line fits the size the core reserves for it */
        uint32_t most[16];
        for (int i = 0; i < 16; i++)
            most[i] = 0xFFFFFFFFu;
        n = bl_line_beat2(line, 0xFFFFFFFFu, 4294967295u, 4294967295u, 8, 4294967295u, 0xFFFFu, most);
        check(n == BL_LINE_BEAT_MAX(16), "longest beat line");
    }

    /* decimal and hex helpers at their limits */
    {
        char b[16];
        *bl_put_dec(b, 4294967295u) = 0;
        check(strcmp(b, "4294967295") == 0, "decimal u32 max");
        *bl_put_dec(b, 0) = 0;
        check(strcmp(b, "0") == 0, "decimal zero");
        *bl_put_hex(b, 0xDEADBEEFu, 8) = 0;
        check(strcmp(b, "deadbeef") == 0, "hex");
    }

    printf("selftest: %d checks, %d failed\n", checks, failures);
    return failures ? 1 : 0;
}
