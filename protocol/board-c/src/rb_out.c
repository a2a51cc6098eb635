/*
 * rb_out.c -- building message bodies and the bounded transmit buffer (PROTOCOL.md §6.1:
 * the board never blocks on a full link; telemetry that does not fit is dropped and counted).
 */
#include "rb_internal.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void rb_ln_start(rb_line *l, const char *word)
{
    l->n = 0;
    l->overflow = 0;
    l->s[0] = '\0';
    rb_ln_raw(l, word, strlen(word));
}

void rb_ln_raw(rb_line *l, const char *s, size_t n)
{
    if (l->overflow || l->n + n > RB_MAX_BODY) {
        l->overflow = 1;
        return;
    }
    memcpy(l->s + l->n, s, n);
    l->n += n;
    l->s[l->n] = '\0';
}

void rb_ln_word(rb_line *l, const char *s)
{
    rb_ln_raw(l, " ", 1);
    rb_ln_raw(l, s, strlen(s));
}

static size_t u32_text(char *out, uint32_t v)
{
    char tmp[11];
    size_t n = 0, i;
    do {
        tmp[n++] = (char)('0' + v % 10u);
        v /= 10u;
    } while (v);
    for (i = 0; i < n; i++)
        out[i] = tmp[n - 1 - i];
    return n;
}

void rb_ln_u32(rb_line *l, uint32_t v)
{
    char tmp[12];
    tmp[0] = ' ';
    rb_ln_raw(l, tmp, 1 + u32_text(tmp + 1, v));
}

void rb_ln_num(rb_line *l, double v, int digits)
{
    char tmp[40];
    size_t n;
    tmp[0] = ' ';
    n = rb_format_number(tmp + 1, sizeof tmp - 1, v, digits);
    if (n == 0) {
        l->overflow = 1;      /* not finite: the message cannot be sent */
        return;
    }
    rb_ln_raw(l, tmp, n + 1);
}

static void kv_key(rb_line *l, const char *key)
{
    rb_ln_raw(l, " ", 1);
    rb_ln_raw(l, key, strlen(key));
    rb_ln_raw(l, "=", 1);
}

void rb_ln_kv(rb_line *l, const char *key, const char *word)
{
    kv_key(l, key);
    rb_ln_raw(l, word, strlen(word));
}

void rb_ln_kv_u32(rb_line *l, const char *key, uint32_t v)
{
    char tmp[11];
    kv_key(l, key);
    rb_ln_raw(l, tmp, u32_text(tmp, v));
}

void rb_ln_kv_num(rb_line *l, const char *key, double v)
{
    char tmp[40];
    size_t n = rb_format_number(tmp, sizeof tmp, v, 7);
    kv_key(l, key);
    if (n == 0) {
        l->overflow = 1;
        return;
    }
    rb_ln_raw(l, tmp, n);
}

double rb_board_round(double v)
{
    /* the value as stored and reported: 7 significant digits (what a float32 holds) */
    char tmp[40];
    size_t n = rb_format_number(tmp, sizeof tmp, v, 7);
    return n ? strtod(tmp, NULL) : v;
}

static void ring_put(rb_board *b, uint32_t *at, const uint8_t *data, size_t n)
{
    size_t i;
    for (i = 0; i < n; i++) {
        b->tx[*at] = data[i];
        *at = *at + 1 == RB_TX_SIZE ? 0 : *at + 1;
    }
}

int rb_tx_put(rb_board *b, const rb_line *l, rb_tx_kind kind)
{
    static const char hex[] = "0123456789ABCDEF";
    uint8_t tail[6];
    uint16_t crc;
    size_t n, room, i;
    uint32_t at;
    if (l->overflow || l->n == 0)
        return 0;
    for (i = 0; i < l->n; i++)
        if (!rb_body_char((uint8_t)l->s[i]))
            return 0;
    n = l->n + 7;                       /* '@' body '|' four hex digits '\n' */
    room = kind == RB_TX_TELEMETRY ? RB_TX_SIZE - RB_TX_SIZE / 4 : RB_TX_SIZE;
    if (b->tx_used + n > room) {
        if (kind != RB_TX_STATUS)
            b->drops++;
        return 0;
    }
    crc = rb_crc16((const uint8_t *)l->s, l->n);
    tail[0] = '|';
    tail[1] = (uint8_t)hex[(crc >> 12) & 15];
    tail[2] = (uint8_t)hex[(crc >> 8) & 15];
    tail[3] = (uint8_t)hex[(crc >> 4) & 15];
    tail[4] = (uint8_t)hex[crc & 15];
    tail[5] = '\n';
    at = (b->tx_head + b->tx_used) % RB_TX_SIZE;
    ring_put(b, &at, (const uint8_t *)"@", 1);
    ring_put(b, &at, (const uint8_t *)l->s, l->n);
    ring_put(b, &at, tail, sizeof tail);
    b->tx_used += (uint32_t)n;
    return 1;
}

void rb_tx_flush(rb_board *b)
{
    while (b->tx_used > 0) {
        size_t chunk = RB_TX_SIZE - b->tx_head;
        size_t took;
        if (chunk > b->tx_used)
            chunk = b->tx_used;
        took = b->port.write(b->port.ctx, b->tx + b->tx_head, chunk);
        if (took > chunk)
            took = chunk;
        b->tx_head = (uint32_t)((b->tx_head + took) % RB_TX_SIZE);
        b->tx_used -= (uint32_t)took;
        if (took < chunk)
            break;              /* the link is full: try again on the next poll */
    }
    if (b->tx_used == 0)
        b->tx_head = 0;
}

void rb_ev_start(rb_board *b, rb_line *l, const char *kind)
{
    rb_ln_start(l, "ev");
    rb_ln_u32(l, b->port.micros(b->port.ctx));
    rb_ln_word(l, kind);
}

void rb_event(rb_board *b, rb_line *l)
{
    rb_tx_put(b, l, RB_TX_EVENT);
}
