"""Which loop the host offers first (rigbench.experiments.conventions.primary_loop): the
innermost loop of a cascade, from the loops' declarations (PROTOCOL.md §5.4 ``setpoint=``)
or the naming conventions when a board leaves them out.

The rule itself is common practice: a cascade is tuned from the inside out, the inner loop
first (Åström and Hägglund, 2006, Advanced PID Control, the chapter on cascade control;
from memory)."""

from dataclasses import replace

from rigbench.experiments.conventions import primary_loop
from rigbench.wire.describe import LoopInfo


def _units(link) -> dict:
    return {s.name: s.unit for s in link.signals}


def test_balance_rig_offers_the_tilt_loop_not_the_speed_trim(open_sim):
    link = open_sim("sim://balance")
    assert list(link.loops) == ["trim", "tilt"]       # the trim loop is declared first
    choice = primary_loop(link.loops, _units(link))
    assert (choice.name, choice.ambiguous) == ("tilt", False)
    assert "its output cmd drives the motor (rev/s)" in choice.reason


def test_torque_drive_balance_rig_offers_the_tilt_loop(open_sim):
    link = open_sim("sim://balance?drive=torque")
    choice = primary_loop(link.loops, _units(link))
    assert (choice.name, choice.ambiguous) == ("tilt", False)
    assert "N.m" in choice.reason


def test_wheel_rig_offers_its_one_speed_loop(open_sim):
    link = open_sim("sim://wheel")
    choice = primary_loop(link.loops, _units(link))
    assert (choice.name, choice.candidates, choice.ambiguous) == ("speed", ("speed",), False)


# A cascade declared without set-points: position (outer) -> speed -> current (inner).
_UNITS = {"pos": "deg", "pos_sp": "deg", "speed": "rev/s", "speed_sp": "rev/s", "amps": "A",
          "amps_sp": "A", "volts": "V", "aux": "1", "aux_out": "1", "aux_sp": "1"}
_POS = LoopInfo(0, "pos", "pos", "speed_sp", ("a", "b", "c"), "integrating", "output")
_SPEED = LoopInfo(1, "speed", "speed", "amps_sp", ("d", "e", "f"), "stable", "output")
_AMPS = LoopInfo(2, "amps", "amps", "volts", ("g", "h", "i"), "stable", "output")


def _loops(*loops) -> dict:
    return {lp.name: lp for lp in loops}


def test_conventional_set_point_names_find_the_inner_loop_in_any_order():
    for order in ((_POS, _SPEED, _AMPS), (_AMPS, _POS, _SPEED), (_SPEED, _AMPS, _POS)):
        assert primary_loop(_loops(*order), _UNITS).name == "amps"


def test_a_declared_set_point_makes_the_cascade_plain():
    # names that follow no convention: only the declaration says "target" feeds "spin"
    units = {"wheel": "rev/s", "target": "rev/s", "volts": "V"}
    outer = LoopInfo(0, "hold", "wheel", "target", ("a", "b", "c"), "integrating", "output")
    inner = LoopInfo(1, "spin", "wheel", "volts", ("d", "e", "f"), "stable", "output",
                     setpoint="target")
    choice = primary_loop(_loops(outer, inner), units)
    assert (choice.name, choice.ambiguous) == ("spin", False)
    # without it both outputs could drive a motor (a speed, a voltage): the first, flagged
    choice = primary_loop(_loops(outer, replace(inner, setpoint=None)), units)
    assert (choice.name, choice.candidates) == ("hold", ("hold", "spin"))
    assert choice.ambiguous


def test_a_loop_driving_the_motor_wins_over_another_inner_loop():
    aux = LoopInfo(0, "aux", "aux", "aux_out", ("a", "b", "c"), "stable", "output")
    choice = primary_loop(_loops(aux, _AMPS), _UNITS)
    assert (choice.name, choice.ambiguous) == ("amps", False)


def test_two_independent_drive_loops_are_ambiguous_and_the_first_is_offered():
    other = LoopInfo(1, "amps2", "speed", "volts2", ("g", "h", "i"), "stable", "output")
    choice = primary_loop(_loops(_AMPS, other), {**_UNITS, "volts2": "V"})
    assert (choice.name, choice.candidates, choice.ambiguous) == \
        ("amps", ("amps", "amps2"), True)


def test_no_loops_and_a_declaration_loop_fall_back():
    assert primary_loop({}, _UNITS).name is None
    a = replace(_SPEED, name="a", output="x", setpoint="y")
    b = replace(_SPEED, name="b", output="y", setpoint="x")
    choice = primary_loop(_loops(a, b), {**_UNITS, "x": "rev/s", "y": "rev/s"})
    assert (choice.name, choice.ambiguous) == ("a", True)


def test_tune_without_a_loop_names_the_inner_loop_and_runs_nothing(capsys):
    from rigbench.cli import main

    # two loops: a relay test moves the motor, so tune asks rather than picks
    assert main(["tune", "--port", "sim://balance?clock=virtual"]) == 2
    err = capsys.readouterr().err
    assert "the board has: trim, tilt. Start with --loop tilt" in err
