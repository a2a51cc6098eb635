"""Relay autotune, proposals and a disturbance sweep on the simulated balance rig, speed
and torque drive (virtual clock)."""

import math

import pytest

from bench.experiments.proposals import propose
from bench.experiments.relay import run_relay
from bench.experiments.sweep import gain_set, run_sweep
from bench.tuning.rules import ULTIMATE_RULES

_cache = {}


def _tuned(open_sim, drive):
    if drive not in _cache:
        link = open_sim(f"sim://balance?drive={drive}&seed=2")
        run = run_relay(link, "tilt", max_s=30.0)
        _cache[drive] = (link, run, propose(run) if run.converged else None)
    return _cache[drive]


@pytest.mark.parametrize("drive", ["speed", "torque"])
def test_relay_converges_on_the_unstable_tilt_loop(open_sim_shared, drive):
    link, run, _ = _tuned(open_sim_shared, drive)
    assert run.converged, run.reason
    assert run.loop.relay == "integral" and run.ku is None
    # METHODS.md §4 [calc]: the integral-channel relay gives sustained, repeatable cycles
    assert run.analysis.period_scatter < 0.02
    assert run.experiment.stopped_by == "done" and run.experiment.motor_after == "off"


@pytest.mark.parametrize("drive", ["speed", "torque"])
def test_fitted_unstable_pole_matches_the_simulator(open_sim_shared, drive):
    link, run, ps = _tuned(open_sim_shared, drive)
    p = link.port.board.plant.params
    # the true pole from the simulator's own parameters: sqrt(mgl/Jt) with the wheel speed
    # driven (speed drive), sqrt(mgl/Jp) with the torque driven (Spong, Corke & Lozano
    # 2001; Block, Åström & Spong 2007; METHODS.md §4); tolerance 5% (brief)
    truth = p.speed_drive_pole_rad_s if drive == "speed" else p.torque_drive_pole_rad_s
    assert ps.model.a == pytest.approx(truth, rel=0.05)
    assert ps.model_kind == f"balance-{drive}"
    assert ps.direct_acting  # the board's tilt loop works on e = tilt − set-point


@pytest.mark.parametrize("drive", ["speed", "torque"])
def test_ultimate_point_rules_do_not_apply(open_sim_shared, drive):
    _, _, ps = _tuned(open_sim_shared, drive)
    # METHODS.md §4: no P-only ultimate gain exists on an open-loop-unstable loop, so the
    # Ziegler–Nichols, Tyreus–Luyben and AMIGO rules must say so rather than give numbers
    for rule in ULTIMATE_RULES:
        item = ps.by_rule(rule)
        assert not item.applies and item.kp is None and item.gains == {}
        assert "unstable" in item.reason
    offered = {p.rule for p in ps.proposals if p.applies}
    assert "astrom-hagglund-pm-pid" in offered and "pole-placement-pid" in offered
    for p in ps.proposals:
        if p.applies and p.margins is not None and p.margins.stable:
            # an unstable plant has a lower gain margin as well as an upper one (METHODS §4)
            assert p.margins.gain_margin_lower is not None and p.margins.gain_margin_lower < 1


@pytest.mark.parametrize("drive", ["speed", "torque"])
def test_proposals_predicted_stable_balance_and_one_beats_the_start(open_sim_shared, drive):
    link, run, ps = _tuned(open_sim_shared, drive)
    stable = [p for p in ps.proposals if p.applies and p.predicted_stable]
    assert stable
    sets = [gain_set(ps.current.gains, "start")] + [gain_set(p) for p in stable]
    sweep = run_sweep(link, sets, amplitudes=(0.03,), repeats=2, settle_s=1.5,
                      rearm_after_fall=True)
    # every proposal the model predicts stable balances the simulated rig through the
    # pushes (common practice, no source: a model's prediction is checked by trying it)
    fell = [s.name for s in sweep.sets if s.fell or not s.completed]
    assert not fell, [sweep.by_name(n).detail for n in fell]
    start = sweep.by_name("start").mean_iae
    best = min(s.mean_iae for s in sweep.sets if s.name != "start")
    assert best < start
    # the sweep put the board's gains back
    assert link.get(*ps.current.gains) == pytest.approx(ps.current.gains)
    assert all(math.isfinite(s.mean_iae) for s in sweep.sets)
