"""References for sampled-loop margins, built with python-control in state-space form only.

python-control's transfer functions in z lose their digits at 500 Hz (a pole at
z = 0.998 next to the integrator at z = 1), and ``control.stability_margins`` converts a
state-space system into a transfer function first. So the references here are:
- the plant: ``control.ss`` of the continuous transfer function (a realisation in s, well
  conditioned), sampled by ``control.c2d(..., 'zoh')``; a fractional dead time f = j·h/N
  by sampling at h/N with j registers of h/N and lifting to h with the input held over
  N sub-steps (x ← A^N x + Σ A^l B u), whole samples of dead time as a shift register
  (the reference is not balanced: its accuracy on badly scaled realisations is checked
  in test_tuning_sampled_blocks against closed-form ZOH responses);
- the board's PID from its difference equations (bench/rigbench/rig/firmware/control.py) as low
  order transfer functions in z turned into ``control.ss``, wired by ``control.feedback``
  or ``control.interconnect``;
- the frequency response from python-control's own evaluation of the state-space system
  (a dense solve per frequency), the whole-sample dead time as the exact factor
  e^{−jωmh} (the value of z^−m on the unit circle);
- margins from that response on a dense grid, crossings refined by scipy's brentq and the
  peak of |S| by a bounded scalar search; stability from the closed-loop eigenvalues
  (``control.poles`` of the loop closed by ``control.feedback`` with every register).
"""

from __future__ import annotations

import contextlib
import ctypes
import math
from dataclasses import dataclass
from pathlib import Path

import control
import numpy as np
import scipy
from scipy.optimize import brentq, minimize_scalar


def _blas_thread_controls() -> list:
    """(set, get) of the thread count of every OpenBLAS that numpy and scipy loaded."""
    found = []
    for mod in (np, scipy):
        libdir = Path(mod.__file__).parent.parent / f"{mod.__name__}.libs"
        for so in sorted(libdir.glob("*openblas*.so*")):
            lib = ctypes.CDLL(str(so))      # the copy already loaded, not a new one
            for suffix in ("64_", "", "_64_"):
                setter = getattr(lib, f"scipy_openblas_set_num_threads{suffix}", None)
                getter = getattr(lib, f"scipy_openblas_get_num_threads{suffix}", None)
                if setter is not None and getter is not None:
                    found.append((setter, getter))
                    break
    return found


@contextlib.contextmanager
def one_blas_thread():
    """Run the big reference eigenproblems on one thread: on this 2-core machine, shared
    with other test runs, threaded LAPACK took 10 s instead of 0.8 s on 1000 states."""
    controls = _blas_thread_controls()
    before = [get() for _, get in controls]
    for setter, _ in controls:
        setter(1)
    try:
        yield
    finally:
        for (setter, _), n in zip(controls, before):
            setter(n)


def shift_register(m: int, h: float) -> control.StateSpace:
    """z^−m as m registers (the definition of a whole-sample delay)."""
    if m == 0:
        return control.ss([], [], [], [[1.0]], h)
    a = np.eye(m, k=-1)
    b = np.zeros((m, 1))
    b[0, 0] = 1.0
    c = np.zeros((1, m))
    c[0, -1] = 1.0
    return control.ss(a, b, c, [[0.0]], h)


def plant_ss(num, den, h: float, delay_s: float = 0.0, *, sub: int | None = None,
             rate: bool = False) -> tuple[control.StateSpace, int]:
    """(sampled plant without its whole-sample dead time, that number of samples m).

    ``rate``: a second output, the derivative of the first (C·A·x), as a gyro reads it."""
    cont = control.ss(control.tf(list(num), list(den)))
    if rate:
        cont = control.ss(cont.A, cont.B, np.vstack([cont.C, cont.C @ cont.A]),
                          np.vstack([cont.D, cont.C @ cont.B]))
    m = int(math.floor(delay_s / h + 1e-9))
    frac = delay_s - m * h
    if frac < 1e-9 * h:
        return control.c2d(cont, h, "zoh"), m
    if sub is None:    # the fewest sub-steps that put the fraction on the fine grid
        sub = next(n for n in range(2, 201) if abs(frac / h * n - round(frac / h * n)) < 1e-9)
    j = round(frac / h * sub)
    assert abs(j * h / sub - frac) < 1e-12 * h, "fraction must be a multiple of h/sub"
    fine = control.c2d(cont, h / sub, "zoh") * shift_register(j, h / sub)
    a, b = np.asarray(fine.A), np.asarray(fine.B)
    lift_b = sum(np.linalg.matrix_power(a, i) @ b for i in range(sub))
    return control.ss(np.linalg.matrix_power(a, sub), lift_b, fine.C, fine.D, h), m


def pid_parts(kp, ki, kd, tf, h):
    """(C_e, D) in z: u = σ·(C_e·(y − r) + D·y) — backward-Euler integral, filtered
    backward difference on the measurement (bench/rigbench/rig/firmware/control.py)."""
    z = control.tf([1.0, 0.0], [1.0], h)
    ce = kp + (ki * h * z / (z - 1) if ki else 0)
    dd = kd * (z - 1) / ((tf + h) * z - tf) if kd else 0 * z
    return control.tf(ce), control.tf(dd)


def pid_from_y(kp, ki, kd, tf, h, direct=False) -> control.StateSpace:
    """u/y with the set-point at zero."""
    sg = 1.0 if direct else -1.0
    ce, dd = pid_parts(kp, ki, kd, tf, h)
    return control.ss(control.minreal(sg * (ce + dd), verbose=False))


@dataclass
class RefLoop:
    """L(z) = −z^−m·C(z)·P(z) broken at the plant input, in python-control state space."""

    rational: control.StateSpace      # without the m registers
    m: int
    h: float

    def response(self, w) -> np.ndarray:
        w = np.atleast_1d(np.asarray(w, dtype=float))
        r = np.asarray(self.rational(np.exp(1j * w * self.h))).reshape(-1)
        return r * np.exp(-1j * w * self.m * self.h)

    def closed_loop_poles(self) -> np.ndarray:
        full = self.rational * shift_register(self.m, self.h)
        with one_blas_thread():
            return control.poles(control.feedback(full, 1.0, sign=-1))

    def stable(self) -> bool:
        return bool(np.all(np.abs(self.closed_loop_poles()) < 1.0))


def pid_loop(num, den, delay_s, kp, ki, kd, tf, h, direct=False, rate=False) -> RefLoop:
    p, m = plant_ss(num, den, h, delay_s, rate=rate)
    sg = 1.0 if direct else -1.0
    if rate:
        ce, dd = pid_parts(kp, ki, 0.0, 0.0, h)
        a_f = tf / (tf + h)
        # kd·v with v[k] = a·v[k−1] + (1 − a)·rate[k]
        filt = control.tf([kd * (1 - a_f), 0.0], [1.0, -a_f], h)
        ctrl = control.append(control.ss(sg * ce), control.ss(sg * filt))   # (y, rate) in
        ctrl = control.ss(ctrl.A, ctrl.B, np.ones((1, 2)) @ ctrl.C, np.ones((1, 2)) @ ctrl.D, h)
        loop = ctrl * p
    else:
        loop = pid_from_y(kp, ki, kd, tf, h, direct) * p
    return RefLoop(-loop, m, h)


@dataclass
class RefMargins:
    stable: bool
    gm_upper: float | None
    gm_lower: float | None
    pm_deg: float | None
    wc: float | None
    ms: float


def ref_margins(loop: RefLoop, *, lo: float | None = None, n_log: int = 3000,
                step_rad: float = 0.05) -> RefMargins:
    """Margins of ``loop`` from a dense grid (module docstring)."""
    h = loop.h
    nyq = math.pi / h
    lo = lo or nyq * 1e-7
    w = np.geomspace(lo, nyq, n_log)
    lw = loop.response(w)
    if loop.m:
        # add a linear grid fine enough for the dead time's phase wherever |L| > 0.1
        big = w[np.abs(lw) > 0.1]
        if len(big):
            top = min(float(big.max()) * 1.5, nyq)
            dw = step_rad / (loop.m * h)
            w = np.unique(np.r_[w, np.arange(dw, top, dw)])
            lw = loop.response(w)

    def mag(x):
        return abs(loop.response(x)[0]) - 1.0

    def imag(x):
        return loop.response(x)[0].imag

    wcs = [brentq(mag, w[i], w[i + 1], xtol=1e-14 * w[i + 1])
           for i in np.flatnonzero(np.sign(np.abs(lw[1:]) - 1) != np.sign(np.abs(lw[:-1]) - 1))]
    crit = []
    for i in np.flatnonzero(np.sign(lw.imag[1:]) != np.sign(lw.imag[:-1])):
        x = brentq(imag, w[i], w[i + 1], xtol=1e-14 * w[i + 1])
        v = loop.response(x)[0]
        if v.real < 0:
            crit.append(1.0 / abs(v))
    # the ends ω = 0 and ω = π/h, where L is real: ω = 0 only when L is flat there (no
    # integrator, whose |L| grows without bound)
    flat = abs(abs(loop.response(10 * w[0])[0]) / abs(lw[0]) - 1) < 1e-3
    for val, ok in ((lw[0], flat), (lw[-1], True)):
        if ok and np.isfinite(val) and val.real < 0 and abs(val.imag) < 1e-6 * abs(val):
            crit.append(1.0 / abs(val.real))
    stable = loop.stable()
    sens = np.abs(1.0 + lw)
    i = int(np.argmin(sens))
    a, b = w[max(i - 1, 0)], w[min(i + 1, len(w) - 1)]
    best = float(sens[i])
    if b > a:
        res = minimize_scalar(lambda x: abs(1.0 + loop.response(x)[0]), bounds=(a, b),
                              method="bounded", options={"xatol": 1e-12 * b})
        best = min(best, float(res.fun))
    pms = [(math.degrees(math.atan2(-v.imag, -v.real)), x)
           for x, v in zip(wcs, loop.response(np.array(wcs)))] if wcs else []
    up = [k for k in crit if k > 1.0]
    dn = [k for k in crit if k < 1.0]
    pm, wc = min(pms) if pms else (None, None)
    return RefMargins(stable, min(up) if up else None, max(dn) if dn else None, pm, wc,
                      1.0 / best)
