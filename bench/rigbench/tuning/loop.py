"""A feedback loop as numbers: plant model, PID controller, loop transfer, simulation.

- :class:`PlantModel`: continuous transfer function num(s)/den(s) (descending powers of s)
  times e^{−s·delay_s}, from controller output to measurement.
- :class:`LoopController`: parallel PID C = kp + ki/s + kd·s/(1 + tf_s·s), continuous or
  sampled. Sampled (``h_s`` given) it is the board's PID exactly as it runs
  (bench/rigbench/rig/firmware/control.py, protocol/board-c/src/rb_control.c, PROTOCOL.md §5.4;
  written out in rigbench.tuning.sampled): backward-Euler integral, derivative on the
  measurement through a first-order filter (backward Euler), the command computed from
  the samples at t_k applied at t_k. ``latency_s`` (the board's time from reading the
  sensors to writing the output) and ``delay_samples`` (firmware that applies the
  command whole periods later; 0 on rigbench boards) add to the plant's dead time.
  ``rate_derivative``: the derivative term reads a rate sensor (a gyro) instead of the
  sample difference. ``direct_acting`` is the board's action=direct, e = measurement −
  set-point (the loop then sees −C·P); the default is e = set-point − measurement.
- :func:`loop_transfer`: a continuous controller gives a :class:`LoopTransfer` (polynomials
  in s, times e^{−s·delay_s}); a sampled one a rigbench.tuning.interconnect.SampledLoop in
  state space (exact zero-order-hold plant with whole and fractional dead time; Åström &
  Wittenmark, Computer-Controlled Systems, §2.3), broken at the plant input. Common
  factors at s = 0 between a continuous controller and plant are cancelled; in a sampled
  loop the same mode (the wheel-speed drift of the speed-drive balance loop, which the
  tilt loop neither sees nor controls — the outer loop does) is taken out of the state
  space and counted.
- :func:`state_feedback_loop`: the loop broken at the plant input for u = −K·x.
- :func:`simulate_disturbance`: step or pulse disturbance on the closed loop.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal

from .interconnect import SampledLoop, close_loops, loop_from_state_feedback
from .sampled import board_pid, sample_ss, sample_tf

__all__ = ["PlantModel", "LoopController", "LoopTransfer", "SampledLoop", "loop_transfer",
           "state_feedback_loop", "simulate_disturbance", "DisturbanceResponse", "as_plant",
           "sampled_blocks"]


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
    delay_samples: int = 0          # whole periods from computing to applying (sampled only)
    direct_acting: bool = False     # e = measurement − set-point
    latency_s: float = 0.0          # sensor read to output write (sampled only)
    rate_derivative: bool = False   # derivative from a rate sensor (sampled only)

    def __post_init__(self):
        if self.h_s is None and (self.delay_samples or self.latency_s or self.rate_derivative):
            raise ValueError("delay_samples, latency_s and rate_derivative need a sample "
                             "time h_s")
        if (self.h_s is not None and self.h_s <= 0) or self.tf_s < 0 or self.delay_samples < 0 \
                or self.latency_s < 0:
            raise ValueError("h_s > 0, tf_s >= 0, delay_samples >= 0, latency_s >= 0")

    @property
    def added_delay_s(self) -> float:
        """Dead time the board adds in front of the plant (latency and whole periods)."""
        return self.latency_s + self.delay_samples * (self.h_s or 0.0)

    def rational(self) -> tuple[np.ndarray, np.ndarray]:
        """C as num/den in s (continuous) or z (sampled, from the error, without the added
        dead time). Low order, so well conditioned; the loop itself is built in state
        space (rigbench.tuning.sampled.board_pid)."""
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
        return _trim(n), _trim(d)

    def response(self, omega_rad_s) -> np.ndarray:
        """C(jω) (C(e^{jωh}) when sampled), without the direct-acting sign or added delay."""
        w = np.asarray(omega_rad_s, dtype=float)
        x = 1j * w if self.h_s is None else np.exp(1j * w * self.h_s)
        n, d = self.rational()
        return np.polyval(n, x) / np.polyval(d, x)


@dataclass(frozen=True)
class LoopTransfer:
    """L = num/den in s (times e^{−s·delay_s}); or in z when ``h_s`` is set (accepted by
    rigbench.tuning.margins, which turns it into state space; loop_transfer never makes one)."""

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


def sampled_blocks(controller: LoopController, plant):
    """(plant, controller) as rigbench.tuning.sampled systems wired by the signals 'u'
    (command), 'y' (measurement), 'r' (set-point, held at 0) and 'rate'."""
    plant = as_plant(plant)
    h = controller.h_s
    if h is None:
        raise ValueError("the controller has no sample time h_s")
    rate = "rate" if controller.rate_derivative and controller.kd else None
    p = sample_tf(plant.num, plant.den, h, delay_s=plant.delay_s + controller.added_delay_s,
                  input="u", output="y", rate_output=rate)
    c = board_pid(controller.kp, controller.ki, controller.kd, controller.tf_s, h,
                  direct_acting=controller.direct_acting, measure="y", setpoint="r",
                  output="u", rate=rate)
    return p, c


def loop_transfer(controller: LoopController, plant):
    """L for negative feedback (sign − for a direct-acting controller): a LoopTransfer in
    s for a continuous controller, a SampledLoop broken at the plant input otherwise."""
    plant = as_plant(plant)
    if controller.h_s is not None:
        return close_loops(sampled_blocks(controller, plant), "u",
                           description="PID loop broken at the plant input")
    cn, cd = controller.rational()
    sign = -1.0 if controller.direct_acting else 1.0
    num, den = np.polymul(cn, plant.num) * sign, np.polymul(cd, plant.den)
    num, den = _cancel(num, den, 0.0)
    return LoopTransfer(num, den, plant.delay_s, None)


def state_feedback_loop(a_d, b_d, k, h_s: float) -> SampledLoop:
    """Loop broken at the plant input for x[k+1] = A x + B u, u = −K x: L(z) = K(zI−A)^{-1}B,
    in state space (the closed-loop poles are the eigenvalues of A − BK)."""
    return loop_from_state_feedback(a_d, b_d, k, h_s)


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
    sampled controller runs at its own h_s as the board runs it (rigbench.tuning.sampled); a
    continuous one is run at ``dt_s`` (default t_end_s/20000) in that sampled form.
    """
    if kind not in ("step", "pulse") or at not in ("input", "output"):
        raise ValueError("kind is 'step' or 'pulse'; at is 'input' or 'output'")
    plant = as_plant(plant)
    h = controller.h_s or dt_s or t_end_s / 20000.0
    ctrl = controller if controller.h_s else LoopController(
        controller.kp, controller.ki, controller.kd, controller.tf_s, h, 0,
        controller.direct_acting)
    _, c = sampled_blocks(ctrl, plant)
    # the load enters the plant itself: the board's latency delays only the command
    a_c, b_c, c_c, d_c = signal.tf2ss(plant.num, plant.den)
    rate = {"rate": 0} if len(c.inputs) == 3 else None
    p = sample_ss(a_c, np.hstack([b_c, b_c]), c_c, np.hstack([d_c, d_c]), h,
                  delays_s=[plant.delay_s + ctrl.added_delay_s, plant.delay_s],
                  inputs=("u", "load"), outputs=("y",), rate_outputs=rate)
    n = int(round(t_end_s / h)) + 1
    t = np.arange(n) * h
    dist = np.where(t >= start_s - 1e-12, amplitude, 0.0)
    if kind == "pulse":
        dist[t >= start_s + width_s - 1e-12] = 0.0
    load = dist if at == "input" else np.zeros(n)
    m_u, m_l = p.input_delays
    x = np.zeros(p.n_states)
    xc = np.zeros(c.n_states)
    u_hist = np.zeros(n + m_u + 1)  # commands, offset by m_u so negative indices read 0
    l_hist = np.r_[np.zeros(m_l), load, 0.0]
    y = np.empty(n)
    u = np.empty(n)
    rate_in = len(c.inputs) == 3
    cc, cd = c.c[0], c.d[0]
    for k in range(n):
        w = np.array([u_hist[k], l_hist[k]])   # the plant inputs after their dead times
        outs = p.c @ x + p.d @ w
        yk = float(outs[0])
        meas = yk + (dist[k] if at == "output" else 0.0)
        cin = np.array([meas, 0.0, float(outs[1])] if rate_in else [meas, 0.0])
        uk = float(cc @ xc + cd @ cin)
        xc = c.a @ xc + c.b @ cin
        u_hist[k + m_u] = uk
        w[0] = u_hist[k]
        x = p.a @ x + p.b @ w
        y[k], u[k] = yk, uk
    return DisturbanceResponse(t, y, u, dist)
