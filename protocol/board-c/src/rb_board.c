/*
 * rb_board.c -- the board: declaration check, boot, the loop period, the motor-off
 * interlock and its state table (PROTOCOL.md §7.3), trips, modes and stored parameters.
 * Follows bench/rigbench/rig/firmware/board.py step for step so both boards answer alike.
 */
#include "rb_internal.h"

#include <string.h>

#define STATUS_HZ 5

/* ------------------------------------------------------------------ names */

void rb_param_get(const rb_board *b, int i, rb_param *out)
{
    ROM_COPY(out, &b->rig->params[i], sizeof *out);
}

void rb_loop_get(const rb_board *b, int i, rb_loop *out)
{
    ROM_COPY(out, &b->rig->loops[i], sizeof *out);
}

static const char *param_name(const rb_board *b, int i)
{
    return (const char *)ROM_PTR(&b->rig->params[i].name);
}

static const char *signal_name(const rb_board *b, int i)
{
    return (const char *)ROM_PTR(&b->rig->signals[i].name);
}

static const char *loop_name(const rb_board *b, int i)
{
    return (const char *)ROM_PTR(&b->rig->loops[i].name);
}

int rb_param_index(const rb_board *b, const char *s, size_t n)
{
    int i;
    for (i = 0; i < b->rig->n_params; i++)
        if (rb_rom_eq(param_name(b, i), s, n))
            return i;
    return -1;
}

int rb_signal_index(const rb_board *b, const char *s, size_t n)
{
    int i;
    for (i = 0; i < b->rig->n_signals; i++)
        if (rb_rom_eq(signal_name(b, i), s, n))
            return i;
    return -1;
}

int rb_loop_index(const rb_board *b, const char *s, size_t n)
{
    int i;
    for (i = 0; i < b->rig->n_loops; i++)
        if (rb_rom_eq(loop_name(b, i), s, n))
            return i;
    return -1;
}

/* index of the parameter (params) or signal named by the constant `rom`, -1 for none */
static int named(const rb_board *b, const char *rom, int params)
{
    char tmp[RB_NAME_BUF];
    size_t n;
    if (rom == NULL)
        return -1;
    n = rb_rom_copy(tmp, sizeof tmp, rom);
    if (n >= sizeof tmp)
        return -1;
    return params ? rb_param_index(b, tmp, n) : rb_signal_index(b, tmp, n);
}

const char *rb_mode_name(rb_mode_kind k)
{
    return rb_rom_word(S("off\0hold\0relay\0open\0inject\0"), (int)k);
}

/* ------------------------------------------------------------------ declaration */

static rb_decl_error decl(rb_board *b, rb_decl_error e, const char *rom_what)
{
    b->decl_error = rom_what;    /* kept for rb_decl_text; the board stays unusable */
    return e;
}

/* a constant string that is a protocol word (names: also [a-z][a-z0-9_]{0,31}) */
static int rom_ok(const char *rom, int name)
{
    char tmp[RB_NAME_BUF];
    size_t n;
    if (rom == NULL)
        return 0;
    n = rb_rom_copy(tmp, sizeof tmp, rom);
    return n < sizeof tmp && (name ? rb_is_name(tmp, n) : rb_is_word(tmp, n));
}

/* whether names i and j (i < j) of a table are the same */
static int same_name(const char *a, const char *b2)
{
    char tmp[RB_NAME_BUF];
    size_t n = rb_rom_copy(tmp, sizeof tmp, a);
    return n < sizeof tmp && rb_rom_eq(b2, tmp, n);
}

static rb_decl_error check_limits(rb_board *b)
{
    /* trip_<signal> and arm_<signal> parameters naming a declared signal, in declaration
     * order (bench/rigbench/rig/firmware/board.py _trip_params, _arm_params) */
    int i;
    b->n_limits = 0;
    for (i = 0; i < b->rig->n_params; i++) {
        char tmp[RB_NAME_BUF];
        size_t n = rb_rom_copy(tmp, sizeof tmp, param_name(b, i)), pre;
        int trip = n > 5 && memcmp(tmp, "trip_", 5) == 0, s;
        if (!trip && !(n > 4 && memcmp(tmp, "arm_", 4) == 0))
            continue;
        pre = trip ? 5 : 4;
        s = rb_signal_index(b, tmp + pre, n - pre);
        if (s < 0)
            continue;
        if (b->n_limits == RB_MAX_LIMITS)
            return decl(b, RB_DECL_LIMITS, S("more trip_ and arm_ parameters than RB_MAX_LIMITS"));
        b->limits[b->n_limits].param = (uint8_t)i;
        b->limits[b->n_limits].signal = (uint8_t)s;
        b->limits[b->n_limits].trip = (uint8_t)trip;
        b->n_limits++;
    }
    return RB_DECL_OK;
}

static rb_decl_error check_rig(rb_board *b)
{
    const rb_rig *r = b->rig;
    int i, j;
    size_t nv;
    if (!rom_ok(r->board, 0) || !rom_ok(r->fw, 0) || !rom_ok(r->rig, 0))
        return decl(b, RB_DECL_NAME, S("board, fw and rig must be words"));
    if (!(r->rate_hz > 0) || !(r->rate_hz <= (rb_real)1e9) || r->watchdog_ms == 0)
        return decl(b, RB_DECL_RATE, S("rate_hz and watchdog_ms must be > 0"));
    if (r->n_loops > RB_MAX_LOOPS)
        return decl(b, RB_DECL_TOO_MANY, S("more loops than RB_MAX_LOOPS"));
    if (b->port.write == NULL || b->port.micros == NULL || b->port.read_sensors == NULL ||
        b->port.set_output == NULL)
        return decl(b, RB_DECL_PORT, S("port needs write, micros, read_sensors, set_output"));
    for (i = 0; i < r->n_params; i++) {
        rb_param p;
        rb_param_get(b, i, &p);
        if (!rom_ok(p.name, 1) || p.value == NULL)
            return decl(b, RB_DECL_NAME, S("a parameter name is not a protocol name"));
        if (!rom_ok(p.unit, 0))
            return decl(b, RB_DECL_UNIT, S("a parameter unit is not a protocol word"));
        if (!(p.min <= p.max) || !(p.min <= *p.value && *p.value <= p.max))
            return decl(b, RB_DECL_RANGE, S("a parameter default is outside its range"));
        for (j = 0; j < i; j++)
            if (same_name(param_name(b, j), p.name))
                return decl(b, RB_DECL_DUPLICATE, S("a parameter name repeats"));
    }
    for (i = 0; i < r->n_signals; i++) {
        rb_signal s;
        ROM_COPY(&s, &r->signals[i], sizeof s);
        if (!rom_ok(s.name, 1) || s.value == NULL)
            return decl(b, RB_DECL_NAME, S("a signal name is not a protocol name"));
        if (!rom_ok(s.unit, 0))
            return decl(b, RB_DECL_UNIT, S("a signal unit is not a protocol word"));
        for (j = 0; j < i; j++)
            if (same_name(signal_name(b, j), s.name))
                return decl(b, RB_DECL_DUPLICATE, S("a signal name repeats"));
    }
    for (i = 0; i < r->n_loops; i++) {
        rb_loop d;
        rb_loop_ix *x = &b->lx[i];
        int m, o, kp, ki, kd, lim, df;
        rb_loop_get(b, i, &d);
        m = named(b, d.measure, 0);
        o = named(b, d.output, 0);
        kp = named(b, d.kp, 1);
        ki = named(b, d.ki, 1);
        kd = named(b, d.kd, 1);
        lim = named(b, d.limit, 1);
        df = named(b, d.dfilt, 1);
        if (!rom_ok(d.name, 1))
            return decl(b, RB_DECL_NAME, S("a loop name is not a protocol name"));
        for (j = 0; j < i; j++)
            if (same_name(loop_name(b, j), d.name))
                return decl(b, RB_DECL_DUPLICATE, S("a loop name repeats"));
        if (m < 0 || o < 0 || kp < 0 || ki < 0 || kd < 0 || lim < 0 || df < 0)
            return decl(b, RB_DECL_LOOP_REF, S("a loop names an undeclared signal or parameter"));
        x->measure = (uint8_t)m;
        x->output = (uint8_t)o;
        x->kp = (uint8_t)kp;
        x->ki = (uint8_t)ki;
        x->kd = (uint8_t)kd;
        x->limit = (uint8_t)lim;
        x->dfilt = (uint8_t)df;
        x->reverse = d.action == RB_ACTION_REVERSE;
        x->relay_integral = d.relay == RB_RELAY_INTEGRAL;
        x->setpoint_param = (int8_t)named(b, d.setpoint, 1);
        x->setpoint_sig = (int8_t)named(b, d.setpoint, 0);
        if (x->setpoint_param < 0 && x->setpoint_sig < 0)
            return decl(b, RB_DECL_LOOP_REF, S("a loop set-point is neither parameter nor signal"));
        x->setpoint_show = (int8_t)named(b, d.setpoint_signal, 0);
        if (d.setpoint_signal != NULL && x->setpoint_show < 0)
            return decl(b, RB_DECL_LOOP_REF, S("a loop set-point signal is not declared"));
        x->rate = (int8_t)named(b, d.rate, 0);
        if (d.rate != NULL && x->rate < 0)
            return decl(b, RB_DECL_LOOP_REF, S("a loop rate signal is not declared"));
    }
    b->command_sig = (int8_t)named(b, r->command, 0);
    if (b->command_sig < 0)
        return decl(b, RB_DECL_LOOP_REF, S("the command signal is not declared"));
    b->relay_sig = (int8_t)named(b, S("relay"), 0);
    for (i = 0, nv = 8; i < r->n_params; i++) {
        rb_param p;
        rb_param_get(b, i, &p);
        if (p.writable)
            nv += sizeof(rb_real);
    }
    if (nv > RB_NV_MAX)
        return decl(b, RB_DECL_NV_SIZE, S("stored image larger than RB_NV_MAX"));
    return check_limits(b);
}

/* ------------------------------------------------------------------ stored parameters */
/* Image: 'R' 'B' 1 count, CRC-16 of the writable names (a changed table is not loaded),
 * the values as rb_real in declaration order, CRC-16 of everything before. */

static uint16_t rom_crc(uint16_t crc, const char *rom, size_t n)
{
    size_t i;
    for (i = 0; i < n; i++) {
        uint8_t c = ROM_U8(rom + i);
        crc = rb_crc16_update(crc, &c, 1);
    }
    return crc;
}

static int writable(const rb_board *b, int i)
{
    return ROM_U8(&b->rig->params[i].writable) != 0;
}

static uint16_t names_crc(const rb_board *b)
{
    uint16_t crc = 0xFFFF;
    int i;
    for (i = 0; i < b->rig->n_params; i++)
        if (writable(b, i))
            crc = rom_crc(crc, param_name(b, i), rb_rom_len(param_name(b, i)) + 1);
    return crc;
}

int rb_nv_save_image(rb_board *b, uint16_t *crc_out)
{
    /* the reply's crc is that of the text image "name=value ..." (§5.5) */
    uint8_t *p = b->buf.nv;
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
        const char *name = param_name(b, i);
        char num[RB_NUM_TEXT];
        size_t k;
        rb_real v;
        if (!writable(b, i))
            continue;
        v = rb_round_real(RB_PAR(b, i));
        memcpy(p + n, &v, sizeof v);
        n += sizeof v;
        if (count > 0)
            text_crc = rb_crc16_update(text_crc, (const uint8_t *)" ", 1);
        text_crc = rom_crc(text_crc, name, rb_rom_len(name));
        text_crc = rb_crc16_update(text_crc, (const uint8_t *)"=", 1);
        k = rb_format_real(num, sizeof num, v, 7);
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
    uint8_t *p = b->buf.nv;
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
        count += writable(b, i);
    if (p[3] != count || n != 8 + (size_t)count * sizeof(rb_real))
        return -1;
    for (i = 0; i < b->rig->n_params; i++) {   /* every value in range, or none is used */
        rb_param d;
        rb_real v;
        if (!writable(b, i))
            continue;
        rb_param_get(b, i, &d);
        memcpy(&v, p + at, sizeof v);
        at += sizeof v;
        if (!(d.min <= v && v <= d.max))
            return -1;
    }
    if (apply) {
        at = 6;
        for (i = 0; i < b->rig->n_params; i++) {
            if (!writable(b, i))
                continue;
            memcpy(&RB_PAR(b, i), p + at, sizeof(rb_real));
            at += sizeof(rb_real);
        }
    }
    return count;
}

/* ------------------------------------------------------------------ boot */

static void set_fault(rb_board *b, const char *s, size_t n)
{
    if (n >= sizeof b->fault)
        n = sizeof b->fault - 1;
    memcpy(b->fault, s, n);
    b->fault[n] = '\0';
}

static void clear_fault(rb_board *b)
{
    b->has_fault = 0;
    set_fault(b, "none", 4);
}

rb_decl_error rb_init(rb_board *b, const rb_rig *rig, const rb_port *port,
                      rb_boot_reason reason)
{
    rb_decl_error err;
    rb_line *l;
    int i;
    memset(b, 0, sizeof *b);
    ROM_COPY(&b->rig_copy, rig, sizeof b->rig_copy);
    b->rig = &b->rig_copy;
    b->port = *port;
    b->out_reply.s = (char *)b->last_line + 1;   /* built in place, framed there */
    b->out_event.s = b->buf.ev + 1;
    clear_fault(b);
    err = check_rig(b);
    if (err != RB_DECL_OK) {
        b->rig = NULL;
        return err;
    }
    b->dt_s = (rb_real)1 / b->rig->rate_hz;
    b->status_every = (uint32_t)(b->rig->rate_hz / (rb_real)STATUS_HZ + (rb_real)0.5);
    if (b->status_every == 0)
        b->status_every = 1;
    for (i = 0; i < b->rig->n_params; i++)     /* boot values as the board reports them */
        RB_PAR(b, i) = rb_round_real(RB_PAR(b, i));
    rb_nv_load_image(b, 1);
    b->motor = RB_MOTOR_OFF;
    b->mode.kind = RB_MODE_OFF;
    b->mode.loop = -1;
    for (i = 0; i < b->rig->n_signals; i++)
        RB_SIG(b, i) = 0;
    rb_ctl_reset(b);
    rb_rx_reset(b);
    b->boot_us = b->port.micros(b->port.ctx);
    b->port.set_output(b->port.ctx, 0, 0);
    l = rb_ev_start(b, S("boot"));
    rb_ln_kv(l, S("reason"), reason == RB_BOOT_POWER ? S("power") : S("reset"));
    rb_event(b, l);
    rb_tx_flush(b);
    return RB_DECL_OK;
}

const char *rb_decl_text(const rb_board *b)
{
    return b->rig == NULL && b->decl_error != NULL ? b->decl_error : S("ok");
}

/* ------------------------------------------------------------------ motor state (§7.3) */

#define MOTOR_WORDS "off\0armed\0running\0tripped\0"

static int transition(uint8_t s, rb_happening h, uint8_t *next)
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
    uint8_t was = b->motor, next;
    if (!transition(was, h, &next)) {
        if (h == RB_H_RUN)
            return S("not_armed");
        if (h == RB_H_ARM)
            return was == RB_MOTOR_TRIPPED ? S("interlock") : S("state");
        return S("state");
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
           (m->kind == RB_MODE_RELAY && !b->lx[m->loop].relay_integral);
}

static uint32_t ceil_u32(rb_real x)
{
    /* ceil(x) for 0 <= x < 2^32, without the maths library */
    uint32_t u = (uint32_t)x;
    return u + ((rb_real)u < x);
}

void rb_set_mode(rb_board *b, const rb_mode_run *run)
{
    rb_mode_run next = *run;
    rb_line *l;
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
         * time_s >= end_s - 1e-9). In float the product of time_s (0.2 is 0.200000003) and
         * the rate is off by a few parts in 10^8: a relative allowance of 1e-6 instead keeps
         * a whole number of periods whole. */
        rb_real t = next.time_s, p, rate = b->rig->rate_hz;
        if (sizeof(rb_real) < sizeof(double))
            p = t * rate * (rb_real)(1 - 1e-6);
        else
            p = (t - (rb_real)1e-9) * rate;
        next.end_periods = p < 1 ? 1 : ceil_u32(p);
    }
    if (next.kind == RB_MODE_INJECT && next.at == 2 && b->port.body_push != NULL)
        b->port.body_push(b->port.ctx, next.amp, next.time_s);
    b->mode = next;
    l = rb_ev_start(b, S("mode"));
    rb_ln_kv(l, S("mode"), rb_mode_name(next.kind));
    rb_ln_kv(l, S("loop"), next.loop >= 0 ? loop_name(b, next.loop) : S("-"));
    rb_event(b, l);
}

void rb_trip_cause(rb_board *b, const char *cause, size_t n, int has_value, rb_real value)
{
    /* cause: RAM text, a protocol name */
    if (b->motor != RB_MOTOR_TRIPPED) {            /* the first cause stays latched */
        rb_line *l;
        set_fault(b, cause, n);
        b->has_fault = 1;
        l = rb_ev_start(b, S("trip"));
        rb_ln_kv_ram(l, S("cause"), b->fault, strlen(b->fault));
        if (has_value)
            rb_ln_kv_num(l, S("value"), value);
        rb_event(b, l);
    }
    rb_happen(b, RB_H_TRIP);
    b->pending_cmd = 0;
    b->port.set_output(b->port.ctx, 0, 0);
    if (b->has_last) {
        /* §4.2: a resend of a command answered before the trip must not report the state
         * from before it; the reply becomes `err <seq> state` */
        rb_line *l = &b->out_event;
        rb_ln_open(l, S("err"));
        rb_ln_u32(l, b->last_seq);
        rb_ln_word(l, S("state tripped since this command; ask status"));
        b->last_line_len = (uint8_t)rb_frame((char *)b->last_line, sizeof b->last_line,
                                             l->s, l->n);
    }
}

void rb_trip_rom(rb_board *b, const char *rom, int has_value, rb_real value)
{
    char cause[16];
    rb_trip_cause(b, cause, rb_rom_copy(cause, sizeof cause, rom), has_value, value);
}

void rb_trip(rb_board *b, const char *cause)
{
    size_t n;
    if (b->rig == NULL)
        return;
    n = strlen(cause);
    if (rb_is_name(cause, n))
        rb_trip_cause(b, cause, n, 0, 0);
    else
        rb_trip_rom(b, S("external"), 0, 0);
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

static void add_reason(char *out, size_t cap, size_t *n, const char *rom)
{
    size_t len = rb_rom_len(rom);
    if (*n + len + 2 > cap)
        return;
    if (*n > 0)
        out[(*n)++] = ',';
    rb_rom_copy(out + *n, len + 1, rom);
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
    if (b->has_fault)
        add_reason(out, cap, &n, S("fault"));
    if (!heartbeat_ok(b))
        add_reason(out, cap, &n, S("heartbeat"));
    for (i = 0; i < b->n_limits; i++) {
        const rb_limit *m = &b->limits[i];
        rb_real v = RB_SIG(b, m->signal);
        if (!m->trip && RB_ABS(v) > RB_PAR(b, m->param))
            add_reason(out, cap, &n, signal_name(b, m->signal));
    }
    for (i = 0; i < b->rig->n_loops; i++) {
        const rb_loop_ix *x = &b->lx[i];
        uint8_t g[3];
        int k;
        g[0] = x->kp;
        g[1] = x->ki;
        g[2] = x->kd;
        for (k = 0; k < 3; k++) {
            rb_param p;
            rb_param_get(b, g[k], &p);
            if (!(p.min <= *p.value && *p.value <= p.max))
                gains_ok = 0;
        }
    }
    if (!gains_ok)
        add_reason(out, cap, &n, S("gains"));
    return n;
}

void rb_status_fields(rb_board *b, rb_line *l)
{
    char why[96];      /* "fault,heartbeat,<arm_ signals>,gains" */
    uint32_t since = since_hb_us(b);
    size_t nwhy;
    rb_ln_kv(l, S("mode"), rb_mode_name(b->mode.kind));
    rb_ln_kv(l, S("loop"), b->mode.loop >= 0 ? loop_name(b, b->mode.loop) : S("-"));
    rb_ln_kv(l, S("motor"), rb_motor_word(b));
    rb_ln_kv_ram(l, S("fault"), b->fault, strlen(b->fault));
    nwhy = rb_interlock(b, why, sizeof why);
    if (nwhy)
        rb_ln_kv_ram(l, S("why"), why, nwhy);
    else
        rb_ln_kv(l, S("why"), S("none"));
    rb_ln_kv_u32(l, S("drops"), b->drops);
    rb_ln_kv_u32(l, S("rx_err"), b->rx_err);
    rb_ln_kv_u32(l, S("hb_ms"), (since / 500u + 1u) / 2u);    /* rounded to the nearest ms */
}

/* ------------------------------------------------------------------ the loop period */

static void safety(rb_board *b)
{
    int i;
    if (b->motor != RB_MOTOR_ARMED && b->motor != RB_MOTOR_RUNNING)
        return;
    if (!heartbeat_ok(b)) {
        rb_trip_rom(b, S("watchdog"), 0, 0);
        return;
    }
    for (i = 0; i < b->n_limits; i++) {        /* trip_<signal> (§5.2) */
        const rb_limit *m = &b->limits[i];
        rb_real v = RB_SIG(b, m->signal);
        if (m->trip && RB_ABS(v) > RB_PAR(b, m->param)) {
            char cause[RB_NAME_BUF + 6];
            size_t n = rb_rom_copy(cause, RB_NAME_BUF, signal_name(b, m->signal));
            rb_rom_copy(cause + n, 7, S("_limit"));
            rb_trip_cause(b, cause, n + 6, 1, v);
            return;
        }
    }
}

static void run_mode(rb_board *b)
{
    rb_real bound_value = 0;
    int bound = rb_ctl_run(b, &bound_value);
    if (bound >= 0) {
        rb_trip_rom(b, S("relay_bound"), 1, bound_value);
        return;
    }
    b->mode.periods++;
    if (b->mode.end_periods && b->mode.periods >= b->mode.end_periods) {
        rb_mode_kind kind = b->mode.kind;
        rb_line *l = rb_ev_start(b, S("done"));
        rb_ln_kv(l, S("mode"), rb_mode_name(kind));
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
    rb_ln_open(l, S("tm"));
    rb_ln_u32(l, b->frame);
    rb_ln_u32(l, b->port.micros(b->port.ctx));
    for (i = 0; i < b->rig->n_signals; i++)
        rb_ln_num(l, RB_SIG(b, i), 6);
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
        rb_ln_open(l, S("st"));
        rb_ln_u32(l, b->port.micros(b->port.ctx));
        rb_status_fields(b, l);
        rb_tx_put(b, l, RB_TX_STATUS);
    }
    rb_tx_flush(b);
}

/* ------------------------------------------------------------------ views */

rb_motor rb_motor_state(const rb_board *b) { return (rb_motor)b->motor; }
const char *rb_motor_word(const rb_board *b) { return rb_rom_word(S(MOTOR_WORDS), b->motor); }
const char *rb_fault_word(const rb_board *b)
{
    return b->rig != NULL && b->has_fault ? b->fault : "none";
}
uint32_t rb_rx_errors(const rb_board *b) { return b->rx_err; }
uint32_t rb_tx_drops(const rb_board *b) { return b->drops; }
const char *rb_last_rx_error(const rb_board *b)
{
    return b->last_rx_error != NULL ? b->last_rx_error : S("none");
}
size_t rb_board_size(void) { return sizeof(rb_board); }
