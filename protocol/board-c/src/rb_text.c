/*
 * rb_text.c -- CRC-16/IBM-3740, frames, numbers and the token grammar (PROTOCOL.md §2-§3).
 * No state; every function here is pure.
 */
#include "rb_internal.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

uint16_t rb_crc16_update(uint16_t crc, const uint8_t *p, size_t n)
{
    /* CRC-16/IBM-3740: poly 0x1021, init 0xFFFF, not reflected, xorout 0 (check 0x29B1) */
    while (n--) {
        int i;
        crc ^= (uint16_t)((uint16_t)(*p++) << 8);
        for (i = 0; i < 8; i++)
            crc = (crc & 0x8000u) ? (uint16_t)((crc << 1) ^ 0x1021u) : (uint16_t)(crc << 1);
    }
    return crc;
}

uint16_t rb_crc16(const uint8_t *data, size_t n)
{
    return rb_crc16_update(0xFFFFu, data, n);
}

int rb_body_char(uint8_t c)
{
    return c >= 0x20 && c <= 0x7E && c != '@' && c != '|';
}

size_t rb_frame(char *out, size_t cap, const char *body, size_t n)
{
    static const char hex[] = "0123456789ABCDEF";
    uint16_t crc;
    size_t i;
    if (n == 0 || n > RB_MAX_BODY || cap < n + 7)
        return 0;
    for (i = 0; i < n; i++)
        if (!rb_body_char((uint8_t)body[i]))
            return 0;
    crc = rb_crc16((const uint8_t *)body, n);
    out[0] = '@';
    memcpy(out + 1, body, n);
    out[n + 1] = '|';
    out[n + 2] = hex[(crc >> 12) & 15];
    out[n + 3] = hex[(crc >> 8) & 15];
    out[n + 4] = hex[(crc >> 4) & 15];
    out[n + 5] = hex[crc & 15];
    out[n + 6] = '\n';
    return n + 7;
}

size_t rb_format_number(char *out, size_t cap, double value, int digits)
{
    /* "%.*g", then the exponent without '+' and leading zeros ("1e-07" -> "1e-7"), and
     * "-0" -> "0": the shortest text the grammar of §3 accepts (as bench/rigbench/wire writes it). */
    char tmp[40];
    char *e;
    int n;
    size_t len;
    if (!isfinite(value) || digits < 1 || digits > 17)
        return 0;
    n = snprintf(tmp, sizeof tmp, "%.*g", digits, value);
    if (n <= 0 || (size_t)n >= sizeof tmp)
        return 0;
    e = strchr(tmp, 'e');
    if (e != NULL) {
        char *src = e + 1, *dst = e + 1;
        if (*src == '+')
            src++;
        else if (*src == '-')
            *dst++ = *src++;
        while (*src == '0' && src[1] != '\0')
            src++;
        while (*src)
            *dst++ = *src++;
        *dst = '\0';
    }
    if (strcmp(tmp, "-0") == 0)
        strcpy(tmp, "0");
    len = strlen(tmp);
    if (len + 1 > cap)
        return 0;
    memcpy(out, tmp, len + 1);
    return len;
}

static int is_digit(char c) { return c >= '0' && c <= '9'; }

int rb_parse_number(const char *tok, size_t n, double *out)
{
    /* -?D+(.D+)?([eE][-+]?D+)?  no nan, inf, leading '+' or '.'; the value must be finite */
    char tmp[64];
    size_t i = 0;
    double v;
    if (n == 0 || n >= sizeof tmp)
        return 0;
    if (tok[i] == '-')
        i++;
    if (i >= n || !is_digit(tok[i]))
        return 0;
    while (i < n && is_digit(tok[i]))
        i++;
    if (i < n && tok[i] == '.') {
        i++;
        if (i >= n || !is_digit(tok[i]))
            return 0;
        while (i < n && is_digit(tok[i]))
            i++;
    }
    if (i < n && (tok[i] == 'e' || tok[i] == 'E')) {
        i++;
        if (i < n && (tok[i] == '+' || tok[i] == '-'))
            i++;
        if (i >= n || !is_digit(tok[i]))
            return 0;
        while (i < n && is_digit(tok[i]))
            i++;
    }
    if (i != n)
        return 0;
    memcpy(tmp, tok, n);
    tmp[n] = '\0';
    v = strtod(tmp, NULL);
    if (!isfinite(v))
        return 0;
    *out = v;
    return 1;
}

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
        if (!((c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || is_digit(c) ||
              strchr("_.:/%+^,-", c) != NULL))
            return 0;
    }
    return 1;
}

int rb_token_is(const char *body, const rb_tok *t, const char *word)
{
    size_t n = strlen(word);
    return t->n == n && memcmp(body + t->at, word, n) == 0;
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
