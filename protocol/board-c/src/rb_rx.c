/*
 * rb_rx.c -- receiving (PROTOCOL.md §2, §7.1): an interrupt-safe byte ring filled by
 * rb_rx_byte, and the line assembler run by rb_poll.
 *
 * The assembler works byte by byte, so it needs no more than one line of memory and gives
 * the same errors however the bytes are split into reads:
 * - bytes before an '@' on a line are junk (one `junk` per run; a lone "\r" before "\n" is
 *   not junk); 200 bytes of junk without "\n" are `too_long`;
 * - an '@' inside a frame abandons it (`truncated`) and starts a new one;
 * - a frame reaching 200 bytes without "\n" is `too_long`; the rest of it is skipped up to
 *   the next '@' or "\n";
 * - at "\n" the line is checked in the order of bench/rigbench/wire/frame.py parse_line: optional
 *   "\r", the last '|', four hex digits (`crc`), body characters (`bad_char`), an empty
 *   body (`truncated`), then the CRC (`crc`).
 * The kill byte 0x18 acts at once in rb_rx_byte (motor off) and, in stream order, in
 * rb_poll (fault latched, `ev trip cause=kill`); it discards a partial line without an
 * error.
 */
#include "rb_internal.h"

#include <string.h>

enum { RX_IDLE, RX_JUNK, RX_FRAME, RX_SKIP };

void rb_rx_byte(rb_board *b, uint8_t byte)
{
    rb_rx_index head = b->rx_head;
    rb_rx_index next = (rb_rx_index)((head + 1u) & (RB_RX_RING - 1u));
    if (byte == RB_KILL_BYTE) {
        b->kill_pending = 1;
        b->port.set_output(b->port.ctx, 0, 0);        /* §7.1: at once */
    }
    if (next == b->rx_tail) {
        b->rx_lost++;                                 /* counted as an rx error by rb_poll */
        return;
    }
    b->rx_ring[head] = byte;
    b->rx_head = next;
}

void rb_rx_block(rb_board *b, const uint8_t *data, size_t n)
{
    size_t i;
    for (i = 0; i < n; i++)
        rb_rx_byte(b, data[i]);
}

void rb_rx_reset(rb_board *b)
{
    b->rx_state = RX_IDLE;
    b->line_len = 0;
}

static void rx_error(rb_board *b, const char *rom_code)
{
    b->rx_err++;
    b->last_rx_error = rom_code;
}

static int hex_value(uint8_t c)
{
    if (c >= '0' && c <= '9')
        return c - '0';
    if (c >= 'A' && c <= 'F')
        return c - 'A' + 10;
    if (c >= 'a' && c <= 'f')
        return c - 'a' + 10;
    return -1;
}

static void check_line(rb_board *b)
{
    uint8_t *ln = b->line;            /* starts with '@', no "\n" */
    size_t n = b->line_len, bar, i;
    int crc = 0;
    if (n > 0 && ln[n - 1] == '\r')
        n--;
    for (bar = n; bar > 0; bar--)
        if (ln[bar - 1] == '|')
            break;
    if (bar == 0) {
        rx_error(b, S("truncated"));     /* no '|' and CRC before the end of the line */
        return;
    }
    bar--;                            /* index of the last '|' */
    if (n - bar - 1 != 4) {
        rx_error(b, S("crc"));
        return;
    }
    for (i = bar + 1; i < n; i++) {
        int h = hex_value(ln[i]);
        if (h < 0) {
            rx_error(b, S("crc"));
            return;
        }
        crc = crc * 16 + h;
    }
    for (i = 1; i < bar; i++) {
        if (!rb_body_char(ln[i])) {
            rx_error(b, S("bad_char"));
            return;
        }
    }
    if (bar == 1) {
        rx_error(b, S("truncated"));     /* empty body */
        return;
    }
    if (rb_crc16(ln + 1, bar - 1) != (uint16_t)crc) {
        rx_error(b, S("crc"));
        return;
    }
    rb_command(b, (const char *)ln + 1, bar - 1);
}

static void kill_now(rb_board *b)
{
    rb_rx_reset(b);                   /* a partial frame is discarded, not an error */
    rb_trip_rom(b, S("kill"), 0, 0);
}

static void assemble(rb_board *b, uint8_t c)
{
    switch (b->rx_state) {
    case RX_SKIP:
        if (c == '\n') {
            b->rx_state = RX_IDLE;
            return;
        }
        if (c != '@')
            return;
        b->rx_state = RX_IDLE;
        /* fall through: '@' starts a frame */
        /* FALLTHROUGH */
    case RX_IDLE:
        if (c == '\n')
            return;
        b->line_len = 0;
        if (c == '@') {
            b->rx_state = RX_FRAME;
            b->line[b->line_len++] = c;
        } else {
            b->rx_state = RX_JUNK;
            b->line[0] = c;           /* only to tell a lone "\r" from junk */
            b->line_len = 1;
        }
        return;
    case RX_JUNK:
        if (c == '\n') {
            if (!(b->line_len == 1 && b->line[0] == '\r'))
                rx_error(b, S("junk"));
            rb_rx_reset(b);
            return;
        }
        if (c == '@') {
            rx_error(b, S("junk"));
            b->rx_state = RX_FRAME;
            b->line[0] = c;
            b->line_len = 1;
            return;
        }
        if (b->line_len + 1u >= RB_MAX_LINE) {
            rx_error(b, S("too_long"));
            b->rx_state = RX_SKIP;
            b->line_len = 0;
            return;
        }
        b->line_len++;                /* counted, not kept */
        return;
    case RX_FRAME:
    default:
        if (c == '\n') {
            check_line(b);
            rb_rx_reset(b);
            return;
        }
        if (c == '@') {
            rx_error(b, S("truncated")); /* a new '@' before the frame ended */
            b->line[0] = c;
            b->line_len = 1;
            return;
        }
        if (b->line_len + 1u >= RB_MAX_LINE) {
            rx_error(b, S("too_long"));  /* the 200th byte is not "\n" */
            b->rx_state = RX_SKIP;
            b->line_len = 0;
            return;
        }
        b->line[b->line_len++] = c;
        return;
    }
}

void rb_poll(rb_board *b)
{
    int saw_kill = 0;
    uint8_t lost = b->rx_lost;
    if (lost != b->rx_lost_seen) {                    /* the ring overflowed: a line is lost */
        rx_error(b, S("overrun"));
        b->rx_lost_seen = lost;
    }
    while (b->rx_tail != b->rx_head) {
        rb_rx_index tail = b->rx_tail;
        uint8_t c = b->rx_ring[tail];
        b->rx_tail = (rb_rx_index)((tail + 1u) & (RB_RX_RING - 1u));
        if (c == RB_KILL_BYTE) {
            saw_kill = 1;
            kill_now(b);
        } else {
            assemble(b, c);
        }
    }
    if (b->kill_pending) {
        b->kill_pending = 0;
        if (!saw_kill)
            kill_now(b);              /* the ring was full when the kill byte came */
    }
    rb_tx_flush(b);
}
