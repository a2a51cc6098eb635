"""Sequences checked against a board's declaration before anything runs."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

from rigbench.sequences.check import check_sequence_against_board
from rigbench.sequences.file import load_sequence, load_sequence_text

sys.path.insert(0, str(Path(__file__).parent))
from board_decl import declared  # noqa: E402

ROOT = Path(__file__).parents[1]


@pytest.mark.parametrize("name, rig", [("demo-balance-check", "balance"),
                                       ("demo-wheel-relay", "wheel")])
def test_demo_sequences_fit_their_boards(name, rig):
    params, loops, signals, info = declared(rig)
    seq = load_sequence(ROOT / "sequences" / f"{name}.yaml")
    assert check_sequence_against_board(seq, params, loops, signals, info=info) == []


def test_every_problem_is_named_with_its_step_and_line():
    text = """\
sequence: 1
name: wrong board
rig: balance
guards: {tilt_deg: 10, wheel_fraction: 0.5}
steps:
  - push: profiles/demo-balance-start.yaml
  - set: {speed_kp: 0.2, spead_kp: 1}
  - hold
  - wait: {settled: {signal: tilt, below: 1, for_s: 1}, timeout_s: 5}
  - relay: {loop: tilt, amplitude: 1, hysteresis: 0.1, bound: 5, max_s: 10}
  - repeat:
      for: {param: speed_ki, values: [1, 60]}
      steps:
        - sweep: {loop: speed, shape: step, at: setpoint, amplitudes: [1], repeats: 1, spacing_s: 1, time_s: 1}
  - set: {supply_v: 12}
"""
    seq = load_sequence_text(text, ROOT / "sequences" / "x.yaml")
    params, loops, signals, info = declared("wheel")
    got = [(p.line, p.field, p.severity, p.message) for p in
           check_sequence_against_board(seq, params, loops, signals, info=info)]
    assert got[:3] == [
        (None, "rig", "error", "the sequence is for a 'balance' rig; the board is a 'wheel' rig"),
        (None, "guards.tilt_deg", "warning", "the board has no tilt signal; this guard cannot act"),
        (6, "steps[1].push.profile", "error",
         "demo-balance-start.yaml: rig: profile is for a 'balance' rig; the board is a 'wheel' rig"),
    ]
    rest = [g for g in got[3:] if g[1] != "steps[1].push.profile"]
    assert rest == [
        (7, "steps[2].set.spead_kp", "error", "the board has no parameter 'spead_kp' (did you "
                                              "mean 'speed_kp'?)"),
        (9, "steps[4].wait.settled.signal", "error", "the board has no signal 'tilt'; it has: "
                                                    "wheel, sp, cmd, current, relay"),
        (10, "steps[5].relay.loop", "error", "the board has no loop 'tilt'; it has: speed"),
        (11, "steps[6].repeat.for.param", "error", "speed_ki = 60 is outside the board's range "
                                                   "0..50 V/rev"),
        (15, "steps[7].set.supply_v", "error", "supply_v is read-only on this board"),
    ]
    params, loops, signals, info = declared("plant")  # no trip_wheel on this board
    got = check_sequence_against_board(seq, params, loops, signals)
    assert ("guards.wheel_fraction", "the board declares no trip_wheel parameter to take a "
            "fraction of") in [(p.field, p.message) for p in got]
