"""Model-based designs for an open-loop-unstable balance loop, from a relay run's record:
the balance model fit (rigbench.tuning.balance) fed with the right signals in SI units, the
model as a plant in the board's units, and the LQR design turned into the board's gains.

- Fit window: the relay's converged cycles plus the set-point doublet that follows them
  (relay.py), low-passed at ``cutoff_hz`` (default 8 Hz: above the demo rigs' relay
  frequency, below the sensor noise).
- Wheel speed from an encoder count difference over one loop period is the mean speed over
  that period, which lags the sample instant by half a period; ``wheel_lag_samples``
  (default 0.5) moves it back by interpolation before the fit. Measured on the demo rig:
  the unstable pole's fit error went from −2…−4% to within ±0.5% with it.
- Board units: the model is θ[rad]/u[SI]; the loop's plant in board units is that times
  f_out/f_in (rigbench.base.units factors of the output and measure units).
- LQR (rigbench.tuning.balance_design) gives the tilt loop kp, kd (ki = 0) and an outer
  wheel-speed trim θ_sp = trim_kp·w + trim_ki·∫w. A board whose outer loop is reverse
  acting (e = wheel_sp − wheel: its plant, tilt set-point → wheel speed, has positive gain
  since the wheel accelerates to hold a lean) applies θ_sp = −(its kp·w + ki·∫w), so the
  board's trim gains are the negatives, converted to its units; on a direct-acting outer
  loop (e = wheel − wheel_sp) they keep their sign. The action is the one the outer loop
  declares (PROTOCOL.md §5.4), reverse when it declares none. If the gains come out
  outside the declared ranges the proposal says so.
- The rate signal (a gyro) is converted from its own declared unit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rigbench.tuning.balance import BalanceModel, design_lqr, fit_balance_model
from rigbench.tuning.loop import PlantModel
from rigbench.base.units import gain_from_si, si_factor

from rigbench.experiments.conventions import loop_action

__all__ = ["fit_from_run", "board_plant", "lqr_board_gains", "LqrBoardGains",
           "simulate_state_feedback"]


def fit_from_run(run, *, cutoff_hz: float = 8.0, wheel_lag_samples: float = 0.5,
                 max_delay: int = 10) -> tuple[BalanceModel | None, str]:
    """(model, '') or (None, why not) for a relay run on a balance loop."""
    ls, res = run.loop, run.experiment
    if ls.drive is None:
        return None, f"output unit {ls.output_unit!r} is neither a speed nor a torque"
    if ls.wheel is None and ls.drive == "speed":
        return None, "the board streams no wheel speed signal ('wheel')"
    if run.fit_window is None or res is None:
        return None, "the relay test did not converge: no record to fit"
    sl = res.window(*run.fit_window)
    t = res.t_s[sl]
    if len(t) < 200:
        return None, "too little data in the fit window"
    dt = float(np.median(np.diff(t)))
    try:
        f_in = si_factor(ls.measure_unit)
        f_out = si_factor(ls.output_unit)
        tilt = res.column(ls.measure)[sl] * f_in
        rate = (res.column(ls.rate)[sl] * si_factor(res.units[res.signals.index(ls.rate)])
                if ls.rate else np.gradient(tilt, dt))
        if ls.wheel:
            w = res.column(ls.wheel)[sl] * si_factor(res.units[res.signals.index(ls.wheel)])
            if wheel_lag_samples:
                w = np.interp(t + wheel_lag_samples * dt, t, w)
        else:
            w = np.zeros_like(t)
        cmd = res.column(ls.output)[sl] * f_out
        tg = t[0] + dt * np.arange(len(t))  # the fit needs a uniform grid
        sig = [np.interp(tg, t, x) for x in (tilt, rate, w, cmd)]
        model = fit_balance_model(tg, *sig, dt=dt, drive=ls.drive,
                                  cutoff_hz=min(cutoff_hz, 0.4 / dt), max_delay=max_delay)
    except ValueError as exc:
        return None, f"model fit failed: {exc}"
    return model, ""


def board_plant(model: BalanceModel, ls) -> PlantModel:
    """The model's θ/u in the board's units of measure and output."""
    pm = model.plant_model()
    scale = si_factor(ls.output_unit) / si_factor(ls.measure_unit)
    return PlantModel(tuple(np.asarray(pm.num) * scale), pm.den, pm.delay_s)


@dataclass(frozen=True)
class LqrBoardGains:
    kp: float
    kd: float
    trim: dict                  # trim loop parameter -> value (board units), may be empty
    trim_loop: str | None
    margins: object             # loop broken at the plant input (ratios, unit-free)
    reason: str                 # why it cannot be used as is ('' when it can)
    design: object


def lqr_board_gains(model: BalanceModel, ls, board, **lqr_kw) -> LqrBoardGains:
    """The LQR design's nearest PID and wheel-speed trim in the board's parameters."""
    if model.drive == "torque" and ls.output_limit and "max_command" not in lqr_kw:
        # Bryson's rule with the torque the board may use (the design's default command
        # scale is a wheel speed)
        lqr_kw["max_command"] = ls.output_limit * si_factor(ls.output_unit)
    d = design_lqr(model, **lqr_kw)
    scale = si_factor(ls.measure_unit) / si_factor(ls.output_unit)
    kp, kd = d.pid.kp * scale, d.pid.kd * scale
    trim, trim_loop, reason = {}, None, ""
    if model.drive == "speed":
        outer = [lp for lp in board.loops.values()
                 if lp.output == ls.setpoint and lp.name != ls.name]
        if not outer:
            reason = "needs an outer wheel-speed loop setting the tilt set-point"
        else:
            lp = outer[0]
            trim_loop = lp.name
            w_unit = board.units[lp.measure]
            # θ_sp = −(trim_kp·w + trim_ki·∫w) on a reverse-acting outer loop, + on a
            # direct-acting one (module docstring)
            sign = 1.0 if loop_action(lp) == "direct" else -1.0
            trim = {lp.gains[0]: sign * gain_from_si(d.pid.details["trim_kp"],
                                                     ls.measure_unit, w_unit, "1"),
                    lp.gains[1]: sign * gain_from_si(d.pid.details["trim_ki"],
                                                     ls.measure_unit, w_unit, "1/s"),
                    lp.gains[2]: 0.0}
    gains = {ls.gains[0]: kp, ls.gains[1]: 0.0, ls.gains[2]: kd, **trim}
    for name, value in gains.items():
        p = board.params.get(name)
        if p is not None and not p.minimum <= value <= p.maximum:
            reason = (f"{name} = {value:.4g} lies outside the board's range "
                      f"{p.minimum:g}..{p.maximum:g}")
            break
    return LqrBoardGains(kp, kd, trim, trim_loop, d.pid.margins, reason, d)


def simulate_state_feedback(design, *, t_end_s: float, amplitude_si: float, width_s: float,
                            start_s: float = 0.0):
    """θ (rad) and u (SI) of u = −K̃x on the design's discrete model after an input pulse
    of ``amplitude_si`` for ``width_s``; K̃ the nearest-PID gains (delayed commands folded)."""
    a_d, b_d = design.a_d, design.b_d[:, 0]
    n_phys = len([s for s in design.states if not s.startswith("command")])
    k = np.zeros(len(design.states))
    k[:n_phys] = design.k[:n_phys] / design.pid.details["fold"]
    h = design.dt_s
    n = int(round(t_end_s / h)) + 1
    t = np.arange(n) * h
    x = np.zeros(len(design.states))
    theta, u = np.empty(n), np.empty(n)
    for i in range(n):
        dist = amplitude_si if start_s - 1e-12 <= t[i] < start_s + width_s - 1e-12 else 0.0
        uk = -float(k @ x)
        theta[i], u[i] = x[0], uk
        x = a_d @ x + b_d * (uk + dist)
    if not np.all(np.isfinite(theta)):
        theta[~np.isfinite(theta)] = math.inf
    return t, theta, u
