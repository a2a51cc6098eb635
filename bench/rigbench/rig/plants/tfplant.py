"""A linear plant given as a continuous transfer function with dead time, sampled exactly.

G(s) = e^{−sL}·num(s)/den(s), coefficients in descending powers of s, deg num ≤ deg den.
The input is held constant over each step (zero-order hold), so the sampled plant is exact
at the sample instants: no Padé approximation and no rounding of the delay.

Delay: L = d·dt + f with d whole and 0 ≤ f < dt. Over step k (t in [k·dt, (k+1)·dt)) the
delayed input is u[k−d−1] for the first f seconds and u[k−d] for the rest, so with
(A, B, C, D) a state-space form of num/den (``scipy.signal.tf2ss``) and the ZOH pieces from
``scipy.signal.cont2discrete`` over dt − f and over f::

    x[k+1] = Φ·x[k] + Γ0·u[k−d] + Γ1·u[k−d−1]
    Φ = e^{A·dt},  Γ0 = ∫₀^{dt−f} e^{Aσ}dσ·B,  Γ1 = e^{A(dt−f)}·∫₀^{f} e^{Aσ}dσ·B

(Åström & Wittenmark, *Computer-Controlled Systems*, sampling a system with time delay).
The output read after a step is the value just before the next input is applied:
y = C·x[k+1] + D·u[k−d] (the left limit, which matters only when deg num = deg den).
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Sequence

import numpy as np

from rigbench.rig.plants.sensing import GaussianStream

__all__ = ["TransferFunctionPlant"]


def _coefficients(name: str, values: Sequence[float]) -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} must be a sequence of numbers: {exc}") from None
    if arr.ndim != 1 or arr.size == 0:
        raise ValueError(f"{name} must be a non-empty 1-D sequence of coefficients")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} has a non-finite coefficient: {values!r}")
    nz = np.flatnonzero(arr)
    return arr[nz[0]:] if nz.size else np.zeros(1)


class TransferFunctionPlant:
    """Continuous ``num/den`` with dead time ``delay_s``, stepped every ``dt_s``.

    ``sensors()`` gives ``{'y': y + noise·measurement_noise_std·n}`` (n standard normal),
    ``truth()`` ``{'y': y, 'u': input, 'time_s': t}``. Commands are clipped to
    ``input_limits`` (unbounded by default). ``rng`` is needed only when ``noise > 0``.
    """

    def __init__(self, num: Sequence[float], den: Sequence[float], delay_s: float = 0.0,
                 dt_s: float = 0.002, *, rng: np.random.Generator | None = None,
                 noise: float = 0.0, measurement_noise_std: float = 1e-3,
                 input_limits: tuple[float, float] = (-math.inf, math.inf)) -> None:
        num_a = _coefficients("num", num)
        den_a = _coefficients("den", den)
        if not np.any(den_a):
            raise ValueError("den must not be all zeros")
        if num_a.size > den_a.size and np.any(num_a):
            raise ValueError(f"improper transfer function: deg num = {num_a.size - 1} > "
                             f"deg den = {den_a.size - 1}")
        if not (isinstance(delay_s, (int, float)) and math.isfinite(delay_s) and delay_s >= 0):
            raise ValueError(f"delay_s must be finite and >= 0, got {delay_s!r}")
        if not (isinstance(dt_s, (int, float)) and math.isfinite(dt_s) and dt_s > 0):
            raise ValueError(f"dt_s must be finite and > 0, got {dt_s!r}")
        if not (math.isfinite(noise) and noise >= 0.0):
            raise ValueError(f"noise must be finite and >= 0, got {noise}")
        if not (math.isfinite(measurement_noise_std) and measurement_noise_std >= 0.0):
            raise ValueError(f"measurement_noise_std must be finite and >= 0, "
                             f"got {measurement_noise_std}")
        lo, hi = (float(v) for v in input_limits)
        if not lo < hi:
            raise ValueError("input_limits must be (low, high) with low < high, "
                             f"got {input_limits}")
        if noise > 0.0 and rng is None:
            raise ValueError("rng is needed when noise > 0")
        self.num = tuple(num_a.tolist())
        self.den = tuple(den_a.tolist())
        self.delay_s = float(delay_s)
        self.dt_s = float(dt_s)
        self.noise = float(noise)
        self.measurement_noise_std = float(measurement_noise_std)
        self.input_limits: tuple[float, float] = (lo, hi)
        self._gauss = GaussianStream(rng) if rng is not None else None

        # whole and fractional parts of the delay; a fraction within 1e-9·dt of a whole
        # sample is taken as whole, so 0.3 s at 100 Hz is 30 samples, not 29 + 0.99999…
        ratio = self.delay_s / self.dt_s
        d = math.floor(ratio + 1e-9)
        f = (ratio - d) * self.dt_s
        if f < 1e-9 * self.dt_s:
            f = 0.0
        self.delay_samples = d
        self.delay_fraction_s = f

        n = den_a.size - 1
        if n == 0:
            self._phi = np.zeros((0, 0))
            self._g0 = self._g1 = np.zeros(0)
            self._c = np.zeros(0)
            self._d = float(num_a[-1] / den_a[0]) if num_a.size == 1 else 0.0
        else:
            # imported here: scipy.signal costs about a second to import, and only this
            # rig needs it
            from scipy.signal import cont2discrete, tf2ss

            a, b, c, dd = tf2ss(num_a, den_a)
            dd = float(np.asarray(dd).ravel()[0])
            c = np.asarray(c, dtype=float).ravel()
            # cont2discrete returns (Ad, Bd, Cd, Dd, dt)
            phi_a, gam_a = cont2discrete((a, b, c[None, :], [[dd]]), self.dt_s - f,
                                         method="zoh")[:2]
            if f > 0.0:
                phi_b, gam_b = cont2discrete((a, b, c[None, :], [[dd]]), f, method="zoh")[:2]
                self._phi = phi_a @ phi_b
                self._g1 = (phi_a @ gam_b).ravel()
            else:
                self._phi = phi_a
                self._g1 = np.zeros(n)
            self._g0 = np.asarray(gam_a).ravel()
            self._c = c
            self._d = dd
        parts = (self._phi, self._g0, self._g1, self._c, np.array([self._d]))
        if not all(np.isfinite(p).all() for p in parts) or any(
                np.abs(p).max(initial=0.0) > 1e150 for p in parts):
            # coefficients spanning hundreds of decades (num=1e308, den=1e-300,1 …) overflow
            # in the state-space form: the plant would step into NaN at once
            raise ValueError("num/den give a plant whose state-space form is not finite: "
                             "scale the coefficients (they span too many decades)")
        self.order = n
        self.reset()

    def reset(self) -> None:
        """Zero state, zero input history."""
        self._x = np.zeros(self.order)
        # u[k-d-1] … u[k]: the inputs still inside the delay line
        self._u: deque[float] = deque([0.0] * (self.delay_samples + 2),
                                      maxlen=self.delay_samples + 2)
        self._u_now = 0.0
        self._y = 0.0
        self._time_s = 0.0
        self._draw()

    def step(self, command: float) -> None:
        """Hold ``command`` (clipped to ``input_limits``) for ``dt_s``."""
        if not isinstance(command, (int, float, np.floating, np.integer)) \
                or not math.isfinite(command):
            raise ValueError(f"command must be a finite number, got {command!r}")
        lo, hi = self.input_limits
        u = hi if command > hi else (lo if command < lo else float(command))
        buf = self._u
        buf.append(u)
        u0 = buf[1]          # u[k-d]
        u1 = buf[0]          # u[k-d-1]
        if self.order:
            self._x = self._phi @ self._x + self._g0 * u0 + self._g1 * u1
            self._y = float(self._c @ self._x) + self._d * u0
        else:
            self._y = self._d * u0
        self._u_now = u
        self._time_s += self.dt_s
        self._draw()

    def _draw(self) -> None:
        if self._gauss is not None and self.noise > 0.0:
            self._y_meas = self._y + self.noise * self.measurement_noise_std * self._gauss.next()
        else:
            self._y_meas = self._y

    def sensors(self) -> dict[str, float]:
        """The measured output at the end of the last step."""
        return {"y": self._y_meas}

    def truth(self) -> dict[str, float]:
        """The exact output, the last input and the time."""
        return {"y": self._y, "u": self._u_now, "time_s": self._time_s}
