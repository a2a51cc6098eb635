/*
 * rb_internal.h -- declarations shared by the library's source files; not for users.
 *
 * Strings: a `const char *` that points at a constant -- one of the library's words or a
 * string of the user's declaration -- is read with ROM_U8 and the rb_rom_* helpers, since
 * with RB_USE_FLASH (AVR) it lives in program memory. Text received or built at run time
 * (tokens of a body, numbers, the latched fault) is in RAM and passed with its length.
 * S("word") is a library constant: in flash there, a plain literal elsewhere.
 */
#ifndef RB_INTERNAL_H
#define RB_INTERNAL_H

#include "rb_board.h"

#include <string.h>

#if RB_USE_FLASH
#define ROM_U8(p) pgm_read_byte(p)
#define ROM_U16(p) pgm_read_word(p)
#define ROM_COPY(dst, src, n) memcpy_P((dst), (src), (n))
#define ROM_PTR(pp) ((const void *)pgm_read_word(pp))    /* a pointer stored in flash */
#define S(x) PSTR(x)
#else
#define ROM_U8(p) (*(const uint8_t *)(p))
#define ROM_U16(p) (*(p))
#define ROM_COPY(dst, src, n) memcpy((dst), (src), (n))
#define ROM_PTR(pp) ((const void *)*(pp))
#define S(x) (x)
#endif

/* the variable behind parameter / signal i (the tables may be in flash) */
#define RB_PAR(b, i) (*(rb_real *)ROM_PTR(&(b)->rig->params[(i)].value))
#define RB_SIG(b, i) (*(rb_real *)ROM_PTR(&(b)->rig->signals[(i)].value))
#define RB_ABS(x) ((x) < 0 ? -(x) : (x))

#define RB_MAX_DIGITS 7         /* significant digits rb_format_number writes at most */
#define RB_MAX_NUMBER 64        /* a number token is shorter than this */
#define RB_NAME_BUF 50          /* a word (<= 48 characters), its '\0', one to spare */
#define RB_NUM_TEXT 16          /* the longest number text, "-1.234567e-308", and its '\0' */

typedef struct {                /* a token of a body: offset and length */
    uint8_t at, n;
} rb_tok;

#define RB_MAX_TOKENS 98        /* a 193-byte body has at most 97 tokens */

typedef enum { RB_TX_TELEMETRY, RB_TX_STATUS, RB_TX_REPLY, RB_TX_EVENT } rb_tx_kind;

/* rb_text.c: grammar, CRC, constant strings */
int rb_body_char(uint8_t c);
int rb_parse_uint(const char *tok, size_t n, uint32_t limit, uint32_t *out);
int rb_is_name(const char *s, size_t n);           /* RAM text */
int rb_is_word(const char *s, size_t n);
int rb_token_is(const char *body, const rb_tok *t, const char *rom);
int rb_split(const char *body, size_t n, rb_tok *toks, int max_toks);
size_t rb_rom_len(const char *rom);
int rb_rom_eq(const char *rom, const char *s, size_t n);   /* rom == s[0..n) */
size_t rb_rom_copy(char *out, size_t cap, const char *rom); /* '\0'-ended; length, or cap */
const char *rb_rom_word(const char *list, int k);   /* k-th word of "a\0b\0c\0" */
int rb_rom_find(const char *list, const char *s, size_t n);  /* index in such a list, -1 */
size_t rb_u32_text(char *out, uint32_t v);
void rb_crc_tail(uint8_t *out, uint16_t crc);         /* "|XXXX\n" */

/* rb_num.c: numbers (§3) */
int rb_number_grammar(const char *tok, size_t n);
size_t rb_format_real(char *out, size_t cap, rb_real value, int digits);
int rb_parse_real(const char *tok, size_t n, rb_real *out);
rb_real rb_round_real(rb_real v);                     /* as the board stores a value */

/* rb_out.c: building bodies and queueing frames */
void rb_ln_open(rb_line *l, const char *rom_word);  /* start a body with a word */
void rb_ln_raw(rb_line *l, const char *s, size_t n);
void rb_ln_rom(rb_line *l, const char *rom);
void rb_ln_word(rb_line *l, const char *rom);        /* " word" */
void rb_ln_u32(rb_line *l, uint32_t v);              /* " 123" */
void rb_ln_num(rb_line *l, rb_real v, int digits);   /* " 1.5" */
void rb_ln_kv(rb_line *l, const char *rom_key, const char *rom_word);
void rb_ln_kv_ram(rb_line *l, const char *rom_key, const char *s, size_t n);
void rb_ln_kv_u32(rb_line *l, const char *rom_key, uint32_t v);
void rb_ln_kv_num(rb_line *l, const char *rom_key, rb_real v);   /* 7 significant digits */
int rb_tx_put(rb_board *b, const rb_line *l, rb_tx_kind kind);  /* 0: dropped */
int rb_tx_put_frame(rb_board *b, const uint8_t *frame, size_t n, rb_tx_kind kind);
void rb_tx_flush(rb_board *b);
void rb_event(rb_board *b, rb_line *l);               /* l started with rb_ev_start */
rb_line *rb_ev_start(rb_board *b, const char *rom_kind);

/* rb_board.c: motor state, modes, safety */
typedef enum { RB_H_ARM, RB_H_RUN, RB_H_STOP, RB_H_DISARM, RB_H_TRIP, RB_H_CLEAR } rb_happening;
const char *rb_happen(rb_board *b, rb_happening h);   /* NULL, or the refusal code */
void rb_set_mode(rb_board *b, const rb_mode_run *run);
void rb_trip_cause(rb_board *b, const char *cause, size_t n, int has_value, rb_real value);
void rb_trip_rom(rb_board *b, const char *rom_cause, int has_value, rb_real value);
size_t rb_interlock(const rb_board *b, char *out, size_t cap);   /* "fault,heartbeat" */
void rb_status_fields(rb_board *b, rb_line *l);
int rb_param_index(const rb_board *b, const char *s, size_t n);
int rb_signal_index(const rb_board *b, const char *s, size_t n);
int rb_loop_index(const rb_board *b, const char *s, size_t n);
const char *rb_mode_name(rb_mode_kind k);
int rb_gain_busy(const rb_board *b, int param);
int rb_nv_load_image(rb_board *b, int apply);         /* count, or -1 when none/invalid */
int rb_nv_save_image(rb_board *b, uint16_t *crc);     /* count, or -1 on failure */
void rb_param_get(const rb_board *b, int i, rb_param *out);
void rb_loop_get(const rb_board *b, int i, rb_loop *out);

/* rb_control.c: PID, relay, the loops under a mode */
void rb_ctl_reset(rb_board *b);
void rb_ctl_idle(rb_board *b);
rb_real rb_ctl_setpoint(const rb_board *b, int loop);
rb_real rb_ctl_error(const rb_board *b, int loop, rb_real sp, rb_real y);
/* returns the loop index whose relay bound was exceeded, or -1 */
int rb_ctl_run(rb_board *b, rb_real *bound_value);
void rb_ctl_start_relay(rb_board *b, int loop, rb_real error);
void rb_ctl_leave_override(rb_board *b, int loop);

/* rb_rx.c */
void rb_rx_reset(rb_board *b);

/* rb_cmd.c */
void rb_command(rb_board *b, const char *body, size_t n);

#endif
