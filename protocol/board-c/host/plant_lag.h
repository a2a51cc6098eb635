/*
 * plant_lag.h -- the host build's simulated plant: n equal first-order lags with dead time,
 *   G(s) = K e^(-sL) / (T s + 1)^n,
 * sampled exactly under a zero-order hold (no approximation at the sample instants), with
 * Gaussian measurement noise. Host-side test code only; not part of the board library.
 */
#ifndef PLANT_LAG_H
#define PLANT_LAG_H

#include <stdint.h>

#define LAG_MAX_ORDER 8
#define LAG_MAX_DELAY 4096      /* samples */

typedef struct {
    int order;
    double gain, tau_s, dt_s, noise_std;
    double phi[LAG_MAX_ORDER][LAG_MAX_ORDER], gamma[LAG_MAX_ORDER];
    double x[LAG_MAX_ORDER];
    double queue[LAG_MAX_DELAY + 1];
    int delay, head;
    uint64_t rng;
} lag_plant;

/* 0 on success; -1 when an argument is outside the supported range */
int lag_init(lag_plant *p, int order, double gain, double tau_s, double delay_s, double dt_s,
             double noise_std, uint64_t seed);
void lag_step(lag_plant *p, double u);   /* one sample period with input u held */
double lag_output(const lag_plant *p);   /* y at the sample instant, noise-free */
double lag_measure(lag_plant *p);        /* y plus measurement noise */

#endif
