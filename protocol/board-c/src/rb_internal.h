/*
 * rb_internal.h -- declarations shared by the library's source files; not for users.
 */
#ifndef RB_INTERNAL_H
#define RB_INTERNAL_H

#include "rb_board.h"

typedef struct {                /* a token of a body: offset and length */
    uint8_t at, n;
} rb_tok;

#define RB_MAX_TOKENS 98        /* a 193-byte body has at most 97 tokens */


typedef enum { RB_TX_TELEMETRY, RB_TX_STATUS, RB_TX_REPLY, RB_TX_EVENT } rb_tx_kind;

/* rb_text.c */
int rb_body_char(uint8_t c);
int rb_parse_uint(const char *tok, size_t n, uint32_t limit, uint32_t *out);
int rb_is_name(const char *s, size_t n);
int rb_is_word(const char *s, size_t n);
int rb_token_is(const char *body, const rb_tok *t, const char *word);
int rb_split(const char *body, size_t n, rb_tok *toks, int max_toks);

/* rb_out.c: building bodies and queueing frames */
void rb_ln_start(rb_line *l, const char *word);
void rb_ln_raw(rb_line *l, const char *s, size_t n);
void rb_ln_word(rb_line *l, const char *s);          /* " word" */
void rb_ln_u32(rb_line *l, uint32_t v);              /* " 123" */
void rb_ln_num(rb_line *l, double v, int digits);    /* " 1.5" */
void rb_ln_kv(rb_line *l, const char *key, const char *word);
void rb_ln_kv_u32(rb_line *l, const char *key, uint32_t v);
void rb_ln_kv_num(rb_line *l, const char *key, double v);   /* 7 significant digits */
int rb_tx_put(rb_board *b, const rb_line *l, rb_tx_kind kind);  /* 0: dropped */
void rb_tx_flush(rb_board *b);
void rb_event(rb_board *b, rb_line *l);               /* l started with rb_ev_start */
void rb_ev_start(rb_board *b, rb_line *l, const char *kind);
double rb_board_round(double v);                      /* as the board stores a value */

/* rb_board.c: motor state, modes, safety */
typedef enum { RB_H_ARM, RB_H_RUN, RB_H_STOP, RB_H_DISARM, RB_H_TRIP, RB_H_CLEAR } rb_happening;
const char *rb_happen(rb_board *b, rb_happening h);   /* NULL, or the refusal code */
void rb_set_mode(rb_board *b, const rb_mode_run *run);
void rb_trip_cause(rb_board *b, const char *cause, int has_value, double value);
size_t rb_interlock(const rb_board *b, char *out, size_t cap);   /* "fault,heartbeat" */
void rb_status_fields(rb_board *b, rb_line *l);
int rb_param_index(const rb_board *b, const char *s, size_t n);
int rb_signal_index(const rb_board *b, const char *s, size_t n);
int rb_loop_index(const rb_board *b, const char *s, size_t n);
const char *rb_mode_name(rb_mode_kind k);
int rb_gain_busy(const rb_board *b, int param);
int rb_nv_load_image(rb_board *b, int apply);         /* count, or -1 when none/invalid */
int rb_nv_save_image(rb_board *b, uint16_t *crc);     /* count, or -1 on failure */

/* rb_control.c: PID, relay, the loops under a mode */
void rb_ctl_reset(rb_board *b);
void rb_ctl_idle(rb_board *b);
rb_real rb_ctl_setpoint(const rb_board *b, int loop);
rb_real rb_ctl_error(const rb_board *b, int loop, rb_real sp, rb_real y);
/* returns the loop index whose relay bound was exceeded, or -1 */
int rb_ctl_run(rb_board *b, double *bound_value);
void rb_ctl_start_relay(rb_board *b, int loop, rb_real error);
void rb_ctl_leave_override(rb_board *b, int loop);

/* rb_rx.c */
void rb_rx_reset(rb_board *b);

/* rb_cmd.c */
void rb_command(rb_board *b, const char *body, size_t n);

#define RB_SIG(b, i) (*(b)->rig->signals[(i)].value)
#define RB_PAR(b, i) (*(b)->rig->params[(i)].value)

#endif
