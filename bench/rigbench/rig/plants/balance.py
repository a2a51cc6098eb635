"""The balance rig: a reaction-wheel pendulum, full nonlinear, for the simulated board.

SI units throughout: tilt θ and wheel angle φ in rad, speeds in rad/s, torques in N·m,
inertias in kg·m², times in s. The equations of motion, the two drives (``'torque'``: τ in
N·m; ``'speed'``: a wheel-speed set-point in rad/s followed with lag ``driver_lag_s``), the
motor's torque curve and the mechanical stops: docs/METHODS.md §4 and §4.1; the demo
rig's numbers: §6. Fixed-step RK4, ``substeps`` per ``dt_s``, plain ``math``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rigbench.rig.plants.sensing import Encoder, GaussianStream, check_counts_per_rev
from rigbench.rig.plants.stepping import check_push, clip_command, count_substeps

__all__ = ["BalanceParams", "BalanceRig", "DRIVES"]

DRIVES = ("speed", "torque")
_REV = 2.0 * math.pi


@dataclass(frozen=True)
class BalanceParams:
    """Physical and sensor figures of a balance rig (SI units; our own demo rig by default).

    Demo rig (docs/METHODS.md §6, our own invented numbers): body 0.90 kg + wheel 0.30 kg with the
    common centre of mass 85 mm above the pivot, so mgl = 1.2·9.81·0.085 ≈ 1.001 N·m/rad;
    unstable pole √(mgl/Jp) ≈ 9.13 rad/s in torque drive, √(mgl/(Jp+Jw)) ≈ 8.84 rad/s
    with the wheel speed held (speed drive). Sensor biases, the stop angle, the encoder and
    the back-EMF line are our own choices too.
    """

    body_mass_kg: float = 0.90
    wheel_mass_kg: float = 0.30
    com_height_m: float = 0.085          # common centre of mass above the pivot
    body_inertia_kgm2: float = 0.0120    # Jp: about the pivot, all but the wheel's spin
    wheel_inertia_kgm2: float = 8.0e-4   # Jw: wheel spin inertia
    gravity_m_s2: float = 9.81
    wheel_friction_Nms_rad: float = 2.0e-5   # b_w, wheel bearing, on relative speed φ̇
    pivot_friction_Nms_rad: float = 0.0      # b_p, body pivot, on θ̇
    balance_offset_rad: float = math.radians(0.8)   # δ
    torque_limit_Nm: float = 0.30
    stall_torque_Nm: float = 0.90                    # back-EMF line: 0.30 N·m up to 40 rev/s
    free_speed_rad_s: float = 60.0 * _REV            # no torque left at 60 rev/s
    driver_lag_s: float = 0.008                      # speed drive time constant T
    wheel_command_limit_rad_s: float = 50.0 * _REV
    tilt_stop_rad: float = math.radians(25.0)        # math.inf: no stops
    tilt_noise_rad: float = math.radians(0.03)       # accelerometer tilt, RMS
    gyro_noise_rad_s: float = math.radians(0.2)      # RMS
    wheel_speed_noise_rad_s: float = 0.05 * _REV     # RMS, on top of encoder quantisation
    accel_bias_rad: float = math.radians(0.1)
    gyro_bias_rad_s: float = math.radians(0.05)
    imu_height_m: float = 0.0            # IMU above the pivot; > 0 adds r·θ̈ and r·θ̇² errors
    counts_per_rev: int = 4096           # 1024 lines in quadrature; 0 = no quantisation

    def __post_init__(self) -> None:
        positive = ("body_mass_kg", "wheel_mass_kg", "com_height_m", "body_inertia_kgm2",
                    "wheel_inertia_kgm2", "gravity_m_s2", "torque_limit_Nm",
                    "stall_torque_Nm", "free_speed_rad_s", "driver_lag_s",
                    "wheel_command_limit_rad_s", "tilt_stop_rad")
        for name in positive:
            v = getattr(self, name)
            if not v > 0.0:
                raise ValueError(f"BalanceParams.{name} must be > 0, got {v}")
        nonneg = ("wheel_friction_Nms_rad", "pivot_friction_Nms_rad", "tilt_noise_rad",
                  "gyro_noise_rad_s", "wheel_speed_noise_rad_s", "imu_height_m")
        for name in nonneg:
            v = getattr(self, name)
            if not v >= 0.0:
                raise ValueError(f"BalanceParams.{name} must be >= 0, got {v}")
        for name in ("balance_offset_rad", "accel_bias_rad", "gyro_bias_rad_s"):
            if not math.isfinite(getattr(self, name)):
                raise ValueError(f"BalanceParams.{name} must be finite")
        check_counts_per_rev(self.counts_per_rev)

    @property
    def mgl_Nm_rad(self) -> float:
        """Gravity stiffness m·g·l (N·m/rad), m the whole rig's mass."""
        return (self.body_mass_kg + self.wheel_mass_kg) * self.gravity_m_s2 * self.com_height_m

    @property
    def total_inertia_kgm2(self) -> float:
        """Jt = Jp + Jw: the whole rig turning about the pivot as one piece (wheel held)."""
        return self.body_inertia_kgm2 + self.wheel_inertia_kgm2

    @property
    def wheel_share(self) -> float:
        """c = Jw/Jt, the gain of wheel acceleration onto the body in speed drive."""
        return self.wheel_inertia_kgm2 / self.total_inertia_kgm2

    @property
    def torque_drive_pole_rad_s(self) -> float:
        """Unstable tilt pole with the wheel free: √(mgl/Jp) (rad/s)."""
        return math.sqrt(self.mgl_Nm_rad / self.body_inertia_kgm2)

    @property
    def speed_drive_pole_rad_s(self) -> float:
        """Unstable tilt pole with the wheel speed held: √(mgl/Jt) (rad/s)."""
        return math.sqrt(self.mgl_Nm_rad / self.total_inertia_kgm2)

    @property
    def full_torque_speed_rad_s(self) -> float:
        """Wheel speed up to which the full torque limit is available while motoring."""
        return self.free_speed_rad_s * (1.0 - self.torque_limit_Nm / self.stall_torque_Nm)


class BalanceRig:
    """Reaction-wheel pendulum plant (see the module docstring for the model).

    ``step(command)`` holds the command for ``dt_s`` (clipped to ``input_limits``).
    ``sensors()`` returns what the board measures at the end of the step:
    ``accel_tilt_rad`` (accelerometer tilt, biased, noisy), ``gyro_rad_s`` (body rate,
    biased, noisy), ``wheel_rad_s`` (encoder count difference over ``dt_s`` plus noise) and
    ``wheel_angle_rad`` (encoder count). It does not run the tilt filter: the board does,
    with ``ComplementaryFilter``. ``noise`` scales the random noise and the sensor biases
    (0: ideal sensors, encoder quantisation stays). ``truth()`` gives the exact state
    (``torque_Nm`` is the motor torque at the start of the last substep).
    ``push(torque_Nm, duration_s)`` disturbs the body; ``set_state`` places the rig (e.g.
    lifted upright by hand); ``reset()`` returns it to ``initial_tilt_rad`` at rest.
    """

    def __init__(self, params: BalanceParams | None = None, *, drive: str = "speed",
                 rng: np.random.Generator, noise: float = 1.0, dt_s: float = 0.002,
                 max_substep_s: float = 0.002, initial_tilt_rad: float = 0.0) -> None:
        p = BalanceParams() if params is None else params
        if not isinstance(p, BalanceParams):
            raise ValueError("params must be a BalanceParams")
        if drive not in DRIVES:
            raise ValueError(f"drive must be one of {DRIVES}, got {drive!r}")
        substeps = count_substeps(noise=noise, dt_s=dt_s, max_substep_s=max_substep_s)
        if not (math.isfinite(initial_tilt_rad) and abs(initial_tilt_rad) <= p.tilt_stop_rad):
            raise ValueError(f"initial_tilt_rad must lie within the stops, got {initial_tilt_rad}")
        self.params = p
        self.drive = drive
        self.noise = float(noise)
        self.dt_s = float(dt_s)
        self.substeps = substeps
        self._h = self.dt_s / self.substeps
        self.initial_tilt_rad = float(initial_tilt_rad)
        if drive == "speed":
            lim = p.wheel_command_limit_rad_s
        else:
            lim = p.torque_limit_Nm
        self.input_limits: tuple[float, float] = (-lim, lim)
        self._gauss = GaussianStream(rng)
        self._encoder = Encoder(p.counts_per_rev, self.dt_s)
        # constants for the inner loop
        self._mgl = p.mgl_Nm_rad
        self._jp = p.body_inertia_kgm2
        self._jw = p.wheel_inertia_kgm2
        self._jeff = self._jp * self._jw / (self._jp + self._jw)
        self.reset()

    # ----------------------------------------------------------------- state
    def reset(self) -> None:
        """Body at ``initial_tilt_rad`` and still, wheel still, no push, encoder re-latched."""
        self._th = self.initial_tilt_rad
        self._w = 0.0
        self._ph = 0.0
        self._v = 0.0
        self._tau = 0.0
        self._cmd = 0.0
        self._push_Nm = 0.0
        self._push_left = 0
        self._time_s = 0.0
        self._encoder.reset(0.0)
        self._measure()

    def set_state(self, *, tilt_rad: float | None = None, rate_rad_s: float | None = None,
                  wheel_rad_s: float | None = None) -> None:
        """Put the rig in a given state (e.g. lifted upright by hand); others unchanged."""
        if tilt_rad is not None:
            if not (math.isfinite(tilt_rad) and abs(tilt_rad) <= self.params.tilt_stop_rad):
                raise ValueError(f"tilt_rad must lie within the stops, got {tilt_rad}")
            self._th = float(tilt_rad)
        if rate_rad_s is not None:
            if not math.isfinite(rate_rad_s):
                raise ValueError("rate_rad_s must be finite")
            self._w = float(rate_rad_s)
        if wheel_rad_s is not None:
            if not math.isfinite(wheel_rad_s):
                raise ValueError("wheel_rad_s must be finite")
            self._v = float(wheel_rad_s)

    def push(self, torque_Nm: float, duration_s: float) -> None:
        """Apply a torque τd to the body for ``duration_s`` from now (replaces any push).

        The duration is rounded to whole integration substeps.
        """
        check_push(torque_Nm, duration_s)
        self._push_Nm = float(torque_Nm)
        self._push_left = round(duration_s / self._h)

    # ----------------------------------------------------------------- dynamics
    def _motor(self, cmd: float, th: float, w: float, v: float, td: float,
               resting: bool) -> float:
        """Motor torque τ (N·m) for the held command, after the limits."""
        p = self.params
        if self.drive == "speed":
            vdd = (cmd - v) / p.driver_lag_s
            if resting:
                tn = self._jw * vdd
            else:
                g = self._mgl * math.sin(th - p.balance_offset_rad) + td \
                    - p.pivot_friction_Nms_rad * w
                tn = self._jeff * (vdd + g / self._jp)
            tau = tn + p.wheel_friction_Nms_rad * v
        else:
            tau = cmd
        lim = p.torque_limit_Nm
        motoring = p.stall_torque_Nm * (1.0 - abs(v) / p.free_speed_rad_s)
        motoring = lim if motoring > lim else (0.0 if motoring < 0.0 else motoring)
        hi = motoring if v > 0.0 else lim
        lo = -motoring if v < 0.0 else -lim
        return hi if tau > hi else (lo if tau < lo else tau)

    def _accel(self, cmd: float, th: float, w: float, v: float, td: float,
               resting: bool) -> tuple[float, float, float]:
        """(θ̈, φ̈, τ) at a state; ``resting``: the body is held by a stop."""
        p = self.params
        tau = self._motor(cmd, th, w, v, td, resting)
        tn = tau - p.wheel_friction_Nms_rad * v
        if resting:
            return 0.0, tn / self._jw, tau
        thdd = (self._mgl * math.sin(th - p.balance_offset_rad) - tn + td
                - p.pivot_friction_Nms_rad * w) / self._jp
        return thdd, tn / self._jw - thdd, tau

    def step(self, command: float) -> None:
        """Hold ``command`` (rad/s in speed drive, N·m in torque drive) for ``dt_s``."""
        cmd = clip_command(command, self.input_limits)
        h = self._h
        stop = self.params.tilt_stop_rad
        accel = self._accel
        th, w, ph, v = self._th, self._w, self._ph, self._v
        for _ in range(self.substeps):
            td = 0.0
            if self._push_left > 0:
                td = self._push_Nm
                self._push_left -= 1
            resting = False
            if abs(th) >= stop and w == 0.0:
                a0, _, _ = accel(cmd, th, w, v, td, False)
                resting = a0 * th >= 0.0       # pressed outward onto the stop
            a1, b1, tau = accel(cmd, th, w, v, td, resting)
            th2, w2, v2 = th + 0.5 * h * w, w + 0.5 * h * a1, v + 0.5 * h * b1
            a2, b2, _ = accel(cmd, th2, w2, v2, td, resting)
            th3, w3, v3 = th + 0.5 * h * w2, w + 0.5 * h * a2, v + 0.5 * h * b2
            a3, b3, _ = accel(cmd, th3, w3, v3, td, resting)
            th4, w4, v4 = th + h * w3, w + h * a3, v + h * b3
            a4, b4, _ = accel(cmd, th4, w4, v4, td, resting)
            k6 = h / 6.0
            th += k6 * (w + 2.0 * w2 + 2.0 * w3 + w4)
            ph += k6 * (v + 2.0 * v2 + 2.0 * v3 + v4)
            w += k6 * (a1 + 2.0 * a2 + 2.0 * a3 + a4)
            v += k6 * (b1 + 2.0 * b2 + 2.0 * b3 + b4)
            if abs(th) > stop:
                # inelastic hit: the stop's impulse acts on the body only, so the wheel's
                # absolute speed θ̇ + φ̇ is unchanged
                th = math.copysign(stop, th)
                v += w
                w = 0.0
        self._th, self._w, self._ph, self._v = th, w, ph, v
        self._tau = tau
        self._cmd = cmd
        self._time_s += self.dt_s
        self._measure()

    # ----------------------------------------------------------------- outputs
    def _measure(self) -> None:
        p = self.params
        n = self.noise
        g = self._gauss
        th, w = self._th, self._w
        if p.imu_height_m > 0.0:
            resting = abs(th) >= p.tilt_stop_rad and w == 0.0
            td = self._push_Nm if self._push_left > 0 else 0.0
            thdd, _, _ = self._accel(self._cmd, th, w, self._v, td, resting)
            r = p.imu_height_m
            tilt = math.atan2(p.gravity_m_s2 * math.sin(th) - r * thdd,
                              p.gravity_m_s2 * math.cos(th) - r * w * w)
        else:
            tilt = th
        angle, speed = self._encoder.read(self._ph)
        self._sensors = {
            "accel_tilt_rad": tilt + n * (p.accel_bias_rad + p.tilt_noise_rad * g.next()),
            "gyro_rad_s": w + n * (p.gyro_bias_rad_s + p.gyro_noise_rad_s * g.next()),
            "wheel_rad_s": speed + n * p.wheel_speed_noise_rad_s * g.next(),
            "wheel_angle_rad": angle,
        }

    def sensors(self) -> dict[str, float]:
        """What the board measures at the end of the last step (SI units)."""
        return dict(self._sensors)

    def truth(self) -> dict[str, float]:
        """The exact state (no noise): tilt, rates, wheel angle, last torque, push, time."""
        return {
            "tilt_rad": self._th,
            "rate_rad_s": self._w,
            "wheel_angle_rad": self._ph,
            "wheel_rad_s": self._v,
            "torque_Nm": self._tau,
            "push_Nm": self._push_Nm if self._push_left > 0 else 0.0,
            "on_stop": 1.0 if abs(self._th) >= self.params.tilt_stop_rad else 0.0,
            "time_s": self._time_s,
        }
