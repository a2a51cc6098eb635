"""The wheel rig: a DC motor driving a flywheel, a stable speed plant for the simulated board.

SI units: the command is the armature voltage in V (clipped to the supply), wheel speed in
rad/s, current in A, torques in N·m, Ke = Kt in V·s/rad = N·m/A. The motor equations, the
static gain with and without Coulomb friction, and the exact zero-order-hold integration
with stiction: docs/METHODS.md §9.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.linalg import expm

from rigbench.rig.plants.sensing import Encoder, GaussianStream, check_counts_per_rev
from rigbench.rig.plants.stepping import check_push, clip_command, count_substeps

__all__ = ["WheelParams", "WheelRig"]

_REV = 2.0 * math.pi


@dataclass(frozen=True)
class WheelParams:
    """Motor and flywheel figures (SI units; our own invented demo rig by default).

    Demo figures: a 12 V motor, R = 1.5 Ω, L = 2 mH (electrical time constant L/R ≈
    1.3 ms), Kt = Ke = 0.025 N·m/A, rotor + flywheel J = 2.0e-4 kg·m², so the mechanical
    time constant J·R/(Kt² + R·b) ≈ 0.47 s and the static gain Kt/(Kt² + R·b) ≈ 39 rad/s
    per V (≈ 6.2 rev/s per V, ≈ 75 rev/s at 12 V unloaded). Coulomb friction 1.5 mN·m
    breaks away at R·Tc/Kt = 0.09 V.
    """

    supply_voltage_V: float = 12.0
    resistance_ohm: float = 1.5
    inductance_H: float = 2.0e-3
    torque_constant_Nm_A: float = 0.025      # also the back-EMF constant, V·s/rad
    inertia_kgm2: float = 2.0e-4             # rotor + flywheel
    viscous_friction_Nms_rad: float = 1.0e-5
    coulomb_friction_Nm: float = 1.5e-3
    speed_noise_rad_s: float = 0.05 * _REV   # RMS, on top of encoder quantisation
    current_noise_A: float = 0.005           # RMS
    counts_per_rev: int = 4096               # 1024 lines in quadrature; 0 = no quantisation

    def __post_init__(self) -> None:
        for name in ("supply_voltage_V", "resistance_ohm", "inductance_H",
                     "torque_constant_Nm_A", "inertia_kgm2"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v > 0.0):
                raise ValueError(f"WheelParams.{name} must be finite and > 0, got {v}")
        for name in ("viscous_friction_Nms_rad", "coulomb_friction_Nm", "speed_noise_rad_s",
                     "current_noise_A"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v >= 0.0):
                raise ValueError(f"WheelParams.{name} must be finite and >= 0, got {v}")
        check_counts_per_rev(self.counts_per_rev)

    @property
    def electrical_time_constant_s(self) -> float:
        """L/R (s)."""
        return self.inductance_H / self.resistance_ohm

    @property
    def mechanical_time_constant_s(self) -> float:
        """J·R/(Kt·Ke + R·b) (s), the slow pole when L/R is small."""
        kt = self.torque_constant_Nm_A
        return self.inertia_kgm2 * self.resistance_ohm / (kt * kt + self.resistance_ohm
                                                          * self.viscous_friction_Nms_rad)

    @property
    def static_gain_rad_s_per_V(self) -> float:
        """Kt/(Kt·Ke + R·b): steady speed per volt without Coulomb friction."""
        kt = self.torque_constant_Nm_A
        return kt / (kt * kt + self.resistance_ohm * self.viscous_friction_Nms_rad)


class WheelRig:
    """Motor + flywheel plant; command = armature voltage (V), output wheel speed.

    ``sensors()``: ``wheel_rad_s`` (encoder count difference over ``dt_s`` plus noise),
    ``wheel_angle_rad`` (encoder count) and ``current_A`` (noisy). ``noise`` scales the
    random noise (0: none; encoder quantisation stays). ``push(torque_Nm, duration_s)``
    applies a load torque to the wheel.
    """

    def __init__(self, params: WheelParams | None = None, *, rng: np.random.Generator,
                 noise: float = 1.0, dt_s: float = 0.002, max_substep_s: float = 0.0005) -> None:
        p = WheelParams() if params is None else params
        if not isinstance(p, WheelParams):
            raise ValueError("params must be a WheelParams")
        substeps = count_substeps(noise=noise, dt_s=dt_s, max_substep_s=max_substep_s)
        self.params = p
        self.noise = float(noise)
        self.dt_s = float(dt_s)
        self.substeps = substeps
        h = self.dt_s / self.substeps
        self.input_limits: tuple[float, float] = (-p.supply_voltage_V, p.supply_voltage_V)
        self._gauss = GaussianStream(rng)
        self._encoder = Encoder(p.counts_per_rev, self.dt_s)
        # exact ZOH over one substep for x = [i, ω, angle], inputs [u, load torque]
        R, L, kt, J, b = (p.resistance_ohm, p.inductance_H, p.torque_constant_Nm_A,
                          p.inertia_kgm2, p.viscous_friction_Nms_rad)
        a = np.array([[-R / L, -kt / L, 0.0], [kt / J, -b / J, 0.0], [0.0, 1.0, 0.0]])
        bm = np.array([[1.0 / L, 0.0], [0.0, 1.0 / J], [0.0, 0.0]])
        m = np.zeros((5, 5))
        m[:3, :3], m[:3, 3:] = a, bm
        e = expm(m * h)
        self._phi = e[:3, :3].tolist()
        self._gam = e[:3, 3:].tolist()
        # stopped wheel: only the current moves, L·di/dt = u − R·i
        self._stuck_decay = math.exp(-h * R / L)
        self.reset()

    def reset(self) -> None:
        """Wheel at rest, no current, no load, encoder re-latched."""
        self._i = 0.0
        self._w = 0.0
        self._ang = 0.0
        self._u = 0.0
        self._load_Nm = 0.0
        self._load_left = 0
        self._time_s = 0.0
        self._encoder.reset(0.0)
        self._measure()

    def push(self, torque_Nm: float, duration_s: float) -> None:
        """Apply a load torque on the wheel for ``duration_s`` from now (replaces any push).

        Rounded to whole substeps.
        """
        check_push(torque_Nm, duration_s)
        self._load_Nm = float(torque_Nm)
        self._load_left = round(duration_s * self.substeps / self.dt_s)

    def step(self, command: float) -> None:
        """Hold armature voltage ``command`` (V, clipped to the supply) for ``dt_s``."""
        u = clip_command(command, self.input_limits)
        p = self.params
        kt, tc, R = p.torque_constant_Nm_A, p.coulomb_friction_Nm, p.resistance_ohm
        (p00, p01, p02), (p10, p11, p12), (p20, p21, p22) = self._phi
        (g00, g01), (g10, g11), (g20, g21) = self._gam
        i, w, ang = self._i, self._w, self._ang
        for _ in range(self.substeps):
            load = 0.0
            if self._load_left > 0:
                load = self._load_Nm
                self._load_left -= 1
            if w == 0.0 and tc > 0.0:
                drive = kt * i + load
                if abs(drive) <= tc:
                    d = self._stuck_decay
                    i = d * i + (1.0 - d) * u / R
                    continue
                fric = -math.copysign(tc, drive)
            else:
                fric = -math.copysign(tc, w)
            tq = load + fric
            i, w_new, ang = (p00 * i + p01 * w + p02 * ang + g00 * u + g01 * tq,
                             p10 * i + p11 * w + p12 * ang + g10 * u + g11 * tq,
                             p20 * i + p21 * w + p22 * ang + g20 * u + g21 * tq)
            if tc > 0.0 and (w_new * fric > 0.0):
                # friction carried the wheel through zero: it stops there
                w_new = 0.0
            w = w_new
        self._i, self._w, self._ang = i, w, ang
        self._u = u
        self._time_s += self.dt_s
        self._measure()

    def _measure(self) -> None:
        p = self.params
        n = self.noise
        g = self._gauss
        angle, speed = self._encoder.read(self._ang)
        self._sensors = {
            "wheel_rad_s": speed + n * p.speed_noise_rad_s * g.next(),
            "wheel_angle_rad": angle,
            "current_A": self._i + n * p.current_noise_A * g.next(),
        }

    def sensors(self) -> dict[str, float]:
        """What the board measures at the end of the last step (SI units)."""
        return dict(self._sensors)

    def truth(self) -> dict[str, float]:
        """The exact state (no noise)."""
        return {
            "wheel_rad_s": self._w,
            "wheel_angle_rad": self._ang,
            "current_A": self._i,
            "voltage_V": self._u,
            "load_Nm": self._load_Nm if self._load_left > 0 else 0.0,
            "time_s": self._time_s,
        }
