"""The autotune flow with default options on slow and lightly damped plants (sim://plant,
virtual clock): the relay converges without growing its amplitude, the measured point lies
on the plant, the rules get the ultimate point of the sampled loop; the CLI, the UI runner
and a sequence's relay step give the same proposals."""

import json
import math
import threading

import control
import numpy as np
import pytest
from scipy.optimize import brentq

from rigbench.cli import main
from rigbench.experiments.autotune import AutotuneConfig, autotune, evaluate
from rigbench.sequences.stepdata import relay_outcome
from rigbench.ui import runners

# url den (num = 1), dead time s; exact ultimate point Ku, Tu s [calc: scipy root of
# arg G(jω) = −180°, recomputed in test_check_values_are_the_ultimate_points]
SLOW = {
    # two lags of 8 s and 3 s dead time: a period of 22 s, like a slow wheel-speed loop
    "lag2-slow": ("64,16,1", 3.0, 6.0161, 22.443),
    # five equal lags: Ku = sec(π/5)^5, ωu = tan(π/5) (closed form [calc])
    "lag5": ("1,5,10,10,5,1", 0.0, 2.8854, 8.6481),
    # lightly damped (ζ = 0.1) second order with a lag and dead time
    "damped": ("1,1.2,1.2,1", 0.3, 0.33717, 5.9894),
}


def _url(name: str) -> str:
    den, delay, *_ = SLOW[name]
    return f"sim://plant?num=1&den={den}&delay={delay}&rate=100&seed=4&clock=virtual"


def _g(name: str, omega: float) -> complex:
    den, delay, *_ = SLOW[name]
    g = control.tf([1.0], [float(x) for x in den.split(",")])
    return complex(g(1j * omega)) * np.exp(-1j * omega * delay)


_results = {}


def _autotune(open_sim_shared, name):
    if name not in _results:
        _results[name] = autotune(open_sim_shared(_url(name)), "main")
    return _results[name]


@pytest.mark.parametrize("name", list(SLOW))
def test_check_values_are_the_ultimate_points(name):
    # [calc] the phase of G (python-control, dead time as e^{-jωL}) crosses −180° at ωu
    _, _, ku, tu = SLOW[name]

    den, delay, *_ = SLOW[name]
    den = [float(x) for x in den.split(",")]

    def phase(w):  # continuous phase: the lags' angles plus the dead time's −ωL
        ws = np.linspace(1e-4, w, 2000)
        return float(np.unwrap(np.angle(1 / np.polyval(den, 1j * ws)))[-1] - w * delay
                     + math.pi)

    wu = brentq(phase, 0.05, 2.0)
    assert 2 * math.pi / wu == pytest.approx(tu, rel=1e-4)
    assert 1 / abs(_g(name, wu)) == pytest.approx(ku, rel=1e-4)


@pytest.mark.parametrize("name", list(SLOW))
def test_default_tune_converges_on_slow_and_lightly_damped_plants(open_sim_shared, name):
    _, _, ku, tu = SLOW[name]
    res = _autotune(open_sim_shared, name)
    run = res.run
    assert run.converged, run.reason
    # the amplitude the first whole cycles needed is the one kept (never grown)
    attempts = run.settings.attempts
    assert [a.outcome for a in attempts] == ["kept"]
    assert run.settings.amplitude == attempts[0].amplitude
    # the band is the documented 2× noise RMS (docs/METHODS.md §3, common practice)
    assert run.settings.hysteresis_noise_ratio == pytest.approx(2.0, rel=1e-6)
    # the point is G(jω) only in the periodic steady state (Åström & Hägglund 1984): a
    # convergence test stopping on the transient leaves it several % off
    g = _g(name, run.point.omega_rad_s)
    assert run.point.gain == pytest.approx(abs(g), rel=0.01)
    dphi = (run.point.phase_deg - math.degrees(np.angle(g)) + 180.0) % 360.0 - 180.0
    assert abs(dphi) < 1.0
    # the rules get the ultimate point of the model, within 2% / 1% of the exact one [calc]
    # (the loop sampled at 100 Hz moves it by less than 0.5% on these slow plants)
    ult = res.proposals.ultimate
    assert ult["ku"] == pytest.approx(ku, rel=0.02)
    assert ult["tu_s"] == pytest.approx(tu, rel=0.01)


@pytest.mark.filterwarnings("ignore:stability_margins")
def test_sampled_ultimate_point_on_a_fast_plant_at_a_slow_rate(open_sim):
    # 1/(s+1)^3 at 10 Hz: the sampled loop (zero-order hold, discrete P controller)
    # crosses −180° below the continuous ωu, at a lower gain. Reference: python-control's
    # gain margin of the P loop on the plant discretised with a zero-order hold.
    link = open_sim("sim://plant?num=1&den=1,3,3,1&rate=10&seed=2")
    res = autotune(link, "main")
    assert res.run.converged, res.run.reason
    ult = res.proposals.ultimate
    gm, _, wpc, _ = control.margin(control.c2d(control.tf([1], [1, 3, 3, 1]), 0.1, "zoh"))
    assert ult["sampled"]["ku"] == pytest.approx(gm, rel=0.03)
    assert ult["sampled"]["tu_s"] == pytest.approx(2 * math.pi / wpc, rel=0.02)
    # docs/METHODS.md §3 [calc]: continuous Ku = 8
    assert ult["continuous"]["ku"] == pytest.approx(8.0, rel=0.03)
    assert ult["ku"] == ult["sampled"]["ku"] < 0.9 * ult["continuous"]["ku"]


def _key(doc_proposals):
    return [(p["rule"], p["rank"], p["kp"], p["ki"], p["kd"]) for p in doc_proposals]


def test_cli_ui_and_sequence_give_the_same_proposals(capsys):
    url = "sim://plant?num=1&den=1,1&delay=0.5&seed=7&clock=virtual"
    code = main(["tune", "--port", url, "--json"])
    doc = json.loads(capsys.readouterr().out)
    assert code == doc["exit_code"]

    from rigbench.link import Link

    with Link.open(url) as link:
        ui = runners.relay_and_proposals(link, loop="main", cancel=threading.Event(),
                                         progress=None)
    ui_doc = ui.to_dict()
    _, data = relay_outcome(ui.run)
    seq = [{"rule": p["rule"], "rank": p["rank"], "kp": p["kp"], "ki": p["ki"], "kd": p["kd"]}
           for p in data["proposals"]]
    assert _key(doc["proposals"]) == _key(ui_doc["proposals"]) == _key(seq)
    assert doc["recommended"] == ui_doc["recommended"] == data["recommended"]
    assert doc["recommended"], "a first-order lag with dead time has recommended proposals"


def test_a_run_that_did_not_converge_says_why(open_sim):
    link = open_sim("sim://plant?num=1&den=64,16,1&delay=3&seed=1")
    from rigbench.experiments.relay import RelayConfig

    res = autotune(link, "main", AutotuneConfig(relay=RelayConfig(max_s=20.0)))
    assert not res.run.converged and res.proposals is None
    assert "max_s = 20" in res.run.reason
    assert "did not converge" in res.model_missing
    assert res.exit_code == 6
    again = evaluate(res.run)
    assert again.proposal_error == res.proposal_error


@pytest.mark.parametrize("den,plant,relay", [
    ("1,3,3,1", "stable", "output"),
    ("1,1,0", "integrating", "output"),      # a pole at 0
    ("1,0,-1", "unstable", "integral"),      # a pole at +1
])
def test_sim_plant_declares_its_kind_from_the_denominator(open_sim, den, plant, relay):
    # PROTOCOL.md §5.4: the loop reply says what the board author knows of the open loop
    lp = open_sim(f"sim://plant?num=1&den={den}").loops["main"]
    assert (lp.plant, lp.relay) == (plant, relay)


def test_sim_plant_kind_can_be_declared(open_sim):
    lp = open_sim("sim://plant?num=1&den=1,1&plant=integrating").loops["main"]
    assert lp.plant == "integrating"


@pytest.mark.parametrize("num,consistent", [("1", True), ("-2,1", False)])
def test_biased_relay_checks_the_model_against_the_static_gain(open_sim, num, consistent):
    # biased relay: Kp = ∫y dt / ∫u dt over whole periods (Shen, Wu & Yu 1996 [memory]);
    # both plants have G(0) = num(0)/den(0) = 1 [calc]. (1 − 2s)/(s + 1)³ has a
    # right-half-plane zero: a lag model fitted to its frequency points alone has the wrong
    # static gain, and the check says so
    link = open_sim(f"sim://plant?num={num}&den=1,3,3,1&seed=1")
    from rigbench.experiments.relay import RelayConfig

    res = autotune(link, "main", AutotuneConfig(relay=RelayConfig(bias=0.4)))
    assert res.run.converged, res.run.reason
    assert res.run.static_gain == pytest.approx(1.0, rel=0.01)
    assert res.proposals.static_consistent is consistent
    flagged = any("INCONSISTENT" in n for n in res.proposals.notes)
    assert flagged is not consistent
