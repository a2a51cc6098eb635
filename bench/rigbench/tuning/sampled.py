"""Sampled (discrete-time) systems in state space: exact zero-order-hold plants with dead
time, the board's PID as it runs, and their frequency response.

Why state space: at 500 Hz a lag of 1 s puts a pole at z = 0.998 and an integrator at
z = 1; polynomials in z carrying such roots lose most of their digits (a 4-fold root at
0.998 is known to about (1e-16)^(1/4) ≈ 1e-4 from its coefficients, 5% of 1 − z). The
matrices of a state-space model keep the information: Φ = e^{Ah} is exact to rounding.

- :class:`SampledSystem`: x[k+1] = A x[k] + B w[k], y[k] = C x[k] + D w[k], sample time
  ``h_s``, named inputs and outputs, and a whole number of samples of dead time on each
  input (w_j[k] = u_j[k − input_delays[j]]). The dead time is kept apart from the states
  so a loop can take it out as the exact factor z^−m (rigbench.tuning.interconnect).
- :func:`sample_ss` / :func:`sample_tf`: exact ZOH sampling of a continuous plant whose
  input j has dead time τ_j = m_j·h + f_j, 0 <= f_j < h. The m_j whole samples become
  ``input_delays``; the fraction f_j is the standard two-input construction (Åström &
  Wittenmark, *Computer-Controlled Systems*, 3rd ed. 1997, §2.3 "sampling a system with a
  time delay"): over one period the held input is w[k−1] for the first f seconds and
  w[k] for the rest, so x[k+1] = Φx + Γ0·w[k] + Γ1·w[k−1] with
  Γ0 = ∫0^{h−f} e^{Av}dv·B, Γ1 = e^{A(h−f)}·∫0^f e^{Av}dv·B, and w[k−1] is one more state.
  Every integral comes from one matrix exponential of a block matrix (Van Loan 1978,
  "Computing integrals involving the matrix exponential", IEEE TAC 23(3)). A direct
  feed-through D is read as the board reads it, by the sample taken just before the
  period's command is written: y[k] = C·x[k] + D·u[k − m − 1] (so a biproper plant never
  closes an algebraic loop).
- :func:`board_pid`: the PID of bench/rigbench/rig/firmware/control.py and
  protocol/board-c/src/rb_control.c (PROTOCOL.md §5.4) as a system from (measurement,
  set-point[, rate]) to the command, linear part only (output limit and anti-windup
  ignored): e = σ·(y − r), σ = +1 for action=direct, −1 for reverse;
      I[k] = I[k−1] + ki·h·e[k]                         (backward Euler, stored as a sum)
      v[k] = a·v[k−1] + (1 − a)·(y[k] − y[k−1])/h,  a = tf/(tf + h)   (or the rate signal)
      u[k] = kp·e[k] + I[k] + σ·kd·v[k]                 (derivative on the measurement)
  The command computed from the samples at t_k is applied at t_k, in the same period: the
  board reads its sensors, runs the loops and writes the output in one step (rb_step;
  SimBoard.step holds it over [t_k, t_k+1)). The time the board takes between reading and
  writing is a dead time to add to the plant's (``latency_s`` of LoopController).
- :class:`FrequencyEvaluator`: C(zI − A)^{-1}B + D at many z after one unitary reduction
  of A to triangular (complex Schur) form, each z one back substitution — the idea of
  Laub (1981), "Efficient multivariable frequency response computations", IEEE TAC 26(2),
  who uses Hessenberg form; never a polynomial in z.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import linalg, signal

__all__ = ["SampledSystem", "sample_ss", "sample_tf", "board_pid", "with_delays",
           "FrequencyEvaluator"]


def _mat(x, rows: int, cols: int) -> np.ndarray:
    return np.asarray(x, dtype=float).reshape(rows, cols)


@dataclass(frozen=True)
class SampledSystem:
    """x[k+1] = A x + B w, y = C x + D w with w_j[k] = u_j[k − input_delays[j]]."""

    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: np.ndarray
    h_s: float
    inputs: tuple
    outputs: tuple
    input_delays: tuple = field(default=())

    def __post_init__(self):
        n = np.asarray(self.a).shape[0] if np.size(self.a) else 0
        m, p = len(self.inputs), len(self.outputs)
        object.__setattr__(self, "a", _mat(self.a, n, n))
        object.__setattr__(self, "b", _mat(self.b, n, m))
        object.__setattr__(self, "c", _mat(self.c, p, n))
        object.__setattr__(self, "d", _mat(self.d, p, m))
        delays = tuple(int(k) for k in self.input_delays) or (0,) * m
        object.__setattr__(self, "input_delays", delays)
        object.__setattr__(self, "inputs", tuple(self.inputs))
        object.__setattr__(self, "outputs", tuple(self.outputs))
        if not self.h_s > 0:
            raise ValueError(f"h_s must be > 0, got {self.h_s}")
        if len(delays) != m or any(k < 0 for k in delays):
            raise ValueError("input_delays: one whole number >= 0 per input")
        for names, what in ((self.inputs, "input"), (self.outputs, "output")):
            if len(set(names)) != len(names):
                raise ValueError(f"{what} names must be distinct: {names}")

    @property
    def n_states(self) -> int:
        return self.a.shape[0]


def with_delays(sys: SampledSystem, keep: dict | None = None) -> SampledSystem:
    """The same system with its input dead times turned into shift-register states,
    except ``keep[input] `` samples of input ``input`` left as dead time."""
    keep = keep or {}
    n, m = sys.n_states, len(sys.inputs)
    own = [sys.input_delays[j] - int(keep.get(name, 0)) for j, name in enumerate(sys.inputs)]
    if any(k < 0 for k in own):
        raise ValueError("cannot keep more dead time than an input has")
    total = n + sum(own)
    a = np.zeros((total, total))
    b = np.zeros((total, m))
    c = np.zeros((sys.c.shape[0], total))
    a[:n, :n], c[:, :n] = sys.a, sys.c
    d = np.zeros_like(sys.d)
    pos = n
    for j, k in enumerate(own):
        if k == 0:
            b[:n, j], d[:, j] = sys.b[:, j], sys.d[:, j]
            continue
        # registers pos .. pos+k−1 hold u[k−1] … u[k−k]; the oldest drives the system
        b[pos, j] = 1.0
        for i in range(k - 1):
            a[pos + i + 1, pos + i] = 1.0
        last = pos + k - 1
        a[:n, last], c[:, last] = sys.b[:, j], sys.d[:, j]
        pos += k
    delays = tuple(int(keep.get(name, 0)) for name in sys.inputs)
    return SampledSystem(a, b, c, d, sys.h_s, sys.inputs, sys.outputs, delays)


def _van_loan(a: np.ndarray, b: np.ndarray, t: float) -> tuple[np.ndarray, np.ndarray]:
    """(e^{At}, ∫0^t e^{Av} dv·B) from one matrix exponential."""
    n, m = b.shape
    big = np.zeros((n + m, n + m))
    big[:n, :n], big[:n, n:] = a * t, b * t
    e = linalg.expm(big)
    return e[:n, :n], e[:n, n:]


def sample_ss(a, b, c, d, h_s: float, *, delays_s=None, inputs=None, outputs=None,
              rate_outputs=None) -> SampledSystem:
    """Exact ZOH sampling at ``h_s`` (s) of dx/dt = Ax + Bu(t − τ), y = Cx + Du(t − τ),
    τ = ``delays_s[j]`` (s) on input j (see the module docstring).

    ``rate_outputs``: {name: output index i}: also output dy_i/dt = C_i·A·x + C_i·B·u(t − τ)
    sampled at t_k (a rate sensor, e.g. a gyro on a tilt); needs D_i = 0.
    """
    a = np.atleast_2d(np.asarray(a, dtype=float))
    n = a.shape[0] if a.size else 0
    b = np.asarray(b, dtype=float).reshape(n, -1) if n else np.zeros((0, np.shape(d)[-1]))
    m = b.shape[1]
    c = np.asarray(c, dtype=float).reshape(-1, n) if n else np.zeros((np.shape(d)[0], 0))
    d = np.asarray(d, dtype=float).reshape(c.shape[0], m)
    inputs = tuple(inputs) if inputs is not None else tuple(f"u{j}" for j in range(m))
    outputs = list(outputs) if outputs is not None else [f"y{i}" for i in range(c.shape[0])]
    delays_s = np.zeros(m) if delays_s is None else np.broadcast_to(
        np.asarray(delays_s, dtype=float), (m,))
    if np.any(delays_s < 0) or not np.all(np.isfinite(delays_s)):
        raise ValueError("dead times must be finite and >= 0")
    if not (np.isfinite(h_s) and h_s > 0):
        raise ValueError(f"h_s must be > 0, got {h_s}")
    for name, i in (rate_outputs or {}).items():
        if abs(d[i]).max(initial=0.0) > 0:
            raise ValueError(f"rate output {name!r}: the output it differentiates has a "
                             "direct feed-through (its rate would be impulsive)")
        c = np.vstack([c, c[i] @ a])
        d = np.vstack([d, c[i] @ b])
        outputs.append(name)
    if n:  # balance A (diagonal similarity) so e^{Ah} of badly scaled realisations is exact
        a, (scale, _) = linalg.matrix_balance(a, permute=False, separate=True)
        b, c = b / scale[:, None], c * scale[None, :]
    whole = np.floor(delays_s / h_s + 1e-9).astype(int)
    frac = delays_s - whole * h_s
    frac[frac < 1e-9 * h_s] = 0.0
    phi, gam = _van_loan(a, b, h_s)
    # an input with a fraction of a sample of dead time, or a direct feed-through, needs
    # w_j[k−1] as a state: the board samples y at t_k before it writes the command of
    # period k, so a feed-through is seen one period late (y = Cx + D·w[k−1])
    fr = [j for j in range(m) if frac[j] > 0 or np.any(d[:, j] != 0)]
    nx = n + len(fr)
    ad = np.zeros((nx, nx))
    bd = np.zeros((nx, m))
    cd = np.zeros((c.shape[0], nx))
    dd = d.copy()
    ad[:n, :n], bd[:n, :], cd[:, :n] = phi, gam, c
    for i, j in enumerate(fr):
        if frac[j] > 0:
            e_hf, g0 = _van_loan(a, b[:, [j]], h_s - frac[j])
            g1 = e_hf @ _van_loan(a, b[:, [j]], frac[j])[1]
            bd[:n, j] = g0[:, 0]
            ad[:n, n + i] = g1[:, 0]
        bd[n + i, j] = 1.0               # the state holds w_j[k−1]
        cd[:, n + i], dd[:, j] = d[:, j], 0.0   # y sees u(t_k − τ) = w_j[k−1]
    return SampledSystem(ad, bd, cd, dd, h_s, inputs, tuple(outputs), tuple(whole))


def sample_tf(num, den, h_s: float, *, delay_s: float = 0.0, input: str = "u",
              output: str = "y", rate_output: str | None = None) -> SampledSystem:
    """Exact ZOH sampling of num(s)/den(s)·e^{−s·delay_s} (descending powers of s)."""
    a, b, c, d = signal.tf2ss(num, den)
    rates = {rate_output: 0} if rate_output else None
    return sample_ss(a, b, c, d, h_s, delays_s=[delay_s], inputs=(input,), outputs=(output,),
                     rate_outputs=rates)


def board_pid(kp: float, ki: float, kd: float, tf_s: float, h_s: float, *,
              direct_acting: bool = False, measure: str = "y", setpoint: str = "r",
              output: str = "u", rate: str | None = None,
              delay_samples: int = 0) -> SampledSystem:
    """The board's PID (module docstring) from (measure, setpoint[, rate]) to ``output``.

    ``direct_acting``: e = measurement − set-point (PROTOCOL.md §5.4 action=direct).
    ``rate``: the derivative acts on this rate signal instead of the sample difference.
    ``delay_samples``: whole samples between computing the command and applying it (0 on
    rigbench boards; for other firmware that writes the output one period late).
    Unused states are left out (no integral state when ki = 0, none for the derivative when
    kd = 0), so the system has no uncontrollable modes of its own.
    """
    if not (h_s > 0 and tf_s >= 0 and delay_samples >= 0):
        raise ValueError("h_s > 0, tf_s >= 0 and delay_samples >= 0 are required")
    sg = 1.0 if direct_acting else -1.0
    a_f = tf_s / (tf_s + h_s)
    names = [measure, setpoint] + ([rate] if rate else [])
    rows_a, rows_b, c_row = [], [], []
    d_row = np.zeros(len(names))
    d_row[:2] += sg * kp * np.array([1.0, -1.0])
    if ki:
        # state I[k−1]; I[k] = I[k−1] + ki·h·e[k] enters u[k]
        rows_a.append({"I": 1.0})
        rows_b.append(sg * ki * h_s * np.r_[1.0, -1.0, [0.0] * (len(names) - 2)])
        c_row.append(("I", 1.0))
        d_row[:2] += sg * ki * h_s * np.array([1.0, -1.0])
    if kd:
        # v[k] = a·v[k−1] + (1 − a)·x[k] with x the raw derivative; u gets σ·kd·v[k]
        if rate:
            raw_b, raw_state = np.r_[0.0, 0.0, 1.0], None
        else:
            raw_b, raw_state = np.r_[1.0 / h_s, 0.0], ("ylast", -1.0 / h_s)
        if a_f > 0:
            entry = {"v": a_f}
            if raw_state:
                entry[raw_state[0]] = (1.0 - a_f) * raw_state[1]
            rows_a.append(entry)
            rows_b.append((1.0 - a_f) * raw_b)
            c_row.append(("v", sg * kd * a_f))
        d_row += sg * kd * (1.0 - a_f) * raw_b
        if raw_state:
            rows_a.append({})                       # y[k−1] ← y[k]
            rows_b.append(np.r_[1.0, 0.0])
            c_row.append(("ylast", sg * kd * (1.0 - a_f) * raw_state[1]))
    order = []
    if ki:
        order.append("I")
    if kd and a_f > 0:
        order.append("v")
    if kd and not rate:
        order.append("ylast")
    n = len(order)
    a = np.zeros((n, n))
    b = np.zeros((n, len(names)))
    c = np.zeros((1, n))
    for i, (entry, brow) in enumerate(zip(rows_a, rows_b)):
        for key, val in entry.items():
            a[i, order.index(key)] = val
        b[i, :len(brow)] = brow
    for key, val in c_row:
        c[0, order.index(key)] += val
    return SampledSystem(a, b, c, d_row.reshape(1, -1), h_s, tuple(names), (output,),
                         (int(delay_samples),) * len(names))


class FrequencyEvaluator:
    """G(z) = C(zI − A)^{-1}B + D of a single-input single-output system at many z."""

    CHUNK = 4096

    def __init__(self, a, b, c, d):
        a = np.atleast_2d(np.asarray(a, dtype=float))
        self.n = a.shape[0] if a.size else 0
        self.d = float(np.asarray(d, dtype=float).reshape(-1)[0])
        if self.n:
            # a diagonal similarity first (badly scaled realisations lose digits), then a
            # unitary one to the complex Schur form T = Zᴴ·A·Z, upper triangular: each z
            # is one back substitution, backward stable without pivoting
            a, (t, _) = linalg.matrix_balance(a, permute=False, separate=True)
            b = np.asarray(b, dtype=float).reshape(self.n) / t
            c = np.asarray(c, dtype=float).reshape(self.n) * t
            tm, zm = linalg.schur(a, output="complex")
            self.t = np.triu(tm)
            self.diag = np.diag(tm).copy()
            self.b = zm.conj().T @ b
            self.c = c @ zm

    def __call__(self, z) -> np.ndarray:
        z = np.atleast_1d(np.asarray(z, dtype=complex))
        if not self.n:
            return np.full(z.shape, complex(self.d))
        out = np.empty(z.shape, dtype=complex)
        flat = z.reshape(-1)
        res = out.reshape(-1)
        for s in range(0, len(flat), self.CHUNK):
            res[s:s + self.CHUNK] = self._solve(flat[s:s + self.CHUNK])
        return out

    def _solve(self, z: np.ndarray) -> np.ndarray:
        # products written out as broadcasts: BLAS calls this small cost more than the sums
        n = self.n
        x = np.empty((n, len(z)), dtype=complex)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            for i in range(n - 1, -1, -1):
                acc = self.b[i]
                if i < n - 1:
                    acc = acc + (self.t[i, i + 1:, None] * x[i + 1:]).sum(axis=0)
                x[i] = acc / (z - self.diag[i])
            return (self.c[:, None] * x).sum(axis=0) + self.d
