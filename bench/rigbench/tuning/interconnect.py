"""Loops of sampled systems: connect blocks by signal name, break one signal, and get the
loop transfer there in state space (:class:`SampledLoop`).

Convention (negative feedback, as rigbench.tuning.margins): break the signal s — its
producer's output is cut from its readers, a test input v feeds the readers instead — and
let T be the transfer from v to the producer's output. Closing the loop again sets v = s,
so the return difference is 1 − T; the loop transfer is L = −T and the closed loop is
stable when 1 + L has no zeros outside the unit circle (and no hidden mode is unstable).

L(z) = z^−k·R(z): the k whole samples of dead time common to every reader of s are kept as
the exact factor z^−k (``delay_samples``), R = C(zI − A)^{-1}B + D is a small state-space
system (all other dead times are shift-register states in A). So L(e^{jωh}) costs one
small solve per frequency however long the dead time, and the closed-loop state matrix
(:meth:`SampledLoop.closed_loop_matrix`) adds the k registers back only when asked.

Hidden modes: a mode of A that the test input cannot move or the loop output cannot see
is not in L but is a closed-loop pole all the same (the stability tests of
rigbench.tuning.margins_sampled count every eigenvalue of A, so a hidden unstable mode makes
the loop unstable). One at z = 1 is the drift of a controller's integral through a plant
zero at s = 0 (the wheel-speed drift of a speed-driven balance loop, which the outer loop
settles): it is recognised as a pole at z = 1 that stays there whatever the loop gain,
taken out exactly (an orthogonal change of coordinates splits it off) and counted in
``drift_modes``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import linalg

from .sampled import FrequencyEvaluator, with_delays

__all__ = ["SampledLoop", "close_loops", "loop_from_state_feedback"]

AT_ONE = 1e-8         # eigenvalues this close to z = 1 count as at z = 1
_TEST_GAINS = (1.0, 4.31)   # two feedback gains that cannot both leave a real pole at 1


def _count_at_one(a) -> int:
    return int(np.sum(np.abs(np.linalg.eigvals(a) - 1.0) < AT_ONE)) if a.shape[0] else 0


def _hidden_at_one(a, b, c, d) -> int:
    """How many modes at z = 1 no feedback around this loop moves: they stay at 1 in the
    open loop and when the loop is closed with either of two gains (a real closed-loop
    pole at 1 needs L(1) = −1/gain, which cannot hold for both)."""
    n = _count_at_one(a)
    for g in _TEST_GAINS:
        if n == 0:
            break
        if abs(1.0 + g * d) > 1e-9:
            n = min(n, _count_at_one(a - g * (b @ c) / (1.0 + g * d)))
    return n


def _balance(a, b, c):
    """A diagonal change of state coordinates (and one scale for input and output) that
    evens out the rows and columns of [[A, B], [C, 0]]: a loop assembled from a plant
    realised from polynomials in s and a PID with 1/h terms can mix entries of 1e10 and
    1e-8, and a solve with such an A loses digits the transfer function does not need
    to lose. The transfer function is unchanged."""
    n = a.shape[0]
    if not n:
        return a, b, c
    big = np.block([[a, b], [c, np.zeros((1, 1))]])
    _, (t, _) = linalg.matrix_balance(big, permute=False, separate=True)
    tx, tio = t[:n], t[n]
    return a * (tx[None, :] / tx[:, None]), b * (tio / tx[:, None]), c * (tx[None, :] / tio)


def _deflate_at_one(a, b, c, d):
    """Take the hidden modes at z = 1 out (module docstring), one at a time: in an
    orthonormal basis whose first vector is the mode's left eigenvector (nothing drives it)
    or right eigenvector (nothing reads it), the mode is one state that can be dropped.
    A step that would change the loop's response is not taken."""
    n = _hidden_at_one(a, b, c, d)
    probe = np.exp(1j * np.array([0.37, 1.9]))
    ref = FrequencyEvaluator(a, b, c, d)(probe) if n else None
    removed = 0
    for _ in range(n):
        size = a.shape[0]
        m = np.eye(size) - a
        u, sl, _ = np.linalg.svd(np.hstack([m, b]))
        _, sr, vh = np.linalg.svd(np.vstack([m, c]))
        vec = u[:, -1] if sl[-1] <= sr[-1] else vh[-1]
        q, _ = np.linalg.qr(np.column_stack([vec, np.eye(size)]))
        at, bt, ct = q.T @ a @ q, q.T @ b, c @ q
        a2, b2, c2 = at[1:, 1:], bt[1:], ct[:, 1:]
        got = FrequencyEvaluator(a2, b2, c2, d)(probe)
        if not np.allclose(got, ref, rtol=1e-6, atol=1e-12 * np.max(np.abs(ref))):
            break
        a, b, c = a2, b2, c2
        removed += 1
    return a, b, c, removed


@dataclass(frozen=True)
class SampledLoop:
    """L(z) = z^−k·(C(zI − A)^{-1}B + D) with k = ``delay_samples``, sample time ``h_s``."""

    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: float
    h_s: float
    delay_samples: int = 0
    drift_modes: int = 0             # hidden modes at z = 1 taken out (module docstring)
    description: str = ""

    @classmethod
    def build(cls, a, b, c, d, h_s, delay_samples=0, description="") -> "SampledLoop":
        a = np.atleast_2d(np.asarray(a, dtype=float)) if np.size(a) else np.zeros((0, 0))
        n = a.shape[0]
        b = np.asarray(b, dtype=float).reshape(n, 1)
        c = np.asarray(c, dtype=float).reshape(1, n)
        d = float(np.asarray(d).reshape(-1)[0])
        a, b, c = _balance(a, b, c)
        a, b, c, drift = _deflate_at_one(a, b, c, d)
        return cls(a, b, c, d, float(h_s), int(delay_samples), drift, description)

    @property
    def n_states(self) -> int:
        return self.a.shape[0]

    @property
    def lag_s(self) -> float:
        return self.delay_samples * self.h_s

    def evaluator(self) -> FrequencyEvaluator:
        return FrequencyEvaluator(self.a, self.b, self.c, self.d)

    def rational(self, omega_rad_s) -> np.ndarray:
        """R(e^{jωh}): the loop without its whole-sample dead time."""
        w = np.asarray(omega_rad_s, dtype=float)
        return self.evaluator()(np.exp(1j * w * self.h_s))

    def response(self, omega_rad_s) -> np.ndarray:
        """L(e^{jωh})."""
        w = np.asarray(omega_rad_s, dtype=float)
        return self.rational(w) * np.exp(-1j * w * self.lag_s)

    def open_loop_poles(self) -> np.ndarray:
        return np.linalg.eigvals(self.a) if self.n_states else np.zeros(0, dtype=complex)

    def closed_loop_matrix(self, gain: float = 1.0) -> np.ndarray:
        """State matrix of the loop closed with gain factor ``gain`` (v = −gain·R·z^−k v)."""
        n, k = self.n_states, self.delay_samples
        a, b, c, d = self.a, self.b, self.c * gain, self.d * gain
        if k == 0:
            if abs(1.0 + d) < 1e-12:
                raise ValueError("algebraic loop: 1 + D = 0 at the break point")
            return a - (b @ c) / (1.0 + d)
        m = np.zeros((n + k, n + k))
        m[:n, :n] = a
        m[:n, n + k - 1] = b[:, 0]             # R reads v delayed k samples
        m[n, :n] = -c[0]                       # register 1 ← v = −(Cx + D·v[k−k])
        m[n, n + k - 1] += -d
        for i in range(k - 1):
            m[n + i + 1, n + i] = 1.0
        return m


def close_loops(blocks, break_at: str, *, description: str = "") -> SampledLoop:
    """Connect ``blocks`` (SampledSystem) by signal name and break signal ``break_at``.

    Each signal is the output of at most one block; a signal no block produces is an
    external input held at zero (e.g. a fixed set-point). Every block must have the same
    sample time. Returns the loop transfer L at the break (module docstring).
    """
    blocks = list(blocks)
    if not blocks:
        raise ValueError("no blocks to connect")
    h = blocks[0].h_s
    for blk in blocks:
        if not math.isclose(blk.h_s, h, rel_tol=1e-9):
            raise ValueError(f"blocks sampled at different times: {h} s and {blk.h_s} s")
    producer = {}
    for i, blk in enumerate(blocks):
        for j, name in enumerate(blk.outputs):
            if name in producer:
                raise ValueError(f"signal {name!r} is the output of two blocks")
            producer[name] = (i, j)
    if break_at not in producer:
        raise ValueError(f"break point {break_at!r} is not the output of any block")
    readers = [(i, j) for i, blk in enumerate(blocks) for j, nm in enumerate(blk.inputs)
               if nm == break_at]
    if not readers:
        raise ValueError(f"no block reads signal {break_at!r}: nothing to break")
    k = min(blocks[i].input_delays[j] for i, j in readers)
    flat = [with_delays(blk, {break_at: k} if break_at in blk.inputs else None)
            for blk in blocks]
    a = linalg.block_diag(*[f.a for f in flat]) if any(f.n_states for f in flat) \
        else np.zeros((0, 0))
    b = linalg.block_diag(*[f.b for f in flat])
    c = linalg.block_diag(*[f.c for f in flat])
    d = linalg.block_diag(*[f.d for f in flat])
    out_index, pos = {}, 0
    for f in flat:
        for name in f.outputs:
            out_index[name] = pos
            pos += 1
    n_in = b.shape[1]
    conn = np.zeros((n_in, c.shape[0]))      # w = conn·y + e_v·v
    e_v = np.zeros((n_in, 1))
    pos = 0
    for f in flat:
        for name in f.inputs:
            if name == break_at:
                e_v[pos, 0] = 1.0
            elif name in out_index:
                conn[pos, out_index[name]] = 1.0
            pos += 1
    f_mat = np.eye(c.shape[0]) - d @ conn
    if np.linalg.cond(f_mat) > 1e12:
        raise ValueError("algebraic loop: the direct feed-throughs of the blocks close "
                         "a loop with no delay (add the plant's sample of delay)")
    # y = F^{-1}(C x + D e_v v): all block outputs in terms of states and the test input
    cy = np.linalg.solve(f_mat, c)
    dy = np.linalg.solve(f_mat, d @ e_v)
    a_cl = a + b @ conn @ cy
    b_cl = b @ (conn @ dy + e_v)
    row = out_index[break_at]
    # L = −T
    return SampledLoop.build(a_cl, b_cl, -cy[row], -dy[row, 0], h, k,
                             description or f"loop broken at {break_at}")


def loop_from_state_feedback(a_d, b_d, k, h_s: float) -> SampledLoop:
    """Loop broken at the plant input for x[k+1] = A x + B u, u = −K x:
    L(z) = K(zI − A)^{-1}B (the plant's delay registers stay states of A)."""
    a_d = np.atleast_2d(np.asarray(a_d, dtype=float))
    return SampledLoop.build(a_d, np.reshape(b_d, (-1, 1)), np.reshape(k, (1, -1)), 0.0,
                             h_s, 0, "state feedback broken at the plant input")
