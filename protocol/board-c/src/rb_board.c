/*
 * rb_board.c -- the board: declaration check, boot, the loop period, the motor-off
 * interlock and its state table (PROTOCOL.md §7.3), trips, modes and stored parameters.
 * Follows bench/rigbench/rig/firmware/board.py step for step so both boards answer alike.
 */
#include "rb_internal.h"

#include <math.h>
#include <string.h>

#define STATUS_HZ 5.0

/* ------------------------------------------------------------------ names */

static int find(const char *s, size_t n, const char *name)
{
    return strlen(name) == n && memcmp(s, name, n) == 0;
}

int rb_param_index(const rb_board *b, const char *s, size_t n)
{
    int i;
    for (i = 0; i < b->rig->n_params; i++)
        if (find(s, n, b->rig->params[i].name))
            return i;
    return -1;
}

int rb_signal_index(const rb_board *b, const char *s, size_t n)
{
    int i;
    for (i = 0; i < b->rig->n_signals; i++)
        if (find(s, n, b->rig->signals[i].name))
            return i;
    return -1;
}

int rb_loop_index(const rb_board *b, const char *s, size_t n)
{
    int i;
    for (i = 0; i < b->rig->n_loops; i++)
        if (find(s, n, b->rig->loops[i].name))
            return i;
    return -1;
}

static int named(const rb_board *b, const char *name, int params)
{
    if (name == NULL)
        return -1;
    return params ? rb_param_index(b, name, strlen(name)) : rb_signal_index(b, name, strlen(name));
}

const char *rb_mode_name(rb_mode_kind k)
{
    static const char *const names[] = {"off", "hold", "relay", "open", "inject"};
    return names[k];
}

/* ------------------------------------------------------------------ declaration */

static rb_decl_error decl(rb_board *b, rb_decl_error e, const char *what)
{
    b->fault = what;            /* kept for rb_decl_text; the board stays unusable */
    return e;
}

static int word_ok(const char *s) { return s != NULL && rb_is_word(s, strlen(s)); }
static int name_ok(const char *s) { return s != NULL && rb_is_name(s, strlen(s)); }

static rb_decl_error check_rig(rb_board *b)
{
    const rb_rig *r = b->rig;
    int i, j;
    size_t nv;
    if (!word_ok(r->board) || !word_ok(r->fw) || !word_ok(r->rig))
        return decl(b, RB_DECL_NAME, "board, fw and rig must be words");
    if (!(r->rate_hz > 0) || !isfinite((double)r->rate_hz) || r->watchdog_ms == 0)
        return decl(b, RB_DECL_RATE, "rate_hz and watchdog_ms must be > 0");
    if (r->n_loops > RB_MAX_LOOPS)
        return decl(b, RB_DECL_TOO_MANY, "more loops than RB_MAX_LOOPS");
    if (b->port.write == NULL || b->port.micros == NULL || b->port.read_sensors == NULL ||
        b->port.set_output == NULL)
        return decl(b, RB_DECL_PORT, "port needs write, micros, read_sensors, set_output");
    for (i = 0; i < r->n_params; i++) {
        const rb_param *p = &r->params[i];
        if (!name_ok(p->name) || p->value == NULL)
            return decl(b, RB_DECL_NAME, "a parameter name is not a protocol name");
        if (!word_ok(p->unit))
            return decl(b, RB_DECL_UNIT, "a parameter unit is not a protocol word");
        if (!(p->min <= p->max) || !(p->min <= *p->value && *p->value <= p->max))
            return decl(b, RB_DECL_RANGE, "a parameter default is outside its range");
        for (j = 0; j < i; j++)
            if (strcmp(r->params[j].name, p->name) == 0)
                return decl(b, RB_DECL_DUPLICATE, "a parameter name repeats");
    }
    for (i = 0; i < r->n_signals; i++) {
        const rb_signal *s = &r->signals[i];
        if (!name_ok(s->name) || s->value == NULL)
            return decl(b, RB_DECL_NAME, "a signal name is not a protocol name");
        if (!word_ok(s->unit))
            return decl(b, RB_DECL_UNIT, "a signal unit is not a protocol word");
        for (j = 0; j < i; j++)
            if (strcmp(r->signals[j].name, s->name) == 0)
                return decl(b, RB_DECL_DUPLICATE, "a signal name repeats");
    }
    for (i = 0; i < r->n_loops; i++) {
        const rb_loop *d = &r->loops[i];
        rb_loop_ix *x = &b->lx[i];
        int m = named(b, d->measure, 0), o = named(b, d->output, 0);
        int kp = named(b, d->kp, 1), ki = named(b, d->ki, 1), kd = named(b, d->kd, 1);
        int lim = named(b, d->limit, 1), df = named(b, d->dfilt, 1);
        if (!name_ok(d->name))
            return decl(b, RB_DECL_NAME, "a loop name is not a protocol name");
        for (j = 0; j < i; j++)
            if (strcmp(r->loops[j].name, d->name) == 0)
                return decl(b, RB_DECL_DUPLICATE, "a loop name repeats");
        if (m < 0 || o < 0 || kp < 0 || ki < 0 || kd < 0 || lim < 0 || df < 0)
            return decl(b, RB_DECL_LOOP_REF, "a loop names an undeclared signal or parameter");
        x->measure = (uint8_t)m;
        x->output = (uint8_t)o;
        x->kp = (uint8_t)kp;
        x->ki = (uint8_t)ki;
        x->kd = (uint8_t)kd;
        x->limit = (uint8_t)lim;
        x->dfilt = (uint8_t)df;
        x->setpoint_param = (int8_t)named(b, d->setpoint, 1);
        x->setpoint_sig = (int8_t)named(b, d->setpoint, 0);
        if (x->setpoint_param < 0 && x->setpoint_sig < 0)
            return decl(b, RB_DECL_LOOP_REF, "a loop set-point is neither parameter nor signal");
        x->setpoint_show = (int8_t)named(b, d->setpoint_signal, 0);
        if (d->setpoint_signal != NULL && x->setpoint_show < 0)
            return decl(b, RB_DECL_LOOP_REF, "a loop set-point signal is not declared");
        x->rate = (int8_t)named(b, d->rate, 0);
        if (d->rate != NULL && x->rate < 0)
            return decl(b, RB_DECL_LOOP_REF, "a loop rate signal is not declared");
    }
    b->command_sig = (int8_t)named(b, r->command, 0);
    if (b->command_sig < 0)
        return decl(b, RB_DECL_LOOP_REF, "the command signal is not declared");
    b->relay_sig = (int8_t)rb_signal_index(b, "relay", 5);
    for (i = 0, nv = 8; i < r->n_params; i++)
        if (r->params[i].writable)
            nv += sizeof(rb_real);
    if (nv > RB_NV_MAX)
        return decl(b, RB_DECL_NV_SIZE, "stored image larger than RB_NV_MAX");
    return RB_DECL_OK;
}

/* ------------------------------------------------------------------ stored parameters */
/* Image: 'R' 'B' 1 count, CRC-16 of the writable names (a changed table is not loaded),
 * the values as rb_real in declaration order, CRC-16 of everything before. */

static uint16_t names_crc(const rb_board *b)
{
    uint16_t crc = 0xFFFF;
    int i;
    for (i = 0; i < b->rig->n_params; i++)
        if (b->rig->params[i].writable)
            crc = rb_crc16_update(crc, (const uint8_t *)b->rig->params[i].name,
                                  strlen(b->rig->params[i].name) + 1);
    return crc;
}

int rb_nv_save_image(rb_board *b, uint16_t *crc_out)
{
    /* the reply's crc is that of the text image "name=value ..." (§5.5) */
    uint8_t *p = b->nv;
    uint16_t ncrc = names_crc(b), text_crc = 0xFFFF, crc;
    int i, count = 0;
    size_t n;
    p[0] = 'R';
    p[1] = 'B';
    p[2] = 1;
    p[4] = (uint8_t)(ncrc >> 8);
    p[5] = (uint8_t)ncrc;
    n = 6;
    for (i = 0; i < b->rig->n_params; i++) {
        const rb_param *d = &b->rig->params[i];
        char num[40];
        size_t k;
        rb_real v;
        if (!d->writable)
            continue;
        v = (rb_real)rb_board_round((double)*d->value);
        memcpy(p + n, &v, sizeof v);
        n += sizeof v;
        if (count > 0)
            text_crc = rb_crc16_update(text_crc, (const uint8_t *)" ", 1);
        text_crc = rb_crc16_update(text_crc, (const uint8_t *)d->name, strlen(d->name));
        text_crc = rb_crc16_update(text_crc, (const uint8_t *)"=", 1);
        k = rb_format_number(num, sizeof num, (double)v, 7);
        text_crc = rb_crc16_update(text_crc, (const uint8_t *)num, k);
        count++;
    }
    p[3] = (uint8_t)count;
    crc = rb_crc16(p, n);
    p[n++] = (uint8_t)(crc >> 8);
    p[n++] = (uint8_t)crc;
    if (b->port.nv_save == NULL || b->port.nv_save(b->port.ctx, p, n) != 0)
        return -1;
    *crc_out = text_crc;
    return count;
}

int rb_nv_load_image(rb_board *b, int apply)
{
    /* returns the number of values in a valid stored image (applied when `apply`), -1 when
     * there is none or it is not valid for this declaration (then nothing changes) */
    uint8_t *p = b->nv;
    size_t n, at = 6;
    int i, count = 0;
    if (b->port.nv_load == NULL)
        return -1;
    n = b->port.nv_load(b->port.ctx, p, RB_NV_MAX);
    if (n < 8 || n > RB_NV_MAX || p[0] != 'R' || p[1] != 'B' || p[2] != 1)
        return -1;
    if (rb_crc16(p, n - 2) != (uint16_t)((p[n - 2] << 8) | p[n - 1]))
        return -1;
    if ((uint16_t)((p[4] << 8) | p[5]) != names_crc(b))
        return -1;
    for (i = 0; i < b->rig->n_params; i++)
        count += b->rig->params[i].writable ? 1 : 0;
    if (p[3] != count || n != 8 + (size_t)count * sizeof(rb_real))
        return -1;
    for (i = 0; i < b->rig->n_params; i++) {   /* every value in range, or none is used */
        const rb_param *d = &b->rig->params[i];
        rb_real v;
        if (!d->writable)
            continue;
        memcpy(&v, p + at, sizeof v);
        at += sizeof v;
        if (!(d->min <= v && v <= d->max))
            return -1;
    }
    if (apply) {
        at = 6;
        for (i = 0; i < b->rig->n_params; i++) {
            if (!b->rig->params[i].writable)
                continue;
            memcpy(b->rig->params[i].value, p + at, sizeof(rb_real));
            at += sizeof(rb_real);
        }
    }
    return count;
}

/* ------------------------------------------------------------------ boot */

rb_decl_error rb_init(rb_board *b, const rb_rig *rig, const rb_port *port,
                      rb_boot_reason reason)
{
    rb_decl_error err;
    rb_line *l = &b->out_event;
    int i;
    memset(b, 0, sizeof *b);
    b->rig = rig;
    b->port = *port;
    b->fault = NULL;
    b->last_rx_error = NULL;
    err = check_rig(b);
    if (err != RB_DECL_OK) {
        b->rig = NULL;
        return err;
    }
    b->fault = NULL;
    b->dt_s = (rb_real)1 / rig->rate_hz;
    b->status_every = (uint32_t)floor((double)rig->rate_hz / STATUS_HZ + 0.5);
    if (b->status_every == 0)
        b->status_every = 1;
    for (i = 0; i < rig->n_params; i++)        /* boot values as the board reports them */
        *rig->params[i].value = (rb_real)rb_board_round((double)*rig->params[i].value);
    rb_nv_load_image(b, 1);
    b->motor = RB_MOTOR_OFF;
    b->mode.kind = RB_MODE_OFF;
    b->mode.loop = -1;
    for (i = 0; i < rig->n_signals; i++)
        *rig->signals[i].value = 0;
    rb_ctl_reset(b);
    rb_rx_reset(b);
    b->boot_us = b->port.micros(b->port.ctx);
    b->port.set_output(b->port.ctx, 0, 0);
    rb_ev_start(b, l, "boot");
    rb_ln_kv(l, "reason", reason == RB_BOOT_POWER ? "power" : "reset");
    rb_event(b, l);
    rb_tx_flush(b);
    return RB_DECL_OK;
}

const char *rb_decl_text(const rb_board *b)
{
    return b->rig == NULL && b->fault != NULL ? b->fault : "ok";
}

/* ------------------------------------------------------------------ motor state (§7.3) */

static const char *const MOTOR_WORDS[] = {"off", "armed", "running", "tripped"};

static int transition(rb_motor s, rb_happening h, rb_motor *next)
{
    /* bench/rigbench/wire/states.py TRANSITIONS; returns 0 when refused */
    switch (h) {
    case RB_H_ARM:
        if (s == RB_MOTOR_OFF || s == RB_MOTOR_ARMED) { *next = RB_MOTOR_ARMED; return 1; }
        return 0;
    case RB_H_RUN:
        if (s == RB_MOTOR_ARMED || s == RB_MOTOR_RUNNING) { *next = RB_MOTOR_RUNNING; return 1; }
        return 0;
    case RB_H_STOP:
        *next = s == RB_MOTOR_RUNNING ? RB_MOTOR_ARMED : s;
        return 1;
    case RB_H_DISARM:
        *next = s == RB_MOTOR_TRIPPED ? RB_MOTOR_TRIPPED : RB_MOTOR_OFF;
        return 1;
    case RB_H_TRIP:
        *next = RB_MOTOR_TRIPPED;
        return 1;
    case RB_H_CLEAR:
    default:
        *next = s == RB_MOTOR_TRIPPED ? RB_MOTOR_OFF : s;
        return 1;
    }
}

const char *rb_happen(rb_board *b, rb_happening h)
{
    rb_motor was = b->motor, next;
    if (!transition(was, h, &next)) {
        if (h == RB_H_RUN)
            return "not_armed";
        if (h == RB_H_ARM)
            return was == RB_MOTOR_TRIPPED ? "interlock" : "state";
        return "state";
    }
    b->motor = next;
    if (next != RB_MOTOR_RUNNING && b->mode.kind != RB_MODE_OFF) {
        rb_mode_run off;
        memset(&off, 0, sizeof off);
        off.kind = RB_MODE_OFF;
        off.loop = -1;
        rb_set_mode(b, &off);
    }
    if (was != RB_MOTOR_RUNNING && next == RB_MOTOR_RUNNING)
        rb_ctl_reset(b);
    if (next != RB_MOTOR_RUNNING) {
        b->pending_cmd = 0;
        b->port.set_output(b->port.ctx, 0, 0);
    }
    return NULL;
}

static int overrides_output(const rb_board *b, const rb_mode_run *m)
{
    return m->kind == RB_MODE_OPEN ||
           (m->kind == RB_MODE_RELAY && b->rig->loops[m->loop].relay == RB_RELAY_OUTPUT);
}

void rb_set_mode(rb_board *b, const rb_mode_run *run)
{
    rb_mode_run next = *run;
    rb_line *l = &b->out_event;
    if (overrides_output(b, &b->mode) &&
        !(next.loop == b->mode.loop && (next.kind == RB_MODE_OPEN || next.kind == RB_MODE_RELAY)))
        rb_ctl_leave_override(b, b->mode.loop);
    if (next.kind == RB_MODE_RELAY) {
        int i = next.loop;
        rb_real sp = rb_ctl_setpoint(b, i);
        rb_ctl_start_relay(b, i, rb_ctl_error(b, i, sp, RB_SIG(b, b->lx[i].measure)));
    }
    next.periods = 0;
    next.end_periods = 0;
    if (next.kind == RB_MODE_OPEN || next.kind == RB_MODE_INJECT) {
        /* a timed mode ends after ceil(time_s * rate - 1e-9 * rate) periods (firmware.py:
         * time_s >= end_s - 1e-9) */
        double t = (double)next.time_s, n;
        if (sizeof(rb_real) < sizeof(double))
            t = rb_board_round(t);   /* a float's 0.2 is 0.200000003: 7 digits, as sent */
        n = ceil((t - 1e-9) * (double)b->rig->rate_hz);
        next.end_periods = n < 1 ? 1 : (uint32_t)n;
    }
    if (next.kind == RB_MODE_INJECT && next.at == 2 && b->port.body_push != NULL)
        b->port.body_push(b->port.ctx, next.amp, next.time_s);
    b->mode = next;
    rb_ev_start(b, l, "mode");
    rb_ln_kv(l, "mode", rb_mode_name(next.kind));
    rb_ln_kv(l, "loop", next.loop >= 0 ? b->rig->loops[next.loop].name : "-");
    rb_event(b, l);
}

void rb_trip_cause(rb_board *b, const char *cause, int has_value, double value)
{
    if (b->motor != RB_MOTOR_TRIPPED) {            /* the first cause stays latched */
        rb_line *l = &b->out_event;
        size_t n = strlen(cause);
        if (n >= sizeof b->fault_buf)
            n = sizeof b->fault_buf - 1;
        memcpy(b->fault_buf, cause, n);
        b->fault_buf[n] = '\0';
        b->fault = b->fault_buf;
        rb_ev_start(b, l, "trip");
        rb_ln_kv(l, "cause", b->fault);
        if (has_value)
            rb_ln_kv_num(l, "value", value);
        rb_event(b, l);
    }
    rb_happen(b, RB_H_TRIP);
    b->pending_cmd = 0;
    b->port.set_output(b->port.ctx, 0, 0);
    if (b->has_last) {
        /* §4.2: a resend of a command answered before the trip must not report the state
         * from before it; the reply becomes `err <seq> state` */
        rb_line *l = &b->out_event;
        rb_ln_start(l, "err");
        rb_ln_u32(l, b->last_seq);
        rb_ln_word(l, "state tripped since this command; ask status");
        b->last_line_len = (uint16_t)rb_frame((char *)b->last_line, sizeof b->last_line,
                                              l->s, l->n);
    }
}

void rb_trip(rb_board *b, const char *cause)
{
    if (b->rig == NULL)
        return;
    rb_trip_cause(b, rb_is_name(cause, strlen(cause)) ? cause : "external", 0, 0.0);
    rb_tx_flush(b);
}

/* ------------------------------------------------------------------ interlock, status */

static uint32_t since_hb_us(const rb_board *b)
{
    uint32_t now = b->port.micros(b->port.ctx);
    return now - (b->hb_seen ? b->hb_us : b->boot_us);
}

static int heartbeat_ok(const rb_board *b)
{
    return b->hb_seen && since_hb_us(b) <= b->rig->watchdog_ms * 1000u;
}

int rb_gain_busy(const rb_board *b, int param)
{
    const rb_loop_ix *x;
    if (b->mode.kind != RB_MODE_RELAY && b->mode.kind != RB_MODE_OPEN &&
        b->mode.kind != RB_MODE_INJECT)
        return 0;
    x = &b->lx[b->mode.loop];
    return param == x->kp || param == x->ki || param == x->kd;
}

static void add_reason(char *out, size_t cap, size_t *n, const char *s, size_t len)
{
    if (*n + len + 2 > cap)
        return;
    if (*n > 0)
        out[(*n)++] = ',';
    memcpy(out + *n, s, len);
    *n += len;
    out[*n] = '\0';
}

size_t rb_interlock(const rb_board *b, char *out, size_t cap)
{
    /* §7.3 in report order: fault, heartbeat, then |<signal>| <= arm_<signal> for every
     * arm_ parameter in declaration order, then gains */
    size_t n = 0;
    int i, gains_ok = 1;
    out[0] = '\0';
    if (b->fault != NULL)
        add_reason(out, cap, &n, "fault", 5);
    if (!heartbeat_ok(b))
        add_reason(out, cap, &n, "heartbeat", 9);
    for (i = 0; i < b->rig->n_params; i++) {
        const char *name = b->rig->params[i].name;
        int s;
        if (strncmp(name, "arm_", 4) != 0)
            continue;
        s = rb_signal_index(b, name + 4, strlen(name + 4));
        if (s >= 0 && fabs((double)RB_SIG(b, s)) > (double)RB_PAR(b, i))
            add_reason(out, cap, &n, name + 4, strlen(name + 4));
    }
    for (i = 0; i < b->rig->n_loops; i++) {
        const rb_loop_ix *x = &b->lx[i];
        uint8_t g[3];
        int k;
        g[0] = x->kp;
        g[1] = x->ki;
        g[2] = x->kd;
        for (k = 0; k < 3; k++) {
            const rb_param *p = &b->rig->params[g[k]];
            if (!(p->min <= *p->value && *p->value <= p->max))
                gains_ok = 0;
        }
    }
    if (!gains_ok)
        add_reason(out, cap, &n, "gains", 5);
    return n;
}

void rb_status_fields(rb_board *b, rb_line *l)
{
    char why[96];      /* "fault,heartbeat,<arm_ signals>,gains" */
    uint32_t since = since_hb_us(b);
    rb_ln_kv(l, "mode", rb_mode_name(b->mode.kind));
    rb_ln_kv(l, "loop", b->mode.loop >= 0 ? b->rig->loops[b->mode.loop].name : "-");
    rb_ln_kv(l, "motor", MOTOR_WORDS[b->motor]);
    rb_ln_kv(l, "fault", b->fault != NULL ? b->fault : "none");
    rb_ln_kv(l, "why", rb_interlock(b, why, sizeof why) ? why : "none");
    rb_ln_kv_u32(l, "drops", b->drops);
    rb_ln_kv_u32(l, "rx_err", b->rx_err);
    rb_ln_kv_u32(l, "hb_ms", (since / 500u + 1u) / 2u);    /* rounded to the nearest ms */
}

/* ------------------------------------------------------------------ the loop period */

static void safety(rb_board *b)
{
    int i;
    if (b->motor != RB_MOTOR_ARMED && b->motor != RB_MOTOR_RUNNING)
        return;
    if (!heartbeat_ok(b)) {
        rb_trip_cause(b, "watchdog", 0, 0.0);
        return;
    }
    for (i = 0; i < b->rig->n_params; i++) {   /* trip_<signal> (§5.2) */
        const char *name = b->rig->params[i].name;
        int s;
        if (strncmp(name, "trip_", 5) != 0)
            continue;
        s = rb_signal_index(b, name + 5, strlen(name + 5));
        if (s >= 0 && fabs((double)RB_SIG(b, s)) > (double)RB_PAR(b, i)) {
            char cause[40];
            size_t n = strlen(name + 5);
            if (n > 32)
                n = 32;
            memcpy(cause, name + 5, n);
            memcpy(cause + n, "_limit", 7);
            rb_trip_cause(b, cause, 1, (double)RB_SIG(b, s));
            return;
        }
    }
}

static void run_mode(rb_board *b)
{
    double bound_value = 0;
    int bound = rb_ctl_run(b, &bound_value);
    if (bound >= 0) {
        rb_trip_cause(b, "relay_bound", 1, bound_value);
        return;
    }
    b->mode.periods++;
    if (b->mode.end_periods && b->mode.periods >= b->mode.end_periods) {
        rb_line *l = &b->out_event;
        rb_mode_kind kind = b->mode.kind;
        rb_ev_start(b, l, "done");
        rb_ln_kv(l, "mode", rb_mode_name(kind));
        rb_event(b, l);
        if (kind == RB_MODE_OPEN) {
            rb_happen(b, RB_H_STOP);
        } else {
            rb_mode_run hold;
            memset(&hold, 0, sizeof hold);
            hold.kind = RB_MODE_HOLD;
            hold.loop = -1;
            rb_set_mode(b, &hold);
        }
    }
}

static void telemetry(rb_board *b)
{
    rb_line *l = &b->out_event;
    int i;
    rb_ln_start(l, "tm");
    rb_ln_u32(l, b->frame);
    rb_ln_u32(l, b->port.micros(b->port.ctx));
    for (i = 0; i < b->rig->n_signals; i++)
        rb_ln_num(l, (double)*b->rig->signals[i].value, 6);
    b->frame++;                                  /* counts dropped frames too (§6.1) */
    rb_tx_put(b, l, RB_TX_TELEMETRY);
}

void rb_step(rb_board *b)
{
    rb_real cmd;
    if (b->rig == NULL)
        return;
    if (b->kill_pending)
        rb_poll(b);                  /* the bytes before the kill, then the trip (§7.1) */
    b->periods++;
    if (since_hb_us(b) > 0x80000000u) {         /* held at 2^31 us: never wraps to fresh */
        uint32_t ref = b->port.micros(b->port.ctx) - 0x80000000u;
        if (b->hb_seen)
            b->hb_us = ref;
        else
            b->boot_us = ref;
    }
    b->port.read_sensors(b->port.ctx);
    safety(b);
    if (b->motor == RB_MOTOR_RUNNING)
        run_mode(b);
    if (b->motor != RB_MOTOR_RUNNING)
        rb_ctl_idle(b);
    cmd = b->motor == RB_MOTOR_RUNNING ? RB_SIG(b, b->command_sig) : 0;
    b->pending_cmd = cmd;
    b->port.set_output(b->port.ctx, cmd, b->motor == RB_MOTOR_RUNNING);
    if (b->kill_pending)             /* a kill byte arrived while this period ran */
        b->port.set_output(b->port.ctx, 0, 0);
    if (b->stream_div && b->periods % b->stream_div == 0)
        telemetry(b);
    if (b->periods % b->status_every == 0) {
        rb_line *l = &b->out_event;
        rb_ln_start(l, "st");
        rb_ln_u32(l, b->port.micros(b->port.ctx));
        rb_status_fields(b, l);
        rb_tx_put(b, l, RB_TX_STATUS);
    }
    rb_tx_flush(b);
}

/* ------------------------------------------------------------------ views */

rb_motor rb_motor_state(const rb_board *b) { return b->motor; }
const char *rb_motor_word(const rb_board *b) { return MOTOR_WORDS[b->motor]; }
const char *rb_fault_word(const rb_board *b)
{
    return b->rig != NULL && b->fault != NULL ? b->fault : "none";
}
uint32_t rb_rx_errors(const rb_board *b) { return b->rx_err; }
uint32_t rb_tx_drops(const rb_board *b) { return b->drops; }
const char *rb_last_rx_error(const rb_board *b)
{
    return b->last_rx_error != NULL ? b->last_rx_error : "none";
}
size_t rb_board_size(void) { return sizeof(rb_board); }
