"""Test helper: an ideal relay (optionally with hysteresis and bias) around a linear plant.

Plant num/den (descending powers of s) plus dead time, simulated exactly at step h with a
zero-order hold (scipy.signal.cont2discrete) and a delay buffer of whole steps. The relay
acts on e = -y (set-point 0): u = bias + d when e > eps, bias - d when e < -eps, else it
keeps its last value. Returns arrays t, relay state (+1/-1), u, y.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal


@dataclass
class RelayRun:
    t: np.ndarray
    relay: np.ndarray
    u: np.ndarray
    y: np.ndarray


def simulate_relay(num, den, *, delay_s=0.0, d=1.0, eps=0.0, bias=0.0, h=1e-3,
                   t_end=60.0, noise=0.0, seed=0) -> RelayRun:
    a, b, c, dd = signal.tf2ss(num, den)
    ad, bd, cd, ddd, _ = signal.cont2discrete((a, b, c, dd), h, method="zoh")
    nd = int(round(delay_s / h))
    n = int(round(t_end / h)) + 1
    rng = np.random.default_rng(seed)
    x = np.zeros(ad.shape[0])
    buf = [bias] * nd          # inputs still in the dead time
    t = np.arange(n) * h
    y = np.empty(n)
    u = np.empty(n)
    rel = np.empty(n)
    state = 1.0
    cd = cd[0]
    bd = bd[:, 0]
    d0 = float(ddd[0, 0])
    for k in range(n):
        u_plant = buf[0] if nd else None
        yk = float(cd @ x) + (d0 * u_plant if nd else 0.0)
        ym = yk + (noise * rng.standard_normal() if noise else 0.0)
        e = -ym
        if e > eps:
            state = 1.0
        elif e < -eps:
            state = -1.0
        uk = bias + d * state
        if nd:
            buf.append(uk)
            u_in = buf.pop(0)
        else:
            u_in = uk
            yk += d0 * uk
        x = ad @ x + bd * u_in
        y[k], u[k], rel[k] = ym, uk, state
    return RelayRun(t, rel, u, y)
