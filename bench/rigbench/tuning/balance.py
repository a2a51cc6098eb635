"""Model of a reaction-wheel balance loop, fitted from logged data.

Body tilt θ in rad, wheel speed w relative to the body in rad/s, times in s, the
controller output u in the drive's unit (wheel-speed command in rad/s, or torque in N·m).
The model (a², c′ or b, δ, the actuator's gain, lag τe and dead time), the board's sign
convention (e = θ − θ_sp, direct acting) and the fitting recipe with its refusals
(:class:`BalanceFitError`, a ValueError saying why): docs/METHODS.md §4 and §4.2.

Designs live in rigbench.tuning.balance_design (pole placement, LQR) and are re-exported here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from rigbench.tuning.loop import PlantModel

__all__ = ["BalanceModel", "BalanceFitError", "fit_balance_model", "design_pole_placement",
           "design_lqr", "LqrDesign", "DRIVES"]

DRIVES = ("speed", "torque")


class BalanceFitError(ValueError):
    """The record cannot give a balance model; the message says why and what to record."""


@dataclass(frozen=True)
class BalanceModel:
    a: float                        # unstable pole, rad/s
    c_prime: float                  # speed drive: Jw/Jt; torque drive: b = 1/Jp
    offset_rad: float               # balance offset δ
    tau_e_s: float | None           # driver lag (speed drive); None for torque drive
    delay_samples: int              # samples from logged command to its effect
    dt_s: float
    drive: str = "speed"
    drive_gain: float = 1.0         # g: wheel speed per unit command at steady state
    a_sigma: float = 0.0
    c_prime_sigma: float = 0.0
    offset_sigma_rad: float = 0.0
    tau_e_sigma_s: float = 0.0
    residual_rms: float = 0.0       # tilt-acceleration fit, rad/s²
    samples: int = 0

    def __post_init__(self):
        if self.drive not in DRIVES:
            raise ValueError(f"drive must be one of {DRIVES}")
        if self.drive == "speed" and not (self.tau_e_s and self.tau_e_s > 0):
            raise ValueError("a speed-drive model needs a positive driver lag tau_e_s")

    @property
    def delay_s(self) -> float:
        return self.delay_samples * self.dt_s

    def plant_model(self) -> PlantModel:
        """θ/u as a PlantModel (input: the board's command; output: tilt)."""
        a2 = self.a * self.a
        if self.drive == "torque":
            return PlantModel([-self.c_prime], [1.0, 0.0, -a2], self.delay_s)
        return PlantModel([-self.c_prime * self.drive_gain, 0.0],
                          np.polymul([self.tau_e_s, 1.0], [1.0, 0.0, -a2]), self.delay_s)


def _lstsq(x: np.ndarray, y: np.ndarray, n_eff: float):
    """Least squares with the covariance inflated by n/n_eff for correlated residuals."""
    p, *_ = np.linalg.lstsq(x, y, rcond=None)
    res = y - x @ p
    s2 = float(res @ res) / max(len(y) - x.shape[1], 1)
    cov = s2 * np.linalg.pinv(x.T @ x) * (len(y) / max(n_eff, 1.0))
    return p, cov, res


def fit_balance_model(t_s, tilt_rad, gyro_rad_s, wheel_rad_s, command, *, dt: float,
                      drive: str = "speed", cutoff_hz: float = 15.0, order: int = 2,
                      max_delay: int = 10, trim_s: float | None = None) -> BalanceModel:
    """Fit a :class:`BalanceModel` from logged, uniformly sampled data (SI units).

    ``command`` is the controller output as logged (wheel-speed command in rad/s for the
    speed drive, torque in N·m for the torque drive). ``trim_s`` cuts the filter's edge
    transients off both ends (default 3/cutoff_hz). ``t_s`` is used only to check that
    the samples are uniform at ``dt``.
    """
    if drive not in DRIVES:
        raise ValueError(f"drive must be one of {DRIVES}")
    arrays = [np.asarray(v, dtype=float) for v in (tilt_rad, gyro_rad_s, wheel_rad_s, command)]
    n = len(arrays[0])
    if any(len(v) != n for v in arrays) or len(t_s) != n:
        raise ValueError("all signals must have the same length")
    steps = np.diff(np.asarray(t_s, dtype=float))
    if n and np.max(np.abs(steps - dt)) > 0.1 * dt:
        raise ValueError("samples are not uniform at dt; resample first")
    if not 0 < cutoff_hz < 0.5 / dt:
        raise ValueError("cutoff_hz must lie below the Nyquist frequency")
    b, a = signal.butter(order, cutoff_hz * 2.0 * dt)
    tilt, gyro, wheel, cmd = (signal.filtfilt(b, a, v) for v in arrays)
    edge = int(round((3.0 / cutoff_hz if trim_s is None else trim_s) / dt))
    if n - 2 * edge < 50 + max_delay:
        raise BalanceFitError(f"record too short for the filter and delay scan: {n} samples, "
                              f"{2 * edge} of them lost to the filter's edges, "
                              f"{50 + max_delay} needed after that")
    sl = slice(edge, n - edge)
    acc = np.gradient(gyro, dt)[sl]
    n_eff = (n - 2 * edge) * min(1.0, 2.0 * cutoff_hz * dt)

    if drive == "speed":
        wdot = np.gradient(wheel, dt)[sl]
        x = np.column_stack([tilt[sl], -wdot, np.ones_like(acc)])
        p, cov, res = _lstsq(x, acc, n_eff)
        _check_unstable(p[0])
        act = _fit_actuator(wheel[sl], cmd[sl], max_delay, n_eff)
        alpha, beta, d, acov = act
        _check_lag(alpha, math.sqrt(acov[0, 0]), n * dt)
        tau = -dt / math.log(alpha)
        gain = beta / (1.0 - alpha)
        tau_sig = dt * math.sqrt(acov[0, 0]) / (alpha * math.log(alpha) ** 2)
    else:
        best = None
        for d in range(max_delay + 1):
            m = len(acc) - d
            x = np.column_stack([tilt[sl][d:], -cmd[sl][:m], np.ones(m)])
            fit = _lstsq(x, acc[d:], n_eff)
            if best is None or fit[2] @ fit[2] < best[0][2] @ best[0][2]:
                best = (fit, d)
        (p, cov, res), d = best
        _check_unstable(p[0])
        tau, gain, tau_sig = None, 1.0, 0.0

    a2, c_prime, k0 = (float(v) for v in p)
    a_val = math.sqrt(a2)
    offset = -k0 / a2
    jac = np.array([k0 / a2 ** 2, 0.0, -1.0 / a2])
    return BalanceModel(
        a=a_val, c_prime=c_prime, offset_rad=offset, tau_e_s=tau, delay_samples=int(d),
        dt_s=dt, drive=drive, drive_gain=gain,
        a_sigma=math.sqrt(cov[0, 0]) / (2.0 * a_val), c_prime_sigma=math.sqrt(cov[1, 1]),
        offset_sigma_rad=math.sqrt(float(jac @ cov @ jac)), tau_e_sigma_s=tau_sig,
        residual_rms=float(np.sqrt(np.mean(res ** 2))), samples=len(acc))


def _check_unstable(a2: float) -> None:
    if a2 <= 0:
        raise BalanceFitError(f"no unstable pole in the data (a² = {a2:.3g} <= 0); "
                              "identify from relay or PRBS runs")


def _check_lag(alpha: float, sigma: float, seconds: float, sigmas: float = 2.0) -> None:
    """The driver's w[k+1] = α·w[k] + β·u is a lag only for 0 < α < 1, by ``sigmas``."""
    if sigmas * sigma < alpha < 1.0 - sigmas * sigma:
        return
    raise BalanceFitError(
        f"driver lag not identified from this record ({seconds:.3g} s): the wheel-speed fit "
        f"w[k+1] = α·w[k] + β·u[k−d] gives α = {alpha:.4f} ± {sigma:.2g}, but a lag needs "
        f"0 < α < 1 by {sigmas:g} standard errors (τe = −dt/ln α); the command moves the "
        "wheel too little beyond its slow drift. Fit a longer record with excitation: a "
        "relay test with its set-point doublet, or a PRBS")


def _fit_actuator(wheel, cmd, max_delay: int, n_eff: float):
    """w[k+1] = α·w[k] + β·u[k−d] by least squares for each d; returns (α, β, d, covariance).

    The d kept has the smallest one-step residual among the fits that are a lag
    (0 < α < 1). On low-passed data every d predicts w[k+1] almost equally well, and a
    large d with α > 1 (an extrapolator of the smooth record, no lag) can win by a hair
    and get a good record refused. With no lag among the fits the best one is returned
    for _check_lag to refuse.
    """
    best, best_lag = None, None
    for d in range(max_delay + 1):
        k = np.arange(d, len(wheel) - 1)
        x = np.column_stack([wheel[k], cmd[k - d]])
        p, cov, res = _lstsq(x, wheel[k + 1], n_eff)
        fit = (float(res @ res) / len(k), float(p[0]), float(p[1]), d, cov)
        if best is None or fit[0] < best[0]:
            best = fit
        if 0.0 < fit[1] < 1.0 and (best_lag is None or fit[0] < best_lag[0]):
            best_lag = fit
    return (best_lag or best)[1:]


from rigbench.tuning.balance_design import LqrDesign, design_lqr, design_pole_placement  # noqa: E402
