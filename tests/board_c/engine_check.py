"""Collected only when named on the command line (the RIGBENCH_TEST_BOARD=c step of .ci/run):
proves a run with RIGBENCH_TEST_BOARD=c really talks to the C board library."""

import os

from rigbench.link.link import Link


def test_sim_boards_of_this_run_are_the_c_library():
    assert os.environ.get("RIGBENCH_TEST_BOARD") == "c"
    link = Link.open("sim://wheel")
    try:
        assert link.info.board == "c-wheel-1" and link.info.firmware == "1.0.0"
    finally:
        link.close()
