/*
 * rb_out.c -- building message bodies and the bounded transmit buffer (PROTOCOL.md §6.1:
 * the board never blocks on a full link; telemetry that does not fit is dropped and counted).
 */
#include "rb_internal.h"

#include <string.h>

void rb_ln_raw(rb_line *l, const char *s, size_t n)
{
    if (l->overflow || l->n + n > RB_MAX_BODY) {
        l->overflow = 1;
        return;
    }
    memcpy(l->s + l->n, s, n);
    l->n = (uint8_t)(l->n + n);
}

void rb_ln_rom(rb_line *l, const char *rom)
{
    size_t n = l->n;
    uint8_t c;
    if (l->overflow)
        return;
    while ((c = ROM_U8(rom++)) != 0) {
        if (n == RB_MAX_BODY) {
            l->overflow = 1;
            return;
        }
        l->s[n++] = (char)c;
    }
    l->n = (uint8_t)n;
}

void rb_ln_open(rb_line *l, const char *rom_word)
{
    l->n = 0;
    l->overflow = 0;
    rb_ln_rom(l, rom_word);
}

void rb_ln_word(rb_line *l, const char *rom)
{
    rb_ln_raw(l, " ", 1);
    rb_ln_rom(l, rom);
}

void rb_ln_u32(rb_line *l, uint32_t v)
{
    if (l->overflow || l->n + 11u > RB_MAX_BODY) {   /* " 4294967295" */
        char tmp[11];
        tmp[0] = ' ';
        rb_ln_raw(l, tmp, 1 + rb_u32_text(tmp + 1, v));
        return;
    }
    l->s[l->n] = ' ';
    l->n = (uint8_t)(l->n + 1u + rb_u32_text(l->s + l->n + 1, v));
}

void rb_ln_num(rb_line *l, rb_real v, int digits)
{
    /* written in place when there is room for the longest number, else through a copy */
    char tmp[RB_NUM_TEXT + 1];
    int direct = !l->overflow && l->n + 1u + RB_NUM_TEXT <= RB_MAX_BODY + 1u;
    char *at = direct ? l->s + l->n : tmp;
    size_t n;
    at[0] = ' ';
    n = rb_format_real(at + 1, RB_NUM_TEXT, v, digits);
    if (n == 0) {
        l->overflow = 1;      /* not finite: the message cannot be sent */
        return;
    }
    if (direct)
        l->n = (uint8_t)(l->n + n + 1u);
    else
        rb_ln_raw(l, tmp, n + 1);
}

static void kv_key(rb_line *l, const char *rom_key)
{
    rb_ln_raw(l, " ", 1);
    rb_ln_rom(l, rom_key);
    rb_ln_raw(l, "=", 1);
}

void rb_ln_kv(rb_line *l, const char *rom_key, const char *rom_word)
{
    kv_key(l, rom_key);
    rb_ln_rom(l, rom_word);
}

void rb_ln_kv_ram(rb_line *l, const char *rom_key, const char *s, size_t n)
{
    kv_key(l, rom_key);
    rb_ln_raw(l, s, n);
}

void rb_ln_kv_u32(rb_line *l, const char *rom_key, uint32_t v)
{
    char tmp[10];
    kv_key(l, rom_key);
    rb_ln_raw(l, tmp, rb_u32_text(tmp, v));
}

void rb_ln_kv_num(rb_line *l, const char *rom_key, rb_real v)
{
    char tmp[RB_NUM_TEXT];
    size_t n = rb_format_real(tmp, sizeof tmp, v, 7);
    kv_key(l, rom_key);
    if (n == 0) {
        l->overflow = 1;
        return;
    }
    rb_ln_raw(l, tmp, n);
}

/* ------------------------------------------------------------------ transmit buffer */

static void ring_put(rb_board *b, rb_tx_index *at, const uint8_t *data, size_t n)
{
    size_t first = RB_TX_SIZE - *at;          /* bytes up to the end of the buffer */
    if (first > n)
        first = n;
    memcpy(b->tx + *at, data, first);
    memcpy(b->tx, data + first, n - first);
    *at = (rb_tx_index)(n - first > 0 ? n - first : *at + first);
    if (*at == RB_TX_SIZE)
        *at = 0;
}

static int tx_room(rb_board *b, size_t n, rb_tx_kind kind)
{
    size_t room = kind == RB_TX_TELEMETRY ? RB_TX_SIZE - RB_TX_SIZE / 4 : RB_TX_SIZE;
    if ((size_t)b->tx_used + n > room) {
        if (kind != RB_TX_STATUS)
            b->drops++;
        return 0;
    }
    return 1;
}

int rb_tx_put(rb_board *b, const rb_line *l, rb_tx_kind kind)
{
    /* every line's buffer has a byte before the body and 6 after it (rb_board.h), so the
     * frame is completed in place and copied once */
    uint8_t *f = (uint8_t *)l->s - 1;
    size_t i;
    if (l->overflow || l->n == 0)
        return 0;
    if (kind != RB_TX_TELEMETRY)     /* telemetry is only numbers the library wrote */
        for (i = 0; i < l->n; i++)
            if (!rb_body_char((uint8_t)l->s[i]))
                return 0;
    f[0] = '@';
    rb_crc_tail(f + 1 + l->n, rb_crc16(f + 1, l->n));
    return rb_tx_put_frame(b, f, (size_t)l->n + 7u, kind);
}

int rb_tx_put_frame(rb_board *b, const uint8_t *frame, size_t n, rb_tx_kind kind)
{
    rb_tx_index at;
    if (n == 0 || !tx_room(b, n, kind))
        return 0;
    at = (rb_tx_index)((b->tx_head + b->tx_used) % RB_TX_SIZE);
    ring_put(b, &at, frame, n);
    b->tx_used = (rb_tx_index)(b->tx_used + n);
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
        b->tx_head = (rb_tx_index)((b->tx_head + took) % RB_TX_SIZE);
        b->tx_used = (rb_tx_index)(b->tx_used - took);
        if (took < chunk)
            break;              /* the link is full: try again on the next poll */
    }
    if (b->tx_used == 0)
        b->tx_head = 0;
}

rb_line *rb_ev_start(rb_board *b, const char *rom_kind)
{
    rb_line *l = &b->out_event;
    rb_ln_open(l, S("ev"));
    rb_ln_u32(l, b->port.micros(b->port.ctx));
    rb_ln_word(l, rom_kind);
    return l;
}

void rb_event(rb_board *b, rb_line *l)
{
    rb_tx_put(b, l, RB_TX_EVENT);
}
