"""The host cannot tell the C board library from the Python simulated board: host-level
test modules written for the simulated board pass again with every sim:// board replaced by
the C library on the same plants (RIGBENCH_TEST_BOARD=c, tests/conftest.py).

That run is its own step in .ci/run, so a failure there is reported test by test:

    RIGBENCH_TEST_BOARD=c python -m pytest -q tests/board_c/engine_check.py ...

The modules: pushing profiles, the experiment runner and its guards, relay tests on stable
plants and on the unstable balance loop (integral-channel relay), sweeps, sequences, the
link over sim://, and the fault scenarios (corrupted, dropped, stalled, reset, unplugged).
The check here keeps that step honest: it names modules that exist and cover each of these
areas; tests/board_c/engine_check.py, run in that step, proves the board there is the C one.
"""

import shlex
from pathlib import Path

HERE = Path(__file__).parent
ROOT = HERE.parents[1]
# the areas the C board must pass, as paths the CI step has to name
MUST_COVER = [
    "tests/board_c/engine_check.py",
    "tests/test_profiles_push.py",
    "tests/experiments/test_exp_runner.py",
    "tests/experiments/test_exp_relay_plants.py",
    "tests/experiments/test_exp_balance.py",
    "tests/experiments/test_exp_sweep.py",
    "tests/test_sequence_run.py",
    "tests/link/test_link_sim.py",
    "tests/faults",
]


def ci_step() -> list[str]:
    """The arguments of the RIGBENCH_TEST_BOARD=c step of .ci/run (continuations joined)."""
    text = (ROOT / ".ci" / "run").read_text().replace("\\\n", " ")
    lines = [ln for ln in text.splitlines() if ln.startswith("RIGBENCH_TEST_BOARD=c ")]
    assert len(lines) == 1, "one RIGBENCH_TEST_BOARD=c step in .ci/run"
    return shlex.split(lines[0])


def test_the_ci_step_runs_every_module_and_they_exist():
    args = ci_step()
    assert args[1:5] == [".venv/bin/python", "-m", "pytest", "-q"], args
    paths = [a for a in args if a.startswith("tests/")]
    assert sorted(paths) == sorted(MUST_COVER)
    for p in paths:
        assert (ROOT / p).exists(), p

