"""What the Experiments and Gains screens say about an autotune result: the reason when
there is no model or no margins, the recommendation, gain margins as the CLI shows them."""

import math
from types import SimpleNamespace

from rigbench.experiments.ranking import RankLimits, judge_and_rank
from rigbench.experiments.proposals import Rated
from rigbench.tuning.margins import Margins
from rigbench.tuning.margin_result import NO_UPPER, gain_margin_text
from rigbench.ui.results import margins_text, proposal_rows, relay_lines

WHY = ("model fit failed: driver lag not identified from this record: α = 1.1786 ± 0.0027, "
       "but a lag needs 0 < α < 1")


def _rated(rule, margins=None, missing="", iae=None):
    r = Rated(rule, "PI", True, "", "", "", {"kp": 1.0}, 1.0, 2.0, 0.0, None,
              margins=margins, margin_missing=missing)
    r.response = None if iae is None else SimpleNamespace(iae=iae)
    return r


def _margins(gm=4.0, pm=50.0, ms=1.5, stable=True, low=None):
    db = None if gm is None else 20 * math.log10(gm)
    return Margins(stable, gm, db, low, None if low is None else 20 * math.log10(low), pm,
                   1.0, 0.1, ms, 20 * math.log10(ms), 2.0, "test")


def _outcome(items, model_missing=""):
    loop = SimpleNamespace(name="tilt", measure_unit="deg")
    settings = SimpleNamespace(amplitude=0.5, automatic=True, hysteresis=0.03, bias=0.0,
                               hysteresis_reason="", attempts=[])
    run = SimpleNamespace(loop=loop, converged=True, settings=settings, noise_rms=0.015,
                          analysis=None, rig_seconds=9.0)
    ps = SimpleNamespace(model_text="none", model_missing=model_missing, proposals=items,
                         current=None, best=lambda: min(
                             (p for p in items if p.rank), key=lambda p: p.rank, default=None))
    return SimpleNamespace(run=run, proposals=ps, proposal_error="")


def test_the_missing_model_and_margins_are_explained():
    items = [_rated("astrom-hagglund-pm-pi", missing=f"no model ({WHY})")]
    judge_and_rank(items, RankLimits(), params=None, unstable_plant=True)
    text = "\n".join(relay_lines(_outcome(items, WHY)))
    assert "α = 1.1786" in text and "none recommended" in text
    row = proposal_rows(_outcome(items).proposals)[0]
    assert row[0] == "no" and "α = 1.1786" in row[6]


def test_gain_margin_as_a_ratio_with_db_and_no_phase_margin_when_unstable():
    # 20·log10(2) = 6.02 dB (definition of the decibel)
    assert gain_margin_text(2.0) == "2 (6.0 dB)"
    # a missing margin says which kind of missing it is (the CLI and the UI share this)
    assert gain_margin_text(None, NO_UPPER) == "inf"
    assert gain_margin_text(None, "not computed: no convergence") == "?"
    assert gain_margin_text(None, "open-loop stable: no lower limit") == "none"
    assert "PM" not in margins_text(_margins(stable=False))
    assert margins_text(_margins(gm=2.0)).startswith("GM 2 (6.0 dB)")
