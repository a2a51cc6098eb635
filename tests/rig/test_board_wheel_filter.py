"""The simulated wheel board's wheel-speed filter (parameter wheel_tc_s) against
scipy.signal.lfilter applied to the encoder's raw count differences."""

import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from rigbench.rig.firmware.board import make_board
from rigbench.wire import messages as m

sys.path.insert(0, str(Path(__file__).parent))
from sim_host import Host  # noqa: E402


def _run(tc_s):
    """Open-loop 3 V on the wheel board streaming at its loop rate; returns the streamed
    wheel speed and the raw encoder speed (rev/s) the firmware read at each step."""
    board = make_board("wheel", seed=4)
    raw = []
    sensors = board.plant.sensors

    def logged():
        s = sensors()
        raw.append(s["wheel_rad_s"] / (2 * math.pi))
        return s

    board.plant.sensors = logged
    h = Host(board)
    if tc_s is not None:
        assert isinstance(h.ask(m.Set, (("wheel_tc_s", tc_s),)), m.Ok)
    h.ask(m.Stream, board.rate_hz)
    h.start("open", ("loop", "speed"), ("out", "3"), ("time_s", "1"))
    msgs = h.run(0.6)
    return h.column(msgs, "wheel"), np.array(raw), board


@pytest.mark.parametrize("tc_s", [None, 0.0, 0.02])
def test_wheel_speed_is_the_first_order_filter_of_the_encoder_difference(tc_s):
    wheel, raw, board = _run(tc_s)
    tc = board.params.values["wheel_tc_s"]
    assert tc == (0.005 if tc_s is None else tc_s)       # the declared default is 5 ms
    # y[k] = y[k−1] + a·(x[k] − y[k−1]), a = h/(tc + h), started at the first reading:
    # lfilter([a], [1, −(1 − a)]) with the initial state that makes y[0] = x[0]
    a = board.dt_s / (tc + board.dt_s)
    ref = signal.lfilter([a], [1.0, -(1.0 - a)], raw, zi=[(1.0 - a) * raw[0]])[0]
    # the stream's last rows are the last readings: compare the tail, where both agree
    n = min(len(wheel), 200)
    assert np.max(np.abs(raw[-n:] - raw[-n:].mean())) > 0.05   # the encoder is noisy
    assert wheel[-n:] == pytest.approx(ref[-n:], abs=1e-4)     # telemetry in 6 digits
    if tc > 0:
        assert np.std(np.diff(wheel[-n:])) < 0.7 * np.std(np.diff(raw[-n:]))
