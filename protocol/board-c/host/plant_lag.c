/*
 * plant_lag.c -- exact zero-order-hold sampling of a chain of n equal lags (see plant_lag.h).
 *
 * States x1..xn with T x1' = -x1 + K u and T xi' = -xi + x(i-1), y = xn. With a = h/T and
 * E = e^-a the transition matrix is lower triangular Toeplitz, Phi[i][j] = E a^(i-j)/(i-j)!
 * (i >= j), and the input column is Gamma[i] = K (1 - E sum_{k<=i} a^k/k!) (i from 0): the
 * step response of the chain sampled at h. Dead time: the input is delayed by
 * round(L/h) whole samples.
 */
#include "plant_lag.h"

#include <math.h>

int lag_init(lag_plant *p, int order, double gain, double tau_s, double delay_s, double dt_s,
             double noise_std, uint64_t seed)
{
    double a, e, term, sum;
    int i, j, k;
    if (order < 1 || order > LAG_MAX_ORDER || !(tau_s > 0) || !(dt_s > 0) ||
        !(delay_s >= 0) || !(noise_std >= 0) || !isfinite(gain))
        return -1;
    p->delay = (int)floor(delay_s / dt_s + 0.5);
    if (p->delay > LAG_MAX_DELAY)
        return -1;
    p->order = order;
    p->gain = gain;
    p->tau_s = tau_s;
    p->dt_s = dt_s;
    p->noise_std = noise_std;
    a = dt_s / tau_s;
    e = exp(-a);
    for (i = 0; i < order; i++) {
        for (j = 0; j < order; j++) {
            if (j > i) {
                p->phi[i][j] = 0;
                continue;
            }
            term = e;
            for (k = 1; k <= i - j; k++)
                term *= a / k;
            p->phi[i][j] = term;
        }
        sum = 0;
        term = 1;
        for (k = 0; k <= i; k++) {
            if (k > 0)
                term *= a / k;
            sum += term;
        }
        p->gamma[i] = gain * (1 - e * sum);
        p->x[i] = 0;
    }
    for (i = 0; i <= p->delay; i++)
        p->queue[i] = 0;
    p->head = 0;
    p->rng = seed * 2862933555777941757ull + 3037000493ull;
    return 0;
}

void lag_step(lag_plant *p, double u)
{
    double next[LAG_MAX_ORDER], ud;
    int i, j;
    p->queue[p->head] = u;
    p->head = (p->head + 1) % (p->delay + 1);
    ud = p->queue[p->head];     /* the input from `delay` samples ago */
    for (i = 0; i < p->order; i++) {
        double v = p->gamma[i] * ud;
        for (j = 0; j <= i; j++)
            v += p->phi[i][j] * p->x[j];
        next[i] = v;
    }
    for (i = 0; i < p->order; i++)
        p->x[i] = next[i];
}

double lag_output(const lag_plant *p)
{
    return p->x[p->order - 1];
}

static double uniform(lag_plant *p)
{
    /* xorshift64*: enough for measurement noise in a demo plant */
    p->rng ^= p->rng >> 12;
    p->rng ^= p->rng << 25;
    p->rng ^= p->rng >> 27;
    return ((double)((p->rng * 2685821657736338717ull) >> 11) + 0.5) / 9007199254740992.0;
}

double lag_measure(lag_plant *p)
{
    double y = lag_output(p);
    if (p->noise_std > 0) {
        double u1 = uniform(p), u2 = uniform(p);
        y += p->noise_std * sqrt(-2 * log(u1)) * cos(6.283185307179586 * u2);
    }
    return y;
}
