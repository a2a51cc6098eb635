/*
 * rb_text.c -- CRC-16/IBM-3740, frames and the token grammar (PROTOCOL.md §2-§3), and the
 * helpers that read constant strings (in flash with RB_USE_FLASH). No state; every function
 * here is pure. Numbers are in rb_num.c.
 */
#include "rb_internal.h"

#include <limits.h>
#include <string.h>

/* CRC-16/IBM-3740: poly 0x1021, init 0xFFFF, not reflected, xorout 0 (check 0x29B1), two
 * bytes at a time from two 256-entry tables (1 KB of flash); on 8/16-bit cores four bits at
 * a time from a 16-entry one (32 bytes). Tables generated from the polynomial. */
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

/* two bytes at a time: CRC_TABLE2[i] is CRC_TABLE advanced by a further zero byte, so
 * x = crc ^ (two bytes) gives crc' = CRC_TABLE2[x >> 8] ^ CRC_TABLE[x & 0xFF] */
static const uint16_t CRC_TABLE2[256] = {
    0x0000, 0x3331, 0x6662, 0x5553, 0xCCC4, 0xFFF5, 0xAAA6, 0x9997,
    0x89A9, 0xBA98, 0xEFCB, 0xDCFA, 0x456D, 0x765C, 0x230F, 0x103E,
    0x0373, 0x3042, 0x6511, 0x5620, 0xCFB7, 0xFC86, 0xA9D5, 0x9AE4,
    0x8ADA, 0xB9EB, 0xECB8, 0xDF89, 0x461E, 0x752F, 0x207C, 0x134D,
    0x06E6, 0x35D7, 0x6084, 0x53B5, 0xCA22, 0xF913, 0xAC40, 0x9F71,
    0x8F4F, 0xBC7E, 0xE92D, 0xDA1C, 0x438B, 0x70BA, 0x25E9, 0x16D8,
    0x0595, 0x36A4, 0x63F7, 0x50C6, 0xC951, 0xFA60, 0xAF33, 0x9C02,
    0x8C3C, 0xBF0D, 0xEA5E, 0xD96F, 0x40F8, 0x73C9, 0x269A, 0x15AB,
    0x0DCC, 0x3EFD, 0x6BAE, 0x589F, 0xC108, 0xF239, 0xA76A, 0x945B,
    0x8465, 0xB754, 0xE207, 0xD136, 0x48A1, 0x7B90, 0x2EC3, 0x1DF2,
    0x0EBF, 0x3D8E, 0x68DD, 0x5BEC, 0xC27B, 0xF14A, 0xA419, 0x9728,
    0x8716, 0xB427, 0xE174, 0xD245, 0x4BD2, 0x78E3, 0x2DB0, 0x1E81,
    0x0B2A, 0x381B, 0x6D48, 0x5E79, 0xC7EE, 0xF4DF, 0xA18C, 0x92BD,
    0x8283, 0xB1B2, 0xE4E1, 0xD7D0, 0x4E47, 0x7D76, 0x2825, 0x1B14,
    0x0859, 0x3B68, 0x6E3B, 0x5D0A, 0xC49D, 0xF7AC, 0xA2FF, 0x91CE,
    0x81F0, 0xB2C1, 0xE792, 0xD4A3, 0x4D34, 0x7E05, 0x2B56, 0x1867,
    0x1B98, 0x28A9, 0x7DFA, 0x4ECB, 0xD75C, 0xE46D, 0xB13E, 0x820F,
    0x9231, 0xA100, 0xF453, 0xC762, 0x5EF5, 0x6DC4, 0x3897, 0x0BA6,
    0x18EB, 0x2BDA, 0x7E89, 0x4DB8, 0xD42F, 0xE71E, 0xB24D, 0x817C,
    0x9142, 0xA273, 0xF720, 0xC411, 0x5D86, 0x6EB7, 0x3BE4, 0x08D5,
    0x1D7E, 0x2E4F, 0x7B1C, 0x482D, 0xD1BA, 0xE28B, 0xB7D8, 0x84E9,
    0x94D7, 0xA7E6, 0xF2B5, 0xC184, 0x5813, 0x6B22, 0x3E71, 0x0D40,
    0x1E0D, 0x2D3C, 0x786F, 0x4B5E, 0xD2C9, 0xE1F8, 0xB4AB, 0x879A,
    0x97A4, 0xA495, 0xF1C6, 0xC2F7, 0x5B60, 0x6851, 0x3D02, 0x0E33,
    0x1654, 0x2565, 0x7036, 0x4307, 0xDA90, 0xE9A1, 0xBCF2, 0x8FC3,
    0x9FFD, 0xACCC, 0xF99F, 0xCAAE, 0x5339, 0x6008, 0x355B, 0x066A,
    0x1527, 0x2616, 0x7345, 0x4074, 0xD9E3, 0xEAD2, 0xBF81, 0x8CB0,
    0x9C8E, 0xAFBF, 0xFAEC, 0xC9DD, 0x504A, 0x637B, 0x3628, 0x0519,
    0x10B2, 0x2383, 0x76D0, 0x45E1, 0xDC76, 0xEF47, 0xBA14, 0x8925,
    0x991B, 0xAA2A, 0xFF79, 0xCC48, 0x55DF, 0x66EE, 0x33BD, 0x008C,
    0x13C1, 0x20F0, 0x75A3, 0x4692, 0xDF05, 0xEC34, 0xB967, 0x8A56,
    0x9A68, 0xA959, 0xFC0A, 0xCF3B, 0x56AC, 0x659D, 0x30CE, 0x03FF,
};

uint16_t rb_crc16_update(uint16_t crc, const uint8_t *p, size_t n)
{
    for (; n >= 2; n -= 2, p += 2) {
        unsigned x = crc ^ ((unsigned)p[0] << 8 | p[1]);
        crc = (uint16_t)(CRC_TABLE2[x >> 8] ^ CRC_TABLE[x & 0xFFu]);
    }
    if (n)
        crc = (uint16_t)((crc << 8) ^ CRC_TABLE[((crc >> 8) ^ *p) & 0xFFu]);
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
    /* written from the last digit back, two at a time where int has 32 bits */
    size_t n = 1, i;
    uint32_t t = 10u;
    while (n < 10 && v >= t) {       /* digits: 10^(n-1) <= v < 10^n */
        n++;
        t *= 10u;
    }
    i = n;
#if UINT_MAX > 0xFFFFu
    while (i >= 2) {
        static const char pairs[201] = "00010203040506070809101112131415161718192021222324252627282930313233343536373839404142434445464748495051525354555657585960616263646566676869707172737475767778798081828384858687888990919293949596979899";
        uint32_t q = v / 100u;
        i -= 2;
        memcpy(out + i, pairs + 2 * (v - q * 100u), 2);
        v = q;
    }
#else
    while (i >= 2) {
        uint32_t q = v / 10u;
        out[--i] = (char)('0' + (v - q * 10u));
        v = q;
    }
#endif
    if (i)
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
