"""Test helper: the linear balance loop of docs/METHODS.md §4, simulated exactly at the loop rate.

Speed drive: θ̈ = a²(θ − δ) − c·ẇ, ẇ = (g·u(t − d·dt) − w)/τe; torque drive:
θ̈ = a²(θ − δ) − b·u(t − d·dt). Exact ZOH of the continuous model (scipy.linalg.expm), a
delay buffer of whole samples, noisy tilt/gyro/wheel readings, and the board's controller
u = kp·e + ki·∫e + kd·gyro with e = tilt − θ_sp, θ_sp = trim_p·w + trim_i·∫w + excitation.
All numbers are the invented demo rig of docs/METHODS.md §6 (demos and tests only).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg


@dataclass
class BalanceRun:
    t: np.ndarray
    tilt: np.ndarray
    gyro: np.ndarray
    wheel: np.ndarray
    command: np.ndarray
    true_tilt: np.ndarray


def simulate_balance(*, a, c, tau_e=0.008, g=1.0, delta=0.0, d=1, dt=0.002, t_end=20.0,
                     kp, ki, kd, trim_p=0.0, trim_i=0.0, drive="speed", excitation=None,
                     tilt_noise=0.0, gyro_noise=0.0, wheel_noise=0.0, seed=0) -> BalanceRun:
    a2 = a * a
    if drive == "speed":
        ac = np.array([[0, 1, 0], [a2, 0, c / tau_e], [0, 0, -1 / tau_e]], dtype=float)
        bc = np.array([[0.0, 0.0], [-c * g / tau_e, -a2 * delta], [g / tau_e, 0.0]])
    else:
        ac = np.array([[0.0, 1.0], [a2, 0.0]])
        bc = np.array([[0.0, 0.0], [-c, -a2 * delta]])
    n = ac.shape[0]
    big = np.zeros((n + 2, n + 2))
    big[:n, :n], big[:n, n:] = ac * dt, bc * dt
    e = linalg.expm(big)
    phi, gam = e[:n, :n], e[:n, n:]
    steps = int(round(t_end / dt)) + 1
    rng = np.random.default_rng(seed)
    t = np.arange(steps) * dt
    exc = np.zeros(steps) if excitation is None else excitation(t, rng)
    x = np.zeros(n)
    x[0] = delta
    buf = [0.0] * d
    integ = 0.0
    wint = 0.0
    out = {k: np.empty(steps) for k in ("tilt", "gyro", "wheel", "command", "true")}
    for k in range(steps):
        tilt = x[0] + tilt_noise * rng.standard_normal()
        gyro = x[1] + gyro_noise * rng.standard_normal()
        wheel = (x[2] if n == 3 else 0.0) + wheel_noise * rng.standard_normal()
        wint += wheel * dt
        sp = trim_p * wheel + trim_i * wint + exc[k]  # the board does not know δ
        err = tilt - sp
        integ += ki * err * dt
        u = kp * err + integ + kd * gyro
        buf.append(u)
        u_in = buf.pop(0)
        for key, v in (("tilt", tilt), ("gyro", gyro), ("wheel", wheel), ("command", u),
                       ("true", x[0])):
            out[key][k] = v
        x = phi @ x + gam @ np.array([u_in, 1.0])
    return BalanceRun(t, out["tilt"], out["gyro"], out["wheel"], out["command"], out["true"])


def prbs(amplitude, min_hold=0.1, max_hold=0.4):
    """Random ±amplitude steps held for random times: a set-point excitation."""
    def make(t, rng):
        out = np.empty_like(t)
        level, until = amplitude, 0.0
        for i, ti in enumerate(t):
            if ti >= until:
                level = -level
                until = ti + rng.uniform(min_hold, max_hold)
            out[i] = level
        return out
    return make
