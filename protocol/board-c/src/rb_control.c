/*
 * rb_control.c -- the PID of every loop, the relay, and the loops under a mode (§5.4, §8).
 *
 * PID in parallel form at the loop period dt:  u = kp*e + I + D,
 *   I[k] = I[k-1] + ki*e_i*dt   (stored as the sum, so a change of ki does not bump u),
 *   D = kd*s*yf'  with yf' = dy/dt (sample difference, or a rate signal such as a gyro)
 *   through a first-order low-pass of time constant dfilt (0: unfiltered), s = +1 for
 *   action=direct (e = y - sp) and -1 for action=reverse (e = sp - y): the derivative acts on
 *   the measurement only, so set-point steps give no kick.
 * Anti-windup by clamping: in a period where the integrand pushes the output beyond a limit,
 * the integral moves only as far as brings the output to that limit; the output is clipped
 * to +-limit. e_i = e + the relay offset of a relay=integral loop.
 * Relay (§8.1): the state r flips to +1 when e > hyst and to -1 when e < -hyst.
 * relay=output: u = bias + amp*r; relay=integral: bias + amp*r is added to e_i only.
 * Leaving an output override (relay=output, open) for closed loop is bumpless.
 * Same arithmetic, in the same order, as bench/rigbench/rig/firmware/control.py.
 */
#include "rb_internal.h"

void rb_ctl_reset(rb_board *b)
{
    int i;
    for (i = 0; i < b->rig->n_loops; i++) {
        rb_pid_state *p = &b->pid[i];
        p->integral = 0;
        p->dy = 0;
        p->y_last = 0;
        p->has_y_last = 0;
        p->bumpless = 0;
        p->has_bumpless = 0;
        p->last_out = 0;
        p->relay = 1;
    }
}

rb_real rb_ctl_setpoint(const rb_board *b, int loop)
{
    const rb_loop_ix *x = &b->lx[loop];
    return x->setpoint_param >= 0 ? RB_PAR(b, x->setpoint_param) : RB_SIG(b, x->setpoint_sig);
}

rb_real rb_ctl_error(const rb_board *b, int loop, rb_real sp, rb_real y)
{
    return b->lx[loop].reverse ? sp - y : y - sp;
}

void rb_ctl_idle(rb_board *b)
{
    int i;
    for (i = 0; i < b->rig->n_loops; i++) {
        const rb_loop_ix *x = &b->lx[i];
        rb_real sp = rb_ctl_setpoint(b, i);
        if (x->setpoint_show >= 0)
            RB_SIG(b, x->setpoint_show) = sp;
        RB_SIG(b, x->output) = 0;
    }
    if (b->relay_sig >= 0)
        RB_SIG(b, b->relay_sig) = 0;
    rb_ctl_reset(b);
}

void rb_ctl_start_relay(rb_board *b, int loop, rb_real error)
{
    b->pid[loop].relay = error < 0 ? -1 : 1;   /* +1 inside the hysteresis */
}

void rb_ctl_leave_override(rb_board *b, int loop)
{
    b->pid[loop].bumpless = b->pid[loop].last_out;
    b->pid[loop].has_bumpless = 1;
}

static rb_real pid_update(rb_board *b, int loop, rb_real sp, rb_real y, rb_real offset)
{
    const rb_loop_ix *x = &b->lx[loop];
    rb_pid_state *p = &b->pid[loop];
    rb_real dt = b->dt_s;
    rb_real kp = RB_PAR(b, x->kp), ki = RB_PAR(b, x->ki), kd = RB_PAR(b, x->kd);
    rb_real limit = RB_PAR(b, x->limit), dfilt = RB_PAR(b, x->dfilt);
    int reverse = x->reverse;
    rb_real e = reverse ? sp - y : y - sp;
    rb_real raw, a, dterm, pterm, step, i_new, u;
    if (x->rate >= 0)
        raw = RB_SIG(b, x->rate);
    else
        raw = p->has_y_last ? (y - p->y_last) / dt : 0;
    p->y_last = y;
    p->has_y_last = 1;
    a = dfilt > 0 ? dfilt / (dfilt + dt) : 0;
    p->dy = a * p->dy + (1 - a) * raw;
    dterm = kd * (reverse ? -p->dy : p->dy);
    pterm = kp * e;
    if (p->has_bumpless) {
        p->integral = p->bumpless - pterm - dterm;
        p->has_bumpless = 0;
    }
    step = ki * (e + offset) * dt;
    i_new = p->integral + step;
    u = pterm + i_new + dterm;
    if (u > limit && step > 0) {
        rb_real edge = limit - pterm - dterm;
        i_new = p->integral > edge ? p->integral : edge;
    } else if (u < -limit && step < 0) {
        rb_real edge = -limit - pterm - dterm;
        i_new = p->integral < edge ? p->integral : edge;
    }
    p->integral = i_new;
    u = pterm + i_new + dterm;
    return u > limit ? limit : (u < -limit ? -limit : u);
}

int rb_ctl_run(rb_board *b, rb_real *bound_value)
{
    const rb_mode_run *m = &b->mode;
    rb_real relay_shown = 0;
    int bound_loop = -1, i;
    for (i = 0; i < b->rig->n_loops; i++) {
        const rb_loop_ix *x = &b->lx[i];
        int mine = m->loop == i;
        rb_real sp = rb_ctl_setpoint(b, i);
        rb_real y, limit, offset = 0, override = 0, u;
        int has_override = 0;
        if (mine && m->kind == RB_MODE_INJECT && m->at == 0)
            sp += m->amp;
        if (x->setpoint_show >= 0)
            RB_SIG(b, x->setpoint_show) = sp;
        y = RB_SIG(b, x->measure);
        limit = RB_PAR(b, x->limit);
        if (mine && m->kind == RB_MODE_RELAY) {
            rb_real e = rb_ctl_error(b, i, sp, y);
            rb_real r = b->pid[i].relay;
            if (e > m->hyst)
                r = 1;
            else if (e < -m->hyst)
                r = -1;
            b->pid[i].relay = r;
            relay_shown = r;
            if (m->has_bound && RB_ABS(y - sp) > m->bound) {
                bound_loop = i;
                *bound_value = RB_ABS(y - sp);
            }
            if (x->relay_integral)
                offset = m->bias + m->amp * r;
            else {
                override = m->bias + m->amp * r;
                has_override = 1;
            }
        } else if (mine && m->kind == RB_MODE_OPEN) {
            override = m->out;
            has_override = 1;
        }
        u = pid_update(b, i, sp, y, offset);
        if (has_override)
            u = override > limit ? limit : (override < -limit ? -limit : override);
        if (mine && m->kind == RB_MODE_INJECT && m->at == 1) {
            u = u + m->amp;
            u = u < -limit ? -limit : (u > limit ? limit : u);
        }
        b->pid[i].last_out = u;
        RB_SIG(b, x->output) = u;
    }
    if (b->relay_sig >= 0)
        RB_SIG(b, b->relay_sig) = relay_shown;
    return bound_loop;
}
