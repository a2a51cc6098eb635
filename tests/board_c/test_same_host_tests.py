"""The host cannot tell the C board library from the Python simulated board: host-level
test modules written for the simulated board pass again with every sim:// board replaced by
the C library on the same plants (RIGBENCH_TEST_BOARD=c, tests/conftest.py).

The modules: pushing profiles, the experiment runner and its guards, relay tests on stable
plants and on the unstable balance loop (integral-channel relay), sweeps, sequences, the
link over sim://, and the fault scenarios (corrupted, dropped, stalled, reset, unplugged).
"""

import os
import subprocess
import sys
from pathlib import Path

from cbuild import built

HERE = Path(__file__).parent
TESTS = HERE.parent
MODULES = [
    HERE / "engine_check.py",
    TESTS / "test_profiles_push.py",
    TESTS / "experiments" / "test_exp_runner.py",
    TESTS / "experiments" / "test_exp_relay_plants.py",
    TESTS / "experiments" / "test_exp_balance.py",
    TESTS / "experiments" / "test_exp_sweep.py",
    TESTS / "test_sequence_run.py",
    TESTS / "link" / "test_link_sim.py",
    TESTS / "faults",
]


def test_host_tests_pass_against_the_c_board():
    built()
    env = dict(os.environ, RIGBENCH_TEST_BOARD="c")
    proc = subprocess.run([sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider",
                           *map(str, MODULES)], capture_output=True, text=True, env=env,
                          cwd=TESTS.parent, timeout=600)
    tail = proc.stdout[-4000:] + proc.stderr[-2000:]
    assert proc.returncode == 0, tail
    assert " passed" in tail and " failed" not in tail and "error" not in tail.lower(), tail
