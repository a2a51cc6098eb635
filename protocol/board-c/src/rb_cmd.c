/*
 * rb_cmd.c -- host commands (PROTOCOL.md §4-§8): the grammar of a body, the handler of each
 * verb, and the one reply every command gets. Follows bench/rigbench/wire/messages.py
 * (parse_host_body), bench/rigbench/rig/firmware/board.py (_answer_bad, _command) and
 * firmware_commands.py / firmware_modes.py, so both boards give the same answers.
 */
#include "rb_internal.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

#define OPEN_MAX_S 10.0     /* §8: an open-loop run lasts at most 10 s */
#define INJECT_MAX_S 60.0   /* rigbench's own bound on an injection */
#define STREAM_DIV_MAX 4294967295.0

typedef struct {
    rb_board *b;
    const char *body;
    rb_tok *t;
    int nt;
    uint16_t seq;
    rb_line *reply;         /* the board's out_reply */
    const char *err;        /* error code, NULL: the reply is ok */
    char text[96];          /* err text */
} rb_ctx;

#define TOKP(c, i) ((c)->body + (c)->t[(i)].at)
#define TOKN(c, i) ((size_t)(c)->t[(i)].n)

static void refuse(rb_ctx *c, const char *code, const char *fmt, const char *a)
{
    /* err text: at most 80 printable characters, no '|' or '@' (firmware.py refusal_text) */
    size_t i;
    c->err = code;
    snprintf(c->text, sizeof c->text, fmt, a != NULL ? a : "");
    c->text[80] = '\0';
    for (i = 0; c->text[i]; i++) {
        char ch = c->text[i];
        if (ch == '|')
            c->text[i] = '/';
        else if (ch == '@' || ch < 0x20 || ch > 0x7E)
            c->text[i] = '?';
    }
    while (i > 0 && c->text[i - 1] == ' ')
        c->text[--i] = '\0';
}

static void tok_copy(char *out, size_t cap, const char *s, size_t n)
{
    if (n >= cap)
        n = cap - 1;
    memcpy(out, s, n);
    out[n] = '\0';
}

/* ------------------------------------------------------------------ grammar helpers */

static int fields_ok(rb_ctx *c, int from)
{
    /* key=value tokens, keys names, values words, no key twice (§3) */
    int i, j;
    for (i = from; i < c->nt; i++) {
        const char *s = TOKP(c, i);
        size_t n = TOKN(c, i), eq;
        for (eq = 0; eq < n && s[eq] != '='; eq++) {
        }
        if (eq == n || !rb_is_name(s, eq) || !rb_is_word(s + eq + 1, n - eq - 1))
            return 0;
        for (j = from; j < i; j++) {
            const char *o = TOKP(c, j);
            size_t m = TOKN(c, j), oeq;
            for (oeq = 0; oeq < m && o[oeq] != '='; oeq++) {
            }
            if (oeq == eq && memcmp(o, s, eq) == 0)
                return 0;
        }
    }
    return 1;
}

static size_t key_len(rb_ctx *c, int i)
{
    size_t n = 0;
    while (n < TOKN(c, i) && TOKP(c, i)[n] != '=')
        n++;
    return n;
}

static int field(rb_ctx *c, int from, const char *key, const char **val, size_t *vn)
{
    int i;
    for (i = from; i < c->nt; i++) {
        size_t k = key_len(c, i);
        if (k == strlen(key) && memcmp(TOKP(c, i), key, k) == 0) {
            *val = TOKP(c, i) + k + 1;
            *vn = TOKN(c, i) - k - 1;
            return 1;
        }
    }
    return 0;
}

/* ------------------------------------------------------------------ handlers */

static void on_hello(rb_ctx *c)
{
    const rb_rig *r = c->b->rig;
    const char *v = TOKP(c, 2);
    uint32_t major = 0;
    size_t i = 0;
    while (v[i] != '.')
        major = major * 10u + (uint32_t)(v[i++] - '0');
    if (major != RB_PROTO_MAJOR) {
        refuse(c, "version", "board speaks 1.0", NULL);
        return;
    }
    rb_ln_kv(c->reply, "proto", "1.0");
    rb_ln_kv(c->reply, "board", r->board);
    rb_ln_kv(c->reply, "fw", r->fw);
    rb_ln_kv(c->reply, "rig", r->rig);
    rb_ln_kv_num(c->reply, "rate_hz", (double)r->rate_hz);
    rb_ln_kv_u32(c->reply, "watchdog_ms", r->watchdog_ms);
    rb_ln_kv_u32(c->reply, "params", r->n_params);
    rb_ln_kv_u32(c->reply, "signals", r->n_signals);
    rb_ln_kv_u32(c->reply, "loops", r->n_loops);
    if (r->simulated)
        rb_ln_kv(c->reply, "sim", "1");
}

static void on_describe(rb_ctx *c, uint32_t index, char what)
{
    const rb_rig *r = c->b->rig;
    rb_line *l = c->reply;
    char num[8];
    snprintf(num, sizeof num, "%u", (unsigned)index);
    if (what == 'p') {
        const rb_param *p;
        if (index >= r->n_params) {
            refuse(c, "unknown_name", "no parameter %s", num);
            return;
        }
        p = &r->params[index];
        rb_ln_kv_u32(l, "index", index);
        rb_ln_kv(l, "name", p->name);
        rb_ln_kv(l, "unit", p->unit);
        rb_ln_kv_num(l, "min", (double)p->min);
        rb_ln_kv_num(l, "max", (double)p->max);
        rb_ln_kv_num(l, "value", (double)*p->value);
        rb_ln_kv(l, "access", p->writable ? "rw" : "ro");
    } else if (what == 's') {
        if (index >= r->n_signals) {
            refuse(c, "unknown_name", "no signal %s", num);
            return;
        }
        rb_ln_kv_u32(l, "index", index);
        rb_ln_kv(l, "name", r->signals[index].name);
        rb_ln_kv(l, "unit", r->signals[index].unit);
    } else {
        static const char *const plants[] = {"stable", "integrating", "unstable"};
        const rb_loop *d;
        if (index >= r->n_loops) {
            refuse(c, "unknown_name", "no loop %s", num);
            return;
        }
        d = &r->loops[index];
        rb_ln_kv_u32(l, "index", index);
        rb_ln_kv(l, "name", d->name);
        rb_ln_kv(l, "measure", d->measure);
        rb_ln_kv(l, "output", d->output);
        rb_ln_kv(l, "gains", d->kp);
        rb_ln_raw(l, ",", 1);
        rb_ln_raw(l, d->ki, strlen(d->ki));
        rb_ln_raw(l, ",", 1);
        rb_ln_raw(l, d->kd, strlen(d->kd));
        rb_ln_kv(l, "plant", plants[d->plant]);
        rb_ln_kv(l, "relay", d->relay == RB_RELAY_INTEGRAL ? "integral" : "output");
        rb_ln_kv(l, "setpoint", d->setpoint_signal != NULL ? d->setpoint_signal : d->setpoint);
        rb_ln_kv(l, "limit", d->limit);
        rb_ln_kv(l, "dfilt", d->dfilt);
        if (d->rate != NULL)
            rb_ln_kv(l, "rate", d->rate);
        rb_ln_kv(l, "action", d->action == RB_ACTION_REVERSE ? "reverse" : "direct");
    }
}

static int unknown_param(rb_ctx *c, const char *s, size_t n)
{
    char name[40];
    int i = rb_param_index(c->b, s, n);
    if (i < 0) {
        tok_copy(name, sizeof name, s, n);
        refuse(c, "unknown_name", "no parameter %s", name);
    }
    return i;
}

static void on_get(rb_ctx *c)
{
    int i, j;
    for (i = 2; i < c->nt; i++)
        for (j = 2; j < i; j++)
            if (TOKN(c, i) == TOKN(c, j) && memcmp(TOKP(c, i), TOKP(c, j), TOKN(c, i)) == 0) {
                refuse(c, "bad_args", "a name given twice", NULL);
                return;
            }
    for (i = 2; i < c->nt; i++)
        if (unknown_param(c, TOKP(c, i), TOKN(c, i)) < 0)
            return;
    for (i = 2; i < c->nt; i++) {
        int p = rb_param_index(c->b, TOKP(c, i), TOKN(c, i));
        rb_ln_kv_num(c->reply, c->b->rig->params[p].name, (double)RB_PAR(c->b, p));
    }
}

static double token_value(rb_ctx *c, int i)
{
    /* the number of a name=value token the grammar check already accepted */
    size_t k = key_len(c, i);
    double v = 0;
    rb_parse_number(TOKP(c, i) + k + 1, TOKN(c, i) - k - 1, &v);
    return v;
}

static int check_assigns(rb_ctx *c, int reply)
{
    /* every assignment of a set or stage (§5.5): the first refusal, or 1 when all are legal;
     * `reply` adds the values as they will be applied to the reply */
    rb_board *b = c->b;
    int i;
    char name[40], lo[24], hi[24], text[96];
    for (i = 2; i < c->nt; i++) {
        size_t k = key_len(c, i);
        const rb_param *p;
        double v;
        int pi = unknown_param(c, TOKP(c, i), k);
        if (pi < 0)
            return 0;
        p = &b->rig->params[pi];
        if (!p->writable) {
            refuse(c, "readonly", "%s is read-only", p->name);
            return 0;
        }
        v = rb_board_round(token_value(c, i));
        if (!((double)p->min <= v && v <= (double)p->max)) {
            rb_format_number(lo, sizeof lo, (double)p->min, 7);
            rb_format_number(hi, sizeof hi, (double)p->max, 7);
            snprintf(text, sizeof text, "%s %s..%s", p->name, lo, hi);
            refuse(c, "range", "%s", text);
            return 0;
        }
        if (rb_gain_busy(b, pi)) {
            tok_copy(name, sizeof name, p->name, strlen(p->name));
            refuse(c, "busy", "%s belongs to a loop under test", name);
            return 0;
        }
        if (reply)
            rb_ln_kv_num(c->reply, p->name, v);
    }
    return 1;
}

static int staged_already(rb_ctx *c, uint8_t n)
{
    /* 1 when an assignment of this frame names a parameter staged before */
    int i, j;
    for (i = 2; i < c->nt; i++) {
        int pi = rb_param_index(c->b, TOKP(c, i), key_len(c, i));
        for (j = 0; pi >= 0 && j < n; j++)
            if (c->b->staged_ix[j] == pi)
                return 1;
    }
    return 0;
}

static void on_set(rb_ctx *c)
{
    /* atomic (§5.5): the staged group and every assignment checked, the reply built, then
     * all applied (the tokens are read twice rather than kept: less stack on a small
     * board). The staged group is used or dropped here. */
    rb_board *b = c->b;
    uint8_t n = b->n_staged, j;
    int i;
    char name[40];
    b->n_staged = 0;
    if (staged_already(c, n)) {
        refuse(c, "bad_args", "a name staged and set again", NULL);
        return;
    }
    for (j = 0; j < n; j++)
        if (rb_gain_busy(b, b->staged_ix[j])) {
            const char *pn = b->rig->params[b->staged_ix[j]].name;
            tok_copy(name, sizeof name, pn, strlen(pn));
            refuse(c, "busy", "%s belongs to a loop under test", name);
            return;
        }
    if (!check_assigns(c, 1))
        return;
    if (c->reply->overflow) {
        refuse(c, "bad_args", "reply would not fit in one line; set fewer", NULL);
        return;
    }
    for (j = 0; j < n; j++)
        *b->rig->params[b->staged_ix[j]].value = b->staged_val[j];
    for (i = 2; i < c->nt; i++) {
        int pi = rb_param_index(b, TOKP(c, i), key_len(c, i));
        *b->rig->params[pi].value = (rb_real)rb_board_round(token_value(c, i));
    }
}

static void on_stage(rb_ctx *c)
{
    /* §5.5: check the assignments and keep them for the next `set`; a refusal drops the
     * whole group */
    rb_board *b = c->b;
    uint8_t n = b->n_staged;
    int i;
    b->n_staged = 0;
    if (staged_already(c, n)) {
        refuse(c, "bad_args", "a name staged twice", NULL);
        return;
    }
    if (!check_assigns(c, 0))
        return;
    if (n + (c->nt - 2) > RB_MAX_STAGED) {
        refuse(c, "bad_args", "more assignments than this board can stage", NULL);
        return;
    }
    for (i = 2; i < c->nt; i++) {
        b->staged_ix[n] = (uint8_t)rb_param_index(b, TOKP(c, i), key_len(c, i));
        b->staged_val[n] = (rb_real)rb_board_round(token_value(c, i));
        n++;
    }
    b->n_staged = n;
    rb_ln_kv_num(c->reply, "staged", (double)n);
}

static void on_stream(rb_ctx *c, double rate)
{
    rb_board *b = c->b;
    double loop_hz = (double)b->rig->rate_hz, ratio, lo, hi, div;
    if (rate < 0) {
        char text[40];
        char num[24];
        rb_format_number(num, sizeof num, loop_hz, 6);
        snprintf(text, sizeof text, "rate_hz 0..%s", num);
        refuse(c, "range", "%s", text);
        return;
    }
    if (rate == 0) {
        b->stream_div = 0;
        rb_ln_kv_u32(c->reply, "rate_hz", 0);
        return;
    }
    /* the nearest loop rate / n (§6.1); below loop rate / (2^32 - 1) the slowest */
    ratio = loop_hz / rate;
    if (!(ratio < STREAM_DIV_MAX))
        ratio = STREAM_DIV_MAX;
    lo = floor(ratio) < 1 ? 1 : floor(ratio);
    hi = ceil(ratio) < 1 ? 1 : ceil(ratio);
    div = fabs(loop_hz / lo - rate) <= fabs(loop_hz / hi - rate) ? lo : hi;
    b->stream_div = (uint32_t)div;
    rb_ln_kv_num(c->reply, "rate_hz", loop_hz / div);
}

/* mode fields: required keys, optional keys */
static const char *const MODE_NAMES[] = {"off", "hold", "relay", "open", "inject"};
static const char *const MODE_REQUIRED[][4] = {
    {NULL}, {NULL}, {"loop", "amp", NULL}, {"loop", "out", "time_s", NULL},
    {"loop", "at", "amp", "time_s"}};
static const char *const MODE_OPTIONAL[][4] = {
    {NULL}, {NULL}, {"hyst", "bias", "bound", NULL}, {NULL}, {"shape", NULL}};

static int in_list(const char *const *list, int max, const char *s, size_t n)
{
    int i;
    for (i = 0; i < max && list[i] != NULL; i++)
        if (strlen(list[i]) == n && memcmp(list[i], s, n) == 0)
            return 1;
    return 0;
}

static int mode_number(rb_ctx *c, const char *key, double *out)
{
    const char *v;
    size_t n;
    if (!field(c, 3, key, &v, &n))
        return 0;
    if (!rb_parse_number(v, n, out)) {
        refuse(c, "bad_args", "%s is not a number", key);
        return -1;
    }
    return 1;
}

static void on_mode(rb_ctx *c, int kind)
{
    rb_board *b = c->b;
    rb_mode_run run;
    char buf[64];
    const char *v;
    size_t vn;
    int i, loop = -1;
    double amp = 0, hyst = 0, bias = 0, bound = 0, out = 0, time_s = 0;
    int has_bound = 0;
    memset(&run, 0, sizeof run);
    run.kind = (rb_mode_kind)kind;
    run.loop = -1;
    for (i = 3; i < c->nt; i++) {
        size_t k = key_len(c, i);
        if (!in_list(MODE_REQUIRED[kind], 4, TOKP(c, i), k) &&
            !in_list(MODE_OPTIONAL[kind], 4, TOKP(c, i), k)) {
            char key[40];
            tok_copy(key, sizeof key, TOKP(c, i), k);
            snprintf(buf, sizeof buf, "%s takes no %s", MODE_NAMES[kind], key);
            refuse(c, "bad_args", "%s", buf);
            return;
        }
    }
    for (i = 0; i < 4 && MODE_REQUIRED[kind][i] != NULL; i++) {
        if (!field(c, 3, MODE_REQUIRED[kind][i], &v, &vn)) {
            snprintf(buf, sizeof buf, "%s needs %s=", MODE_NAMES[kind], MODE_REQUIRED[kind][i]);
            refuse(c, "bad_args", "%s", buf);
            return;
        }
    }
    if (kind >= RB_MODE_RELAY) {
        char name[40];
        field(c, 3, "loop", &v, &vn);
        loop = rb_loop_index(b, v, vn);
        if (loop < 0) {
            tok_copy(name, sizeof name, v, vn);
            refuse(c, "unknown_name", "no loop %s", name);
            return;
        }
        run.loop = (int8_t)loop;
        /* numbers in the order firmware_modes.py reads them: optional keys first */
        if (kind == RB_MODE_RELAY) {
            if (mode_number(c, "hyst", &hyst) < 0 || mode_number(c, "bias", &bias) < 0)
                return;
            has_bound = mode_number(c, "bound", &bound);
            if (has_bound < 0 || mode_number(c, "amp", &amp) < 0)
                return;
        } else if (kind == RB_MODE_OPEN) {
            if (mode_number(c, "out", &out) < 0 || mode_number(c, "time_s", &time_s) < 0)
                return;
        } else {
            if (mode_number(c, "amp", &amp) < 0 || mode_number(c, "time_s", &time_s) < 0)
                return;
        }
    }
    if (kind == RB_MODE_INJECT) {
        if (field(c, 3, "shape", &v, &vn)) {
            if (vn == 4 && memcmp(v, "step", 4) == 0)
                run.shape_step = 1;
            else if (!(vn == 5 && memcmp(v, "pulse", 5) == 0)) {
                refuse(c, "bad_args", "shape must be pulse or step", NULL);
                return;
            }
        }
        field(c, 3, "at", &v, &vn);
        if (vn == 8 && memcmp(v, "setpoint", 8) == 0)
            run.at = 0;
        else if (vn == 6 && memcmp(v, "output", 6) == 0)
            run.at = 1;
        else if (vn == 4 && memcmp(v, "body", 4) == 0)
            run.at = 2;
        else {
            refuse(c, "bad_args", "at must be setpoint, output or body", NULL);
            return;
        }
    }
    if (kind == RB_MODE_RELAY) {
        if (amp <= 0) {
            refuse(c, "range", "amp > 0", NULL);
            return;
        }
        if (hyst < 0) {
            refuse(c, "range", "hyst >= 0", NULL);
            return;
        }
        if (has_bound && bound <= 0) {
            refuse(c, "range", "bound > 0", NULL);
            return;
        }
        run.amp = (rb_real)amp;
        run.hyst = (rb_real)hyst;
        run.bias = (rb_real)bias;
        run.bound = (rb_real)bound;
        run.has_bound = (uint8_t)has_bound;
    } else if (kind == RB_MODE_OPEN) {
        double limit = (double)RB_PAR(b, b->lx[loop].limit);
        if (fabs(out) > limit) {
            char lo[24], hi[24];
            rb_format_number(lo, sizeof lo, -limit, 6);
            rb_format_number(hi, sizeof hi, limit, 6);
            snprintf(buf, sizeof buf, "out %s..%s", lo, hi);
            refuse(c, "range", "%s", buf);
            return;
        }
        if (!(0 < time_s && time_s <= OPEN_MAX_S)) {
            refuse(c, "range", "time_s 0..10", NULL);
            return;
        }
        run.out = (rb_real)out;
        run.time_s = (rb_real)time_s;
    } else if (kind == RB_MODE_INJECT) {
        if (!(0 < time_s && time_s <= INJECT_MAX_S)) {
            refuse(c, "range", "time_s 0..60", NULL);
            return;
        }
        if (run.at == 2 && b->port.body_push == NULL) {
            refuse(c, "unknown_name", "at=body: this rig has no body push", NULL);
            return;
        }
        run.amp = (rb_real)amp;
        run.time_s = (rb_real)time_s;
    }
    /* the motor state (§7.3) */
    {
        rb_motor m = b->motor;
        int stop = kind == RB_MODE_OFF;
        int allowed = stop || m == RB_MOTOR_ARMED || m == RB_MOTOR_RUNNING;
        if (!allowed) {
            snprintf(buf, sizeof buf, "motor %s", rb_motor_word(b));
            refuse(c, "not_armed", "%s", buf);
            return;
        }
        if (kind == RB_MODE_INJECT && b->mode.kind != RB_MODE_HOLD) {
            refuse(c, "state", "inject starts from hold", NULL);
            return;
        }
        if (stop) {
            rb_happen(b, RB_H_STOP);
            if (b->mode.kind != RB_MODE_OFF)
                rb_set_mode(b, &run);
        } else {
            rb_happen(b, RB_H_RUN);
            rb_set_mode(b, &run);
        }
    }
    rb_ln_kv(c->reply, "mode", MODE_NAMES[kind]);
    if (kind >= RB_MODE_RELAY)
        rb_ln_kv(c->reply, "loop", b->rig->loops[loop].name);
    if (kind == RB_MODE_RELAY) {
        rb_ln_kv_num(c->reply, "amp", amp);
        rb_ln_kv_num(c->reply, "hyst", hyst);
        rb_ln_kv_num(c->reply, "bias", bias);
        if (has_bound)
            rb_ln_kv_num(c->reply, "bound", bound);
    } else if (kind == RB_MODE_OPEN) {
        rb_ln_kv_num(c->reply, "out", out);
        rb_ln_kv_num(c->reply, "time_s", time_s);
    } else if (kind == RB_MODE_INJECT) {
        rb_ln_kv(c->reply, "shape", run.shape_step ? "step" : "pulse");
        rb_ln_kv(c->reply, "at", run.at == 0 ? "setpoint" : (run.at == 1 ? "output" : "body"));
        rb_ln_kv_num(c->reply, "amp", amp);
        rb_ln_kv_num(c->reply, "time_s", time_s);
    }
}

static void on_simple(rb_ctx *c, const char *verb)
{
    rb_board *b = c->b;
    char why[96];      /* "fault,heartbeat,<arm_ signals>,gains" */
    if (strcmp(verb, "save") == 0) {
        uint16_t crc = 0;
        char hex[5];
        int n = rb_nv_save_image(b, &crc);
        if (n < 0) {
            refuse(c, "storage", "write failed", NULL);
            return;
        }
        snprintf(hex, sizeof hex, "%04X", (unsigned)crc);
        rb_ln_kv_u32(c->reply, "count", (uint32_t)n);
        rb_ln_kv(c->reply, "crc", hex);
    } else if (strcmp(verb, "restore") == 0) {
        int n;
        if (b->motor == RB_MOTOR_RUNNING) {
            refuse(c, "state", "motor running", NULL);
            return;
        }
        n = rb_nv_load_image(b, 1);
        rb_ln_kv_u32(c->reply, "count", n < 0 ? 0u : (uint32_t)n);
    } else if (strcmp(verb, "arm") == 0) {
        if (b->motor == RB_MOTOR_RUNNING) {
            refuse(c, "state", "motor running", NULL);
            return;
        }
        if (rb_interlock(b, why, sizeof why) > 0) {
            refuse(c, "interlock", "%s", why);
            return;
        }
        rb_happen(b, RB_H_ARM);
        rb_ln_kv(c->reply, "motor", rb_motor_word(b));
    } else if (strcmp(verb, "disarm") == 0) {
        rb_happen(b, RB_H_DISARM);
        rb_ln_kv(c->reply, "motor", rb_motor_word(b));
    } else if (strcmp(verb, "clear") == 0) {
        int was_tripped = b->motor == RB_MOTOR_TRIPPED;
        rb_happen(b, RB_H_CLEAR);                  /* §7.3: never starts the motor */
        if (was_tripped) {
            b->fault = NULL;
            rb_ev_start(b, &b->out_event, "clear");
            rb_event(b, &b->out_event);
        }
        rb_ln_kv(c->reply, "motor", rb_motor_word(b));
    } else if (strcmp(verb, "kill") == 0) {
        rb_trip_cause(b, "kill", 0, 0.0);
        rb_ln_kv(c->reply, "motor", rb_motor_word(b));
    } else {                                        /* status */
        rb_status_fields(b, c->reply);
    }
}

/* ------------------------------------------------------------------ dispatch */

static const char *const NO_ARGS[] = {"save", "restore", "arm", "disarm", "clear", "kill",
                                      "status", NULL};
static const char *const VERBS[] = {"hello", "param", "signal", "loop", "get", "set", "mode",
                                    "stream", "stage", NULL};
static const char *const BOARD_VERBS[] = {"ok", "err", "tm", "st", "ev", NULL};

static int all_digits_seq(rb_ctx *c, uint16_t *seq)
{
    /* firmware.py _answer_bad: tokens[1] all digits with a value below 65536 */
    size_t i;
    uint32_t v = 0;
    if (c->nt < 2 || TOKN(c, 1) == 0)
        return 0;
    for (i = 0; i < TOKN(c, 1); i++) {
        char ch = TOKP(c, 1)[i];
        if (ch < '0' || ch > '9')
            return 0;
        if (v < 65536u)
            v = v * 10u + (uint32_t)(ch - '0');
    }
    if (v >= 65536u)
        return 0;
    *seq = (uint16_t)v;
    return 1;
}

static void send_err(rb_board *b, uint16_t seq, const char *code, const char *text,
                     rb_line *out)
{
    rb_ln_start(out, "err");
    rb_ln_u32(out, seq);
    rb_ln_word(out, code);
    if (text != NULL && text[0] != '\0')
        rb_ln_word(out, text);
    (void)b;
}

static void bad(rb_ctx *c, const char *code, int reply, const char *text)
{
    /* a body that passed the CRC but is not a legal command: counted; answered when its
     * sequence number could be read (§3) */
    uint16_t seq;
    c->b->rx_err++;
    c->b->last_rx_error = code;
    if (reply && all_digits_seq(c, &seq)) {
        rb_line *l = &c->b->out_reply;
        refuse(c, reply == 2 ? "unknown_verb" : "bad_args", "%s", text);
        send_err(c->b, seq, c->err, c->text, l);
        rb_tx_put(c->b, l, RB_TX_REPLY);
    }
}

void rb_command(rb_board *b, const char *body, size_t n)
{
    rb_tok toks[RB_MAX_TOKENS];
    double rate = 0;
    rb_ctx c;
    uint32_t seq, index = 0;
    int i, kind = 0;
    char verb[12];
    c.reply = &b->out_reply;
    c.reply->n = 0;
    c.reply->overflow = 0;
    c.b = b;
    c.body = body;
    c.t = toks;
    c.err = NULL;
    c.text[0] = '\0';
    c.nt = rb_split(body, n, toks, RB_MAX_TOKENS);
    if (c.nt <= 0)
        return;                                  /* cannot happen for a body <= 193 bytes */
    if (rb_token_is(body, &toks[0], "hb")) {
        if (c.nt != 1) {
            bad(&c, "bad_field", 0, "");
            return;
        }
        b->hb_us = b->port.micros(b->port.ctx);  /* §7.2 */
        b->hb_seen = 1;
        return;
    }
    if (!in_list(VERBS, 9, body, toks[0].n) && !in_list(NO_ARGS, 7, body, toks[0].n)) {
        char v[20];
        if (in_list(BOARD_VERBS, 5, body, toks[0].n)) {
            bad(&c, "wrong_direction", 0, "");
            return;
        }
        tok_copy(v, sizeof v, body, toks[0].n < 16 ? toks[0].n : 16);
        snprintf(c.text, sizeof c.text, "unknown verb %s", v);
        {
            char text[96];
            memcpy(text, c.text, sizeof text);
            bad(&c, "unknown_verb", 2, text);
        }
        return;
    }
    tok_copy(verb, sizeof verb, body, toks[0].n);
    if (c.nt < 2) {
        bad(&c, "bad_field", 0, "");
        return;
    }
    if (!rb_parse_uint(TOKP(&c, 1), TOKN(&c, 1), 65536u, &seq)) {
        char text[96], tok[48];
        tok_copy(tok, sizeof tok, TOKP(&c, 1), TOKN(&c, 1));
        snprintf(text, sizeof text, "sequence number %s is not an integer below 65536", tok);
        bad(&c, "bad_number", 1, text);
        return;
    }
    c.seq = (uint16_t)seq;
    /* the grammar of each verb (messages.py COMMANDS) */
    if (in_list(NO_ARGS, 7, verb, strlen(verb))) {
        if (c.nt != 2) {
            bad(&c, "bad_field", 1, "takes no arguments");
            return;
        }
    } else if (strcmp(verb, "hello") == 0) {
        const char *v = c.nt == 3 ? TOKP(&c, 2) : "";
        size_t vn = c.nt == 3 ? TOKN(&c, 2) : 0, dot = 0, k;
        int ok = c.nt == 3;
        for (k = 0; ok && k < vn; k++) {
            if (v[k] == '.') {
                if (dot)
                    ok = 0;
                dot = k;
            } else if (v[k] < '0' || v[k] > '9') {
                ok = 0;
            }
        }
        if (!ok || dot == 0 || dot > 3 || vn - dot - 1 < 1 || vn - dot - 1 > 3) {
            bad(&c, "bad_field", 1, "hello takes a version major.minor");
            return;
        }
    } else if (verb[0] == 'p' || verb[0] == 'l' || strcmp(verb, "signal") == 0) {
        if (c.nt != 3) {
            bad(&c, "bad_field", 1, "takes one index");
            return;
        }
        if (!rb_parse_uint(TOKP(&c, 2), TOKN(&c, 2), 256u, &index)) {
            char text[96], tok[48];
            tok_copy(tok, sizeof tok, TOKP(&c, 2), TOKN(&c, 2));
            snprintf(text, sizeof text, "index %s is not an integer below 256", tok);
            bad(&c, "bad_number", 1, text);
            return;
        }
    } else if (strcmp(verb, "get") == 0) {
        int ok = c.nt >= 3;
        for (i = 2; ok && i < c.nt; i++)
            ok = rb_is_name(TOKP(&c, i), TOKN(&c, i));
        if (!ok) {
            bad(&c, "bad_field", 1, "get takes one or more names");
            return;
        }
    } else if (strcmp(verb, "set") == 0 || strcmp(verb, "stage") == 0) {
        if (c.nt < 3 || !fields_ok(&c, 2)) {
            bad(&c, "bad_field", 1, "set takes name=value pairs");
            return;
        }
        for (i = 2; i < c.nt; i++) {
            size_t k = key_len(&c, i);
            double v;
            if (!rb_parse_number(TOKP(&c, i) + k + 1, TOKN(&c, i) - k - 1, &v)) {
                char text[112], key[40], tok[56];
                tok_copy(key, sizeof key, TOKP(&c, i), k);
                tok_copy(tok, sizeof tok, TOKP(&c, i) + k + 1, TOKN(&c, i) - k - 1);
                snprintf(text, sizeof text, "%s %s is not a number", key, tok);
                bad(&c, "bad_number", 1, text);
                return;
            }
        }
    } else if (strcmp(verb, "mode") == 0) {
        kind = -1;
        for (i = 0; c.nt >= 3 && i < 5; i++)
            if (rb_token_is(body, &toks[2], MODE_NAMES[i]))
                kind = i;
        if (kind < 0 || !fields_ok(&c, 3)) {
            bad(&c, "bad_field", 1, kind < 0 ? "mode must be one of off, hold, relay, open, inject"
                                             : "mode fields are name=value");
            return;
        }
    } else {                                     /* stream */
        const char *v;
        size_t vn;
        if (c.nt != 3 || !fields_ok(&c, 2) || !field(&c, 2, "rate_hz", &v, &vn)) {
            bad(&c, "bad_field", 1, "stream takes rate_hz=<number>");
            return;
        }
        if (!rb_parse_number(v, vn, &rate)) {
            char text[96], tok[56];
            tok_copy(tok, sizeof tok, v, vn);
            snprintf(text, sizeof text, "rate_hz %s is not a number", tok);
            bad(&c, "bad_number", 1, text);
            return;
        }
    }
    /* §4.2: the same sequence number and the same body as the last command answered */
    if (b->has_last && b->last_seq == c.seq && strlen(b->last_body) == n &&
        memcmp(b->last_body, body, n) == 0) {
        /* the stored reply is already a frame: queue it as it is */
        if (b->last_line_len > 0 && b->tx_used + b->last_line_len <= RB_TX_SIZE) {
            size_t at = (b->tx_head + b->tx_used) % RB_TX_SIZE, k;
            for (k = 0; k < b->last_line_len; k++) {
                b->tx[at] = b->last_line[k];
                at = at + 1 == RB_TX_SIZE ? 0 : at + 1;
            }
            b->tx_used += b->last_line_len;
        }
        return;
    }
    if (strcmp(verb, "set") != 0 && strcmp(verb, "stage") != 0)
        b->n_staged = 0;                         /* §5.5: any other command drops a group */
    rb_ln_start(c.reply, "ok");
    rb_ln_u32(c.reply, c.seq);
    if (strcmp(verb, "hello") == 0)
        on_hello(&c);
    else if (strcmp(verb, "param") == 0)
        on_describe(&c, index, 'p');
    else if (strcmp(verb, "signal") == 0)
        on_describe(&c, index, 's');
    else if (strcmp(verb, "loop") == 0)
        on_describe(&c, index, 'l');
    else if (strcmp(verb, "get") == 0)
        on_get(&c);
    else if (strcmp(verb, "set") == 0)
        on_set(&c);
    else if (strcmp(verb, "stage") == 0)
        on_stage(&c);
    else if (strcmp(verb, "mode") == 0)
        on_mode(&c, kind);
    else if (strcmp(verb, "stream") == 0)
        on_stream(&c, rate);
    else
        on_simple(&c, verb);
    if (c.err == NULL && c.reply->overflow)
        refuse(&c, "bad_args", "reply would not fit in one line; ask for fewer", NULL);
    if (c.err != NULL)
        send_err(b, c.seq, c.err, c.text, c.reply);
    memcpy(b->last_body, body, n);
    b->last_body[n] = '\0';
    b->last_seq = c.seq;
    b->has_last = 1;
    b->last_line_len = (uint16_t)rb_frame((char *)b->last_line, sizeof b->last_line,
                                          c.reply->s, c.reply->n);
    rb_tx_put(b, c.reply, RB_TX_REPLY);
}
