"""Ranking of gain proposals (rigbench.experiments.ranking): recommended only within the
margin limits and the board's ranges, ranked by predicted IAE, the rest listed with their
reasons; margins over the model's 2σ box. Limits are common practice, no source (GM ≥ 2 =
6 dB, lower GM ≤ 0.5, PM ≥ 30°, Ms ≤ 2; docs/METHODS.md §2)."""

from dataclasses import dataclass, field

import control
import pytest

from rigbench.experiments.ranking import RankLimits, box_corners, judge_and_rank, robust_margins
from rigbench.tuning.loop import LoopController, PlantModel
from rigbench.tuning.margins import margins
from rigbench.wire.describe import ParamInfo


@dataclass
class _M:
    stable: bool = True
    gain_margin_upper: float | None = 4.0
    gain_margin_lower: float | None = None
    phase_margin_deg: float | None = 60.0
    ms: float = 1.4


@dataclass
class _R:
    iae: float


@dataclass
class _Item:
    rule: str
    margins: object
    iae: float
    gains: dict = field(default_factory=dict)
    applies: bool = True
    robust: object = None
    margin_missing: str = ""
    nominal_only: bool = False
    recommended: object = None
    not_recommended: list = field(default_factory=list)
    rank: object = None

    @property
    def response(self):
        return _R(self.iae)


def _param(name, lo, hi):
    return ParamInfo(0, name, "1", lo, hi, 0.0, True)


def test_only_designs_within_the_limits_are_ranked_by_iae():
    items = [
        _Item("aggressive", _M(gain_margin_upper=1.35, phase_margin_deg=14.0, ms=5.7), 0.1),
        _Item("slow", _M(), 3.0),
        _Item("good", _M(ms=1.9), 1.0),
        _Item("low-pm", _M(phase_margin_deg=25.0), 0.5),
        _Item("unstable", _M(stable=False, ms=float("inf")), 0.2),
        _Item("wide-ki", _M(), 0.3, gains={"ki": 153.0}),
        _Item("no-model", None, 0.0, margin_missing="no model (driver lag α = 1.17)"),
    ]
    judge_and_rank(items, RankLimits(), params={"ki": _param("ki", 0.0, 50.0)},
                   unstable_plant=False)
    by = {it.rule: it for it in items}
    assert [it.rule for it in sorted((i for i in items if i.rank), key=lambda i: i.rank)] \
        == ["good", "slow"]
    assert by["aggressive"].not_recommended == [
        "gain margin 1.35 < 2", "phase margin 14.0° < 30°", "Ms 5.7 > 2"]
    assert by["unstable"].not_recommended == ["predicted unstable"]
    assert by["wide-ki"].not_recommended == ["ki = 153 outside the board's range 0..50"]
    assert "α = 1.17" in by["no-model"].not_recommended[0]
    assert by["low-pm"].recommended is False and by["good"].recommended is True


def test_lower_gain_margin_counts_only_for_open_loop_unstable_loops():
    items = [_Item("a", _M(gain_margin_lower=0.7), 1.0)]
    judge_and_rank(items, RankLimits(), params=None, unstable_plant=False)
    assert items[0].rank == 1
    judge_and_rank(items, RankLimits(), params=None, unstable_plant=True)
    assert items[0].rank is None
    assert items[0].not_recommended == ["lower gain margin 0.7 > 0.5"]


def test_margins_that_hold_only_for_the_nominal_model_are_marked():
    items = [_Item("a", _M(), 1.0, robust=_M(gain_margin_upper=1.6))]
    judge_and_rank(items, RankLimits(), params=None, unstable_plant=False)
    assert items[0].nominal_only and items[0].rank is None
    assert items[0].not_recommended[0].startswith("worst case over the fit's 2σ box")


def test_worst_case_over_the_box_matches_python_control_at_the_corners():
    # K/(s+1)^3 with K = 1 ± 0.1 (σ = 0.05, box ±2σ): a P controller of gain 4 has its
    # smallest gain margin at K = 1.1; python-control's margin of the continuous loop
    @dataclass(frozen=True)
    class Model:
        k: float

    corners = box_corners(Model(1.0), {"k": 0.05}, make=lambda **kw: Model(**kw))
    assert sorted(m.k for m in corners) == pytest.approx([0.9, 1.1])
    plants = [PlantModel([m.k], [1, 3, 3, 1], 0.0) for m in corners]
    ctrl = LoopController(4.0)
    rob = robust_margins(lambda pl: margins(ctrl, pl), plants)
    gm, pm, _, _ = control.margin(control.tf([4.4], [1, 3, 3, 1]))
    assert rob.gain_margin_upper == pytest.approx(gm, rel=1e-3)   # 8/4.4 = 1.818
    assert rob.phase_margin_deg == pytest.approx(pm, abs=0.1)
    assert rob.corners == 2
