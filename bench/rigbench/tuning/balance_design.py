"""Controller designs on a fitted BalanceModel: pole placement and discrete LQR.

Gains come out in the model's units (rad, rad/s, s; the output in the drive's unit), for
the board's tilt PID (e = θ − θ_sp, direct acting) and, for LQR, its nearest PID plus an
outer wheel-speed trim. The pole-placement formulas, the LQR states and default weights
(Bryson's rule) and the mapping to the nearest PID: docs/METHODS.md §4.3.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg

from rigbench.tuning.loop import LoopController, PlantModel, loop_transfer, state_feedback_loop
from rigbench.tuning.margins import Margins, loop_margins, margins
from rigbench.tuning.rules import ParallelPid, Proposal

__all__ = ["design_pole_placement", "design_lqr", "LqrDesign", "lqr_matrices"]

_PP_SOURCE = "pole placement on the identified model (docs/METHODS.md §4, re-derived)"
_LQR_SOURCE = "discrete LQR on the identified model (docs/METHODS.md §4); Bryson's rule weights"


def _no(rule: str, kind: str, reason: str) -> Proposal:
    return Proposal(rule, kind, None, False, reason, _PP_SOURCE)


def design_pole_placement(model, *, zeta: float = 0.7, wn: float | None = None,
                          kind: str = "PI", p3: float | None = None) -> Proposal:
    """Tilt-loop PI/PID placing (s² + 2ζωn s + ωn²)(s + p3) on ``model`` (no delay).

    Default ωn: speed drive min(2a, 1/(4ζτe)) (keeps p3 >= 1/(2τe) for the PI);
    torque drive 2a. Default p3 for a PID: 1/τe (speed drive), ωn (torque drive).
    """
    kind = kind.upper()
    if kind not in ("PI", "PID"):
        raise ValueError("kind must be 'PI' or 'PID'")
    rule = f"pole-placement-{kind.lower()}"
    a2 = model.a ** 2
    if model.drive == "speed":
        tau, c = model.tau_e_s, model.c_prime * model.drive_gain
        wn = min(2.0 * model.a, 1.0 / (4.0 * zeta * tau)) if wn is None else wn
        if kind == "PI":
            if p3 is not None:
                raise ValueError("p3 is fixed by the lag for a PI: 1/τe − 2ζωn")
            p3 = 1.0 / tau - 2.0 * zeta * wn
        elif p3 is None:
            p3 = 1.0 / tau
        kd = (tau * (2.0 * zeta * wn + p3) - 1.0) / c
        kp = tau * (wn ** 2 + 2.0 * zeta * wn * p3 + a2) / c
        ki = (a2 + tau * wn ** 2 * p3) / c
    else:
        if kind == "PI":
            return _no(rule, kind, "a PI cannot stabilise the torque-driven loop "
                                   "(closed loop s³ + (b·kp − a²)s + b·ki lacks s²)")
        b = model.c_prime
        wn = 2.0 * model.a if wn is None else wn
        p3 = wn if p3 is None else p3
        kd = (2.0 * zeta * wn + p3) / b
        kp = (wn ** 2 + 2.0 * zeta * wn * p3 + a2) / b
        ki = wn ** 2 * p3 / b
    if p3 <= 0:
        return _no(rule, kind, f"third pole not in the left half-plane (p3 = {p3:.3g}): "
                               "lower ωn or the lag τe is too large for this ωn")
    if kd < -1e-12 * abs(kp):
        return _no(rule, kind, f"needs negative kd ({kd:.3g}): raise p3")
    kd = max(kd, 0.0)
    target = np.sort_complex(np.r_[np.roots([1.0, 2.0 * zeta * wn, wn ** 2]), -p3])
    nominal = PlantModel(model.plant_model().num, model.plant_model().den, 0.0)
    lt = loop_transfer(LoopController(kp, ki, kd, direct_acting=True), nominal)
    poles = np.sort_complex(np.roots(np.polyadd(lt.den, lt.num)))
    board = LoopController(kp, ki, kd, h_s=model.dt_s, direct_acting=True)
    m = margins(board, model)
    notes = (f"ζ = {zeta:g}, ωn = {wn:.4g} rad/s, p3 = {p3:.4g} rad/s; margins predicted "
             f"for the discrete controller at dt = {model.dt_s:g} s with "
             f"{model.delay_samples} sample(s) of dead time")
    return Proposal(rule, kind, ParallelPid(kp, ki, kd).to_ideal(), True, "", _PP_SOURCE,
                    notes, margins=m,
                    details={"target_poles": tuple(target), "closed_loop_poles": tuple(poles),
                             "zeta": zeta, "wn_rad_s": wn, "p3_rad_s": p3})


def lqr_matrices(model, *, dt: float | None = None):
    """Discrete (A, B, state names) of the balance model at ``dt`` with delay states."""
    dt = model.dt_s if dt is None else dt
    a2 = model.a ** 2
    if model.drive == "speed":
        tau, c, g = model.tau_e_s, model.c_prime, model.drive_gain
        ac = np.array([[0, 1, 0, 0], [a2, 0, c / tau, 0], [0, 0, -1 / tau, 0], [0, 0, 1, 0]],
                      dtype=float)
        bc = np.array([0.0, -c * g / tau, g / tau, 0.0])
        names = ["tilt", "tilt_rate", "wheel_speed", "wheel_angle"]
    else:
        ac = np.array([[0.0, 1.0], [a2, 0.0]])
        bc = np.array([0.0, -model.c_prime])
        names = ["tilt", "tilt_rate"]
    n = len(names)
    big = np.zeros((n + 1, n + 1))
    big[:n, :n], big[:n, n] = ac * dt, bc * dt
    e = linalg.expm(big)
    phi, gam = e[:n, :n], e[:n, n]
    d = model.delay_samples if abs(dt - model.dt_s) < 1e-12 else int(round(model.delay_s / dt))
    if d == 0:
        return phi, gam.reshape(-1, 1), tuple(names)
    a_d = np.zeros((n + d, n + d))
    a_d[:n, :n], a_d[:n, n] = phi, gam          # x[k+1] = Φx + Γ·u[k−d]
    for i in range(d - 1):
        a_d[n + i, n + i + 1] = 1.0             # shift register of past commands
    b_d = np.zeros((n + d, 1))
    b_d[n + d - 1, 0] = 1.0
    names += [f"command[k-{d - i}]" for i in range(d)]
    return a_d, b_d, tuple(names)


@dataclass
class LqrDesign:
    k: np.ndarray                   # u = −k·x
    states: tuple[str, ...]
    a_d: np.ndarray
    b_d: np.ndarray
    q: np.ndarray
    r: float
    dt_s: float
    closed_loop_poles: np.ndarray   # eigenvalues of a_d − b_d·k (z-plane)
    margins: Margins                # loop broken at the plant input
    pid: Proposal                   # nearest PID + wheel-speed trim, with its margins


def design_lqr(model, *, dt: float | None = None, q=None, r: float | None = None,
               max_tilt_rad: float = 0.02, max_tilt_rate_rad_s: float = 0.5,
               max_wheel_rad_s: float = 60.0, max_wheel_angle_rad: float = 30.0,
               max_command: float = 20.0) -> LqrDesign:
    """Discrete LQR; ``q`` (diagonal as a sequence, or a matrix over the physical states)
    and ``r`` default to Bryson's rule with the stated maxima (SI units)."""
    dt = model.dt_s if dt is None else dt
    a_d, b_d, names = lqr_matrices(model, dt=dt)
    n_phys = 4 if model.drive == "speed" else 2
    if q is None:
        maxima = [max_tilt_rad, max_tilt_rate_rad_s, max_wheel_rad_s, max_wheel_angle_rad]
        q = np.diag([1.0 / m ** 2 for m in maxima[:n_phys]])
    q = np.atleast_2d(np.asarray(q, dtype=float))
    if q.shape[0] == 1 and q.shape[1] == n_phys:
        q = np.diag(q[0])
    if q.shape != (n_phys, n_phys):
        raise ValueError(f"q must be {n_phys} weights or a {n_phys}x{n_phys} matrix")
    r = 1.0 / max_command ** 2 if r is None else float(r)
    q_full = np.zeros((len(names), len(names)))
    q_full[:n_phys, :n_phys] = q
    p = linalg.solve_discrete_are(a_d, b_d, q_full, np.array([[r]]))
    k = np.linalg.solve(r + b_d.T @ p @ b_d, b_d.T @ p @ a_d)[0]
    poles = np.linalg.eigvals(a_d - np.outer(b_d, k))
    m = loop_margins(state_feedback_loop(a_d, b_d, k, dt))

    fold = 1.0 + float(np.sum(k[n_phys:]))
    if fold <= 0:
        raise ValueError("delayed-command gains too large to fold into a PID")
    k_pid = np.zeros_like(k)
    k_pid[:n_phys] = k[:n_phys] / fold
    kp, kd = -k_pid[0], -k_pid[1]
    details = {"command_gains": tuple(float(v) for v in k[n_phys:]), "fold": fold}
    notes = "kp = −K̃_θ, kd = −K̃_θ̇ with K̃ = K/(1 + ΣK_u)"
    if model.drive == "speed":
        details.update(trim_kp=float(k_pid[2] / kp), trim_ki=float(k_pid[3] / kp))
        notes += ("; outer wheel-speed trim θ_sp = trim_kp·w + trim_ki·∫w (rad per rad/s, "
                  "rad per rad) with trim_kp = K_w/kp, trim_ki = K_∫w/kp; ki = 0")
    pid_m = loop_margins(state_feedback_loop(a_d, b_d, k_pid, dt))
    pid = Proposal("lqr-nearest-pid", "PID", ParallelPid(kp, 0.0, kd).to_ideal(), True, "",
                   _LQR_SOURCE, notes, margins=pid_m, details=details)
    return LqrDesign(k, names, a_d, b_d, q_full, r, dt, poles, m, pid)
