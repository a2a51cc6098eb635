"""What the host reads about a loop (rigbench.experiments.conventions): the loop's declared
optional fields (PROTOCOL.md §5.4) when the board sends them, even when the names follow
none of the conventions; the naming conventions only for what it leaves out; a loud error
when a declaration names something the board lacks."""

import sys
from dataclasses import replace
from pathlib import Path
from types import SimpleNamespace

import pytest

from rigbench.experiments.balancefit import lqr_board_gains
from rigbench.experiments.conventions import BoardView, loop_signals
from rigbench.tuning.balance import BalanceModel
from rigbench.wire.describe import LOOP_OPTIONAL, LoopInfo, ParamInfo, SignalInfo

sys.path.insert(0, str(Path(__file__).parents[1]))
from board_decl import declared  # noqa: E402

# A board whose names follow none of the conventions, with decoys that do: a host that
# guessed would take drive_limit, pos_dfilt_s, sp and spin.
_PARAMS = [("pos_p", "rev/s/deg", 1.0), ("pos_i", "rev/s/deg/s", 0.0), ("pos_d", "rev/deg", 0.0),
           ("drive_max", "rev/s", 30.0), ("drive_max_rpm", "rpm", 600.0),
           ("drive_max_v", "V", 12.0), ("pos_d_tau", "ms", 8.0), ("pos_target", "deg", 2.0),
           ("drive_limit", "rev/s", 99.0), ("pos_dfilt_s", "s", 0.5)]
_SIGNALS = [("angle", "deg"), ("target", "deg"), ("gyro", "rad/s"), ("drive", "rev/s"),
            ("sp", "deg"), ("spin", "deg/s"), ("flywheel", "rpm"), ("volts", "V")]
_LOOP = LoopInfo(0, "pos", "angle", "drive", ("pos_p", "pos_i", "pos_d"), "unstable",
                 "integral")
_DECLARED = replace(_LOOP, setpoint="target", limit="drive_max", dfilt="pos_d_tau",
                    rate="gyro", action="reverse")


def _link(*loops):
    return SimpleNamespace(
        params={n: ParamInfo(i, n, u, -1e6, 1e6, v, True) for i, (n, u, v) in enumerate(_PARAMS)},
        signals=[SignalInfo(i, n, u) for i, (n, u) in enumerate(_SIGNALS)],
        loops={lp.name: lp for lp in loops})


def test_declared_fields_win_over_the_conventions():
    ls = loop_signals(_link(_DECLARED), "pos")
    assert (ls.setpoint, ls.rate, ls.action, ls.direct_acting) == \
        ("target", "gyro", "reverse", False)
    assert ls.output_limit == 30.0
    assert ls.dfilt_s == pytest.approx(0.008)      # 8 ms (SI definition of the millisecond)
    assert ls.declared == LOOP_OPTIONAL and ls.setpoint_param is None


def test_without_declarations_the_conventions_apply():
    ls = loop_signals(_link(_LOOP), "pos")
    # PROTOCOL.md §5.4, last column: <output>_limit, <loop>_dfilt_s, the first of
    # <loop>_sp/sp/r/setpoint in the measure's unit, a signal in <unit>/s, direct if unstable
    assert (ls.setpoint, ls.rate, ls.action, ls.direct_acting) == ("sp", "spin", "direct", True)
    assert (ls.output_limit, ls.dfilt_s, ls.declared) == (99.0, 0.5, ())


def test_declared_limit_converts_from_another_unit_of_the_same_quantity():
    # 1 rev/s = 60 rpm (definition of the units)
    ls = loop_signals(_link(replace(_DECLARED, limit="drive_max_rpm")), "pos")
    assert ls.output_limit == pytest.approx(10.0)


def test_a_set_point_parameter_is_no_signal_and_stops_the_guess():
    ls = loop_signals(_link(replace(_DECLARED, setpoint="pos_target")), "pos")
    assert (ls.setpoint, ls.setpoint_param) == (None, "pos_target")   # not the decoy "sp"


def test_wheel_speed_is_the_outer_loop_measure():
    outer = LoopInfo(1, "hold", "flywheel", "target", ("pos_p", "pos_i", "pos_d"),
                     "integrating", "output", setpoint="pos_target", action="reverse")
    assert loop_signals(_link(_DECLARED, outer), "pos").wheel == "flywheel"
    assert loop_signals(_link(_DECLARED), "pos").wheel is None   # no signal named wheel


@pytest.mark.parametrize("change,words", [
    ({"limit": "drive_cap"}, "not a parameter"),
    ({"limit": "drive_max_v"}, "does not convert"),
    ({"dfilt": "drive_max"}, "does not convert"),
    ({"setpoint": "volts"}, "measure's unit"),
    ({"setpoint": "angle"}, "measure's unit"),
    ({"setpoint": "nowhere"}, "neither a signal nor a parameter"),
    ({"rate": "volts"}, "not a rate"),
    ({"rate": "gyro2"}, "does not stream"),
])
def test_a_declaration_the_board_cannot_back_is_refused(change, words):
    with pytest.raises(ValueError, match=words):
        loop_signals(_link(replace(_DECLARED, **change)), "pos")


def test_simulated_balance_board_declares_what_the_host_used_to_guess(open_sim):
    link = open_sim("sim://balance?seed=1")
    tilt, trim = loop_signals(link, "tilt"), loop_signals(link, "trim")
    assert tilt.declared == LOOP_OPTIONAL
    assert trim.declared == tuple(k for k in LOOP_OPTIONAL if k != "rate")
    assert (tilt.setpoint, tilt.rate, tilt.wheel, tilt.action) == ("sp", "rate", "wheel", "direct")
    assert (tilt.output_limit, tilt.dfilt_s) == (50.0, 0.005)     # boot values, boards.py
    assert (trim.setpoint, trim.setpoint_param, trim.action) == (None, "wheel_sp", "reverse")
    assert (trim.output_limit, trim.dfilt_s) == (5.0, 0.05)


def test_trim_gains_follow_the_outer_loop_action():
    # θ_sp = trim output; the outer loop forms kp·e with e = w_sp − w (reverse) or w − w_sp
    # (direct): the same design needs gains of opposite sign (analytic, PROTOCOL.md §5.4)
    params, loops, _, info = declared("balance")
    rd_link = SimpleNamespace(params=params, loops=loops,
                              signals=[SignalInfo(i, n, u) for i, (n, u) in enumerate(
                                  [("tilt", "deg"), ("rate", "deg/s"), ("wheel", "rev/s"),
                                   ("cmd", "rev/s"), ("sp", "deg"), ("relay", "1")])])
    ls = loop_signals(rd_link, "tilt")
    model = BalanceModel(a=8.84, c_prime=0.0625, offset_rad=0.0, tau_e_s=0.008,
                         delay_samples=1, dt_s=0.002)

    def board(trim_action):
        lps = dict(loops, trim=replace(loops["trim"], action=trim_action))
        return BoardView(info.board, info.rig, info.rate_hz, params, lps,
                         {s.name: s.unit for s in rd_link.signals})

    rev, direct = (lqr_board_gains(model, ls, board(a)) for a in ("reverse", "direct"))
    design_kp = rev.design.pid.details["trim_kp"]
    assert design_kp != 0 and rev.trim["trim_kp"] * design_kp < 0
    assert direct.trim == {k: -v for k, v in rev.trim.items()}
