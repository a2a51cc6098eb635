"""A feedback loop as numbers: plant model, PID controller, loop transfer, simulation.

- :class:`PlantModel`: continuous transfer function num(s)/den(s) (descending powers of s)
  times e^{−s·delay_s}, from controller output to measurement.
- :class:`LoopController`: parallel PID C = kp + ki/s + kd·s/(1 + tf_s·s), continuous or
  discrete. Discrete (``h_s`` given) it is the usual board implementation, stated here so
  margins predict what the board runs:
      I[k] = I[k−1] + ki·h·e[k]                        (backward Euler integral)
      D[k] = (tf·D[k−1] + kd·(e[k] − e[k−1]))/(tf + h)  (backward Euler filtered derivative)
      u[k] = kp·e[k] + I[k] + D[k], applied ``delay_samples`` samples later.
  Derivative on the measurement instead of the error gives the same loop transfer.
  ``direct_acting`` is the board's tilt-loop convention e = measurement − set-point (the
  loop then sees −C·P); the default is e = set-point − measurement.
- :class:`LoopTransfer`: L = num/den (in s, with e^{−s·delay_s}; or in z when ``h_s``).
  A discrete loop uses the exact zero-order-hold equivalent of the plant, dead time
  included (integer and fractional part; Åström & Wittenmark, Computer-Controlled Systems,
  ch. 2), so its closed-loop poles are exact. Common factors at s = 0 (z = 1) between
  controller and plant are cancelled: in the speed-drive balance loop that mode is the
  wheel-speed drift, which the tilt loop neither sees nor controls (the outer loop does).
- :func:`state_feedback_loop`: the loop broken at the plant input for u = −K·x.
- :func:`simulate_disturbance`: step or pulse disturbance on the closed loop.

Must not import: rigbench.link, rigbench.ui, rigbench.rig, serial, textual, control.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg, signal

__all__ = ["PlantModel", "LoopController", "LoopTransfer", "loop_transfer",
           "discretise_plant", "state_feedback_loop", "simulate_disturbance",
           "DisturbanceResponse", "as_plant"]


def _trim(p) -> np.ndarray:
    p = np.atleast_1d(np.asarray(p, dtype=float))
    nz = np.flatnonzero(np.abs(p) > 0)
    return p[nz[0]:] if len(nz) else np.zeros(1)


def _add(n1, d1, n2, d2):
    return np.polyadd(np.polymul(n1, d2), np.polymul(n2, d1)), np.polymul(d1, d2)


@dataclass(frozen=True)
class PlantModel:
    """num(s)/den(s)·e^{−s·delay_s}, descending powers of s."""

    num: tuple
    den: tuple
    delay_s: float = 0.0

    def __post_init__(self):
        object.__setattr__(self, "num", tuple(float(x) for x in _trim(self.num)))
        object.__setattr__(self, "den", tuple(float(x) for x in _trim(self.den)))
        if not any(self.den) or len(self.num) > len(self.den) or self.delay_s < 0:
            raise ValueError("plant must be proper with a non-zero denominator and delay >= 0")

    def response(self, omega_rad_s) -> np.ndarray:
        s = 1j * np.asarray(omega_rad_s, dtype=float)
        return np.polyval(self.num, s) / np.polyval(self.den, s) * np.exp(-s * self.delay_s)

    def open_loop_unstable_poles(self) -> int:
        return int(np.sum(np.roots(self.den).real > 0))


def as_plant(plant) -> PlantModel:
    """A PlantModel, or anything with a ``plant_model()`` method (e.g. a BalanceModel)."""
    if isinstance(plant, PlantModel):
        return plant
    if hasattr(plant, "plant_model"):
        return plant.plant_model()
    raise TypeError(f"not a plant model: {type(plant).__name__}")


@dataclass(frozen=True)
class LoopController:
    kp: float
    ki: float = 0.0
    kd: float = 0.0
    tf_s: float = 0.0               # derivative filter time constant
    h_s: float | None = None        # sample time; None = continuous
    delay_samples: int = 0          # computational delay (discrete only)
    direct_acting: bool = False     # e = measurement − set-point

    def __post_init__(self):
        if self.h_s is None and self.delay_samples:
            raise ValueError("delay_samples needs a sample time h_s")
        if (self.h_s is not None and self.h_s <= 0) or self.tf_s < 0 or self.delay_samples < 0:
            raise ValueError("h_s > 0, tf_s >= 0, delay_samples >= 0")

    def rational(self) -> tuple[np.ndarray, np.ndarray]:
        """C as num/den in s (continuous) or z (discrete), computational delay included."""
        n, d = np.array([self.kp]), np.array([1.0])
        h, tf = self.h_s, self.tf_s
        if h is None:
            if self.ki:
                n, d = _add(n, d, [self.ki], [1.0, 0.0])
            if self.kd:
                n, d = _add(n, d, [self.kd, 0.0], [tf, 1.0] if tf else [1.0])
        else:
            if self.ki:
                n, d = _add(n, d, [self.ki * h, 0.0], [1.0, -1.0])
            if self.kd:
                n, d = _add(n, d, [self.kd, -self.kd], [tf + h, -tf])
            d = np.polymul(d, np.r_[1.0, np.zeros(self.delay_samples)])
        return _trim(n), _trim(d)

    def response(self, omega_rad_s) -> np.ndarray:
        """C(jω) (C(e^{jωh}) when discrete), without the direct-acting sign."""
        w = np.asarray(omega_rad_s, dtype=float)
        x = 1j * w if self.h_s is None else np.exp(1j * w * self.h_s)
        n, d = self.rational()
        return np.polyval(n, x) / np.polyval(d, x)


@dataclass(frozen=True)
class LoopTransfer:
    """L = num/den in s (times e^{−s·delay_s}) or in z when ``h_s`` is set."""

    num: np.ndarray
    den: np.ndarray
    delay_s: float = 0.0
    h_s: float | None = None

    def response(self, omega_rad_s) -> np.ndarray:
        w = np.asarray(omega_rad_s, dtype=float)
        if self.h_s is None:
            s = 1j * w
            return np.polyval(self.num, s) / np.polyval(self.den, s) * np.exp(-s * self.delay_s)
        z = np.exp(1j * w * self.h_s)
        return np.polyval(self.num, z) / np.polyval(self.den, z)


def _zoh_integrals(a, b, t):
    """(e^{At}, ∫0^t e^{Av} dv B) by one matrix exponential."""
    n, m = b.shape
    big = np.zeros((n + m, n + m))
    big[:n, :n], big[:n, n:] = a * t, b * t
    e = linalg.expm(big)
    return e[:n, :n], e[:n, n:]


def discretise_plant(plant: PlantModel, h_s: float):
    """Exact ZOH state-space of a plant with dead time τ = m·h + f, 0 <= f < h.

    Returns (phi, gamma0, gamma1, c, d, m, frac) with
    x[k+1] = phi x[k] + gamma0 u[k−m] + gamma1 u[k−m−1],
    y[k] = c x[k] + d u[k − m − (1 if frac > 0 else 0)].
    """
    a, b, c, d = signal.tf2ss(plant.num, plant.den)
    m = int(np.floor(plant.delay_s / h_s + 1e-9))
    f = plant.delay_s - m * h_s
    if f < 1e-9 * h_s:
        f = 0.0
    phi, gam = _zoh_integrals(a, b, h_s)
    if f == 0.0:
        g0, g1 = gam, np.zeros_like(gam)
    else:
        e_hf, g0 = _zoh_integrals(a, b, h_s - f)
        g1 = e_hf @ _zoh_integrals(a, b, f)[1]
    return phi, g0, g1, c, d, m, f


def _plant_z(plant: PlantModel, h_s: float) -> tuple[np.ndarray, np.ndarray]:
    phi, g0, g1, c, d, m, f = discretise_plant(plant, h_s)
    dd = float(d[0, 0]) if d.size else 0.0
    n0, den = signal.ss2tf(phi, g0, c, np.array([[dd if f == 0 else 0.0]]))
    n1, _ = signal.ss2tf(phi, g1, c, np.array([[dd if f else 0.0]]))
    num = np.polyadd(np.polymul(n0[0], [1.0, 0.0]), n1[0])
    return _trim(num), np.polymul(den, np.r_[1.0, np.zeros(m + 1)])


def _cancel(num, den, root: float):
    """Divide num and den by (x − root) while both vanish there."""
    for _ in range(4):
        if len(num) < 2 or len(den) < 2:
            break
        sn = np.sum(np.abs(num)) * 1e-9
        sd = np.sum(np.abs(den)) * 1e-9
        if abs(np.polyval(num, root)) > sn or abs(np.polyval(den, root)) > sd:
            break
        num = np.polydiv(num, [1.0, -root])[0]
        den = np.polydiv(den, [1.0, -root])[0]
    return _trim(num), _trim(den)


def loop_transfer(controller: LoopController, plant) -> LoopTransfer:
    """L = ±C·P for negative feedback (sign − for a direct-acting controller)."""
    plant = as_plant(plant)
    cn, cd = controller.rational()
    sign = -1.0 if controller.direct_acting else 1.0
    if controller.h_s is None:
        num, den = np.polymul(cn, plant.num) * sign, np.polymul(cd, plant.den)
        num, den = _cancel(num, den, 0.0)
        return LoopTransfer(num, den, plant.delay_s, None)
    pn, pd = _plant_z(plant, controller.h_s)
    num, den = np.polymul(cn, pn) * sign, np.polymul(cd, pd)
    num, den = _cancel(num, den, 1.0)
    num, den = _cancel(num, den, 0.0)
    return LoopTransfer(num, den, 0.0, controller.h_s)


def state_feedback_loop(a_d, b_d, k, h_s: float) -> LoopTransfer:
    """Loop broken at the plant input for x[k+1] = A x + B u, u = −K x: L(z) = K(zI−A)^{-1}B.

    1 + L(z) = det(zI − A + BK)/det(zI − A), so the closed-loop poles are exact.
    """
    a_d = np.atleast_2d(a_d)
    num, den = signal.ss2tf(a_d, np.reshape(b_d, (-1, 1)), np.reshape(k, (1, -1)), [[0.0]])
    num, den = _cancel(_trim(num[0]), _trim(den), 0.0)
    return LoopTransfer(num, den, 0.0, h_s)


@dataclass(frozen=True)
class DisturbanceResponse:
    t_s: np.ndarray
    y: np.ndarray            # plant output (measurement before output disturbance)
    u: np.ndarray            # controller output
    disturbance: np.ndarray


def simulate_disturbance(controller: LoopController, plant, *, t_end_s: float,
                         kind: str = "step", amplitude: float = 1.0, width_s: float = 0.0,
                         start_s: float = 0.0, at: str = "input",
                         dt_s: float | None = None) -> DisturbanceResponse:
    """Closed-loop response to a disturbance (set-point 0), exact ZOH plant with dead time.

    ``kind`` 'step' or 'pulse' (of ``width_s``), starting at ``start_s``; ``at`` 'input'
    (added to the controller output: a load) or 'output' (added to the measurement). A
    discrete controller runs at its own h_s; a continuous one is run at ``dt_s`` (default
    t_end_s/20000) in the discrete form of LoopController.
    """
    if kind not in ("step", "pulse") or at not in ("input", "output"):
        raise ValueError("kind is 'step' or 'pulse'; at is 'input' or 'output'")
    plant = as_plant(plant)
    h = controller.h_s or dt_s or t_end_s / 20000.0
    ctrl = controller if controller.h_s else LoopController(
        controller.kp, controller.ki, controller.kd, controller.tf_s, h, 0,
        controller.direct_acting)
    phi, g0, g1, c, d, m, f = discretise_plant(plant, h)
    dd = float(d[0, 0]) if d.size else 0.0
    lag_d = m + (1 if f else 0)
    if dd and lag_d == 0:
        raise ValueError("algebraic loop: biproper plant without dead time")
    ac, bc, cc, dc = signal.tf2ss(*ctrl.rational())
    n = int(round(t_end_s / h)) + 1
    t = np.arange(n) * h
    dist = np.where(t >= start_s - 1e-12, amplitude, 0.0)
    if kind == "pulse":
        dist[t >= start_s + width_s - 1e-12] = 0.0
    sign = 1.0 if ctrl.direct_acting else -1.0
    x = np.zeros(phi.shape[0])
    xc = np.zeros(ac.shape[0])
    hist = np.zeros(n + m + 2)  # plant inputs, offset by m + 2 so negative indices read 0
    y = np.empty(n)
    u = np.empty(n)
    c0, g0v, g1v = c[0], g0[:, 0], g1[:, 0]
    bcv, ccv, dcv = bc[:, 0], cc[0] if cc.size else np.zeros(0), float(dc[0, 0])
    for k in range(n):
        yk = float(c0 @ x) + dd * hist[k + m + 2 - lag_d]
        meas = yk + (dist[k] if at == "output" else 0.0)
        e = sign * meas
        uk = float(ccv @ xc) + dcv * e if ac.size else dcv * e
        if ac.size:
            xc = ac @ xc + bcv * e
        hist[k + m + 2] = uk + (dist[k] if at == "input" else 0.0)
        x = phi @ x + g0v * hist[k + 2] + g1v * hist[k + 1]
        y[k], u[k] = yk, uk
    return DisturbanceResponse(t, y, u, dist)
