"""The balance model fit on relay records of the simulated rig with other noise draws than
test_exp_balance.py's: the model the tune command uses, checked against the simulator's own
parameters, and a recommended proposal (virtual clock)."""

import pytest

from rigbench.experiments.proposals import propose
from rigbench.experiments.relay import run_relay


@pytest.mark.parametrize("drive", ["speed", "torque"])
@pytest.mark.parametrize("draw", [0, 1])
def test_relay_record_gives_the_true_model_and_a_recommendation(open_sim, drive, draw):
    link = open_sim(f"sim://balance?drive={drive}&seed={draw}")
    run = run_relay(link, "tilt", max_s=30.0)
    assert run.converged, run.reason
    ps = propose(run)
    assert ps.model is not None, ps.model_missing
    p = link.port.board.plant.params
    # the true pole from the simulator's parameters: sqrt(mgl/Jt) with the wheel speed
    # driven, sqrt(mgl/Jp) with the torque driven (Spong, Corke & Lozano 2001; Block,
    # Åström & Spong 2007; docs/METHODS.md §4); tolerance 5% (as test_exp_balance.py)
    truth = p.speed_drive_pole_rad_s if drive == "speed" else p.torque_drive_pole_rad_s
    assert ps.model.a == pytest.approx(truth, rel=0.05)
    if drive == "speed":
        # the driver's first-order lag (docs/METHODS.md §4.1) and its unit gain; 10% as
        # tests/tuning/test_tuning_balance_short.py. A wrong dead time in the actuator fit
        # shows up here as a lag far off or as no model at all.
        assert ps.model.tau_e_s == pytest.approx(p.driver_lag_s, rel=0.10)
        assert ps.model.drive_gain == pytest.approx(1.0, rel=0.05)
        assert ps.model.delay_samples <= 1
    # a model-based proposal meets the ranking limits, so `tune` exits 0 (commands/tune.py)
    assert ps.best() is not None, [(q.rule, q.not_recommended) for q in ps.proposals]
