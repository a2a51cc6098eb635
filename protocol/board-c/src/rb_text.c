/*
 * rb_text.c -- CRC-16/IBM-3740, frames and the token grammar (PROTOCOL.md §2-§3), and the
 * helpers that read constant strings (in flash with RB_USE_FLASH). No state; every function
 * here is pure. Numbers are in rb_num.c.
 */
#include "rb_internal.h"

#include <limits.h>
#include <string.h>

/* CRC-16/IBM-3740: poly 0x1021, init 0xFFFF, not reflected, xorout 0 (check 0x29B1), a byte
 * at a time from a 256-entry table (512 bytes of flash); on 8/16-bit cores four bits at a
 * time from a 16-entry one (32 bytes). Tables generated from the polynomial. */
#if UINT_MAX > 0xFFFFu
static const uint16_t CRC_TABLE[256] = {
    0x0000, 0x1021, 0x2042, 0x3063, 0x4084, 0x50A5, 0x60C6, 0x70E7,
    0x8108, 0x9129, 0xA14A, 0xB16B, 0xC18C, 0xD1AD, 0xE1CE, 0xF1EF,
    0x1231, 0x0210, 0x3273, 0x2252, 0x52B5, 0x4294, 0x72F7, 0x62D6,
    0x9339, 0x8318, 0xB37B, 0xA35A, 0xD3BD, 0xC39C, 0xF3FF, 0xE3DE,
    0x2462, 0x3443, 0x0420, 0x1401, 0x64E6, 0x74C7, 0x44A4, 0x5485,
    0xA56A, 0xB54B, 0x8528, 0x9509, 0xE5EE, 0xF5CF, 0xC5AC, 0xD58D,
    0x3653, 0x2672, 0x1611, 0x0630, 0x76D7, 0x66F6, 0x5695, 0x46B4,
    0xB75B, 0xA77A, 0x9719, 0x8738, 0xF7DF, 0xE7FE, 0xD79D, 0xC7BC,
    0x48C4, 0x58E5, 0x6886, 0x78A7, 0x0840, 0x1861, 0x2802, 0x3823,
    0xC9CC, 0xD9ED, 0xE98E, 0xF9AF, 0x8948, 0x9969, 0xA90A, 0xB92B,
    0x5AF5, 0x4AD4, 0x7AB7, 0x6A96, 0x1A71, 0x0A50, 0x3A33, 0x2A12,
    0xDBFD, 0xCBDC, 0xFBBF, 0xEB9E, 0x9B79, 0x8B58, 0xBB3B, 0xAB1A,
    0x6CA6, 0x7C87, 0x4CE4, 0x5CC5, 0x2C22, 0x3C03, 0x0C60, 0x1C41,
    0xEDAE, 0xFD8F, 0xCDEC, 0xDDCD, 0xAD2A, 0xBD0B, 0x8D68, 0x9D49,
    0x7E97, 0x6EB6, 0x5ED5, 0x4EF4, 0x3E13, 0x2E32, 0x1E51, 0x0E70,
    0xFF9F, 0xEFBE, 0xDFDD, 0xCFFC, 0xBF1B, 0xAF3A, 0x9F59, 0x8F78,
    0x9188, 0x81A9, 0xB1CA, 0xA1EB, 0xD10C, 0xC12D, 0xF14E, 0xE16F,
    0x1080, 0x00A1, 0x30C2, 0x20E3, 0x5004, 0x4025, 0x7046, 0x6067,
    0x83B9, 0x9398, 0xA3FB, 0xB3DA, 0xC33D, 0xD31C, 0xE37F, 0xF35E,
    0x02B1, 0x1290, 0x22F3, 0x32D2, 0x4235, 0x5214, 0x6277, 0x7256,
    0xB5EA, 0xA5CB, 0x95A8, 0x8589, 0xF56E, 0xE54F, 0xD52C, 0xC50D,
    0x34E2, 0x24C3, 0x14A0, 0x0481, 0x7466, 0x6447, 0x5424, 0x4405,
    0xA7DB, 0xB7FA, 0x8799, 0x97B8, 0xE75F, 0xF77E, 0xC71D, 0xD73C,
    0x26D3, 0x36F2, 0x0691, 0x16B0, 0x6657, 0x7676, 0x4615, 0x5634,
    0xD94C, 0xC96D, 0xF90E, 0xE92F, 0x99C8, 0x89E9, 0xB98A, 0xA9AB,
    0x5844, 0x4865, 0x7806, 0x6827, 0x18C0, 0x08E1, 0x3882, 0x28A3,
    0xCB7D, 0xDB5C, 0xEB3F, 0xFB1E, 0x8BF9, 0x9BD8, 0xABBB, 0xBB9A,
    0x4A75, 0x5A54, 0x6A37, 0x7A16, 0x0AF1, 0x1AD0, 0x2AB3, 0x3A92,
    0xFD2E, 0xED0F, 0xDD6C, 0xCD4D, 0xBDAA, 0xAD8B, 0x9DE8, 0x8DC9,
    0x7C26, 0x6C07, 0x5C64, 0x4C45, 0x3CA2, 0x2C83, 0x1CE0, 0x0CC1,
    0xEF1F, 0xFF3E, 0xCF5D, 0xDF7C, 0xAF9B, 0xBFBA, 0x8FD9, 0x9FF8,
    0x6E17, 0x7E36, 0x4E55, 0x5E74, 0x2E93, 0x3EB2, 0x0ED1, 0x1EF0,
};

uint16_t rb_crc16_update(uint16_t crc, const uint8_t *p, size_t n)
{
    while (n--)
        crc = (uint16_t)((crc << 8) ^ CRC_TABLE[((crc >> 8) ^ *p++) & 0xFFu]);
    return crc;
}
#else
static const uint16_t CRC_NIBBLE[16] RB_FLASH = {0x0000, 0x1021, 0x2042, 0x3063, 0x4084, 0x50A5, 0x60C6, 0x70E7, 0x8108, 0x9129, 0xA14A, 0xB16B, 0xC18C, 0xD1AD, 0xE1CE, 0xF1EF};

uint16_t rb_crc16_update(uint16_t crc, const uint8_t *p, size_t n)
{
    while (n--) {
        uint8_t c = *p++;
        crc = (uint16_t)((crc << 4) ^ ROM_U16(&CRC_NIBBLE[((crc >> 12) ^ (c >> 4)) & 15u]));
        crc = (uint16_t)((crc << 4) ^ ROM_U16(&CRC_NIBBLE[((crc >> 12) ^ c) & 15u]));
    }
    return crc;
}
#endif

uint16_t rb_crc16(const uint8_t *data, size_t n)
{
    return rb_crc16_update(0xFFFFu, data, n);
}

int rb_body_char(uint8_t c)
{
    return c >= 0x20 && c <= 0x7E && c != '@' && c != '|';
}

static char hex_digit(unsigned v)
{
    return (char)(v < 10u ? '0' + v : 'A' + (v - 10u));
}

void rb_crc_tail(uint8_t *out, uint16_t crc)
{
    out[0] = '|';
    out[1] = (uint8_t)hex_digit((crc >> 12) & 15u);
    out[2] = (uint8_t)hex_digit((crc >> 8) & 15u);
    out[3] = (uint8_t)hex_digit((crc >> 4) & 15u);
    out[4] = (uint8_t)hex_digit(crc & 15u);
    out[5] = '\n';
}

size_t rb_frame(char *out, size_t cap, const char *body, size_t n)
{
    size_t i;
    if (n == 0 || n > RB_MAX_BODY || cap < n + 7)
        return 0;
    for (i = 0; i < n; i++)
        if (!rb_body_char((uint8_t)body[i]))
            return 0;
    memmove(out + 1, body, n);        /* body may already sit at out + 1 */
    out[0] = '@';
    rb_crc_tail((uint8_t *)out + n + 1, rb_crc16((const uint8_t *)out + 1, n));
    return n + 7;
}

static int is_digit(char c) { return c >= '0' && c <= '9'; }

int rb_parse_uint(const char *tok, size_t n, uint32_t limit, uint32_t *out)
{
    /* \d{1,10} below `limit` (decimal; leading zeros allowed, as in the host grammar) */
    uint64_t v = 0;
    size_t i;
    if (n == 0 || n > 10)
        return 0;
    for (i = 0; i < n; i++) {
        if (!is_digit(tok[i]))
            return 0;
        v = v * 10u + (uint64_t)(tok[i] - '0');
    }
    if (v >= limit)
        return 0;
    *out = (uint32_t)v;
    return 1;
}

int rb_is_name(const char *s, size_t n)
{
    /* [a-z][a-z0-9_]{0,31} */
    size_t i;
    if (n == 0 || n > 32 || !(s[0] >= 'a' && s[0] <= 'z'))
        return 0;
    for (i = 1; i < n; i++) {
        char c = s[i];
        if (!((c >= 'a' && c <= 'z') || is_digit(c) || c == '_'))
            return 0;
    }
    return 1;
}

int rb_is_word(const char *s, size_t n)
{
    /* [A-Za-z0-9_.:/%+^,-]{1,48} */
    size_t i;
    if (n == 0 || n > 48)
        return 0;
    for (i = 0; i < n; i++) {
        char c = s[i];
        if ((c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || is_digit(c))
            continue;
        switch (c) {
        case '_': case '.': case ':': case '/': case '%': case '+': case '^': case ',':
        case '-':
            continue;
        default:
            return 0;
        }
    }
    return 1;
}

int rb_token_is(const char *body, const rb_tok *t, const char *rom)
{
    return rb_rom_eq(rom, body + t->at, t->n);
}

size_t rb_rom_len(const char *rom)
{
    size_t n = 0;
    while (ROM_U8(rom + n))
        n++;
    return n;
}

int rb_rom_eq(const char *rom, const char *s, size_t n)
{
    size_t i;
    for (i = 0; i < n; i++)
        if (ROM_U8(rom + i) != (uint8_t)s[i])
            return 0;
    return ROM_U8(rom + n) == 0;
}

size_t rb_rom_copy(char *out, size_t cap, const char *rom)
{
    size_t i;
    for (i = 0; i + 1 < cap; i++) {
        out[i] = (char)ROM_U8(rom + i);
        if (out[i] == '\0')
            return i;
    }
    if (cap > 0)
        out[cap - 1] = '\0';
    return cap;                       /* did not fit */
}

const char *rb_rom_word(const char *list, int k)
{
    while (k-- > 0)
        list += rb_rom_len(list) + 1;
    return list;
}

int rb_rom_find(const char *list, const char *s, size_t n)
{
    int k;
    for (k = 0; ROM_U8(list) != 0; k++, list += rb_rom_len(list) + 1)
        if (rb_rom_eq(list, s, n))
            return k;
    return -1;
}

size_t rb_u32_text(char *out, uint32_t v)
{
    size_t n = 1, i;
    uint32_t t = 10u;
    while (n < 10 && v >= t) {       /* digits: 10^(n-1) <= v < 10^n */
        n++;
        t *= 10u;
    }
    for (i = n; i > 1; i--) {
        uint32_t q = v / 10u;
        out[i - 1] = (char)('0' + (v - q * 10u));
        v = q;
    }
    out[0] = (char)('0' + v);
    return n;
}

int rb_split(const char *body, size_t n, rb_tok *toks, int max_toks)
{
    /* Tokens separated by single spaces; an empty token (two spaces, a leading or trailing
     * space) is kept as an empty token so the grammar checks refuse it. Returns the count,
     * or -1 when there are more than max_toks. The body is at most RB_MAX_BODY bytes. */
    int count = 0;
    size_t start = 0, i;
    for (i = 0; i <= n; i++) {
        if (i == n || body[i] == ' ') {
            if (count == max_toks)
                return -1;
            toks[count].at = (uint8_t)start;
            toks[count].n = (uint8_t)(i - start);
            count++;
            start = i + 1;
        }
    }
    return count;
}

size_t rb_text_copy(char *out, size_t cap, const char *word)
{
    size_t n = rb_rom_copy(out, cap, word);
    return n < cap ? n : cap - 1;
}
