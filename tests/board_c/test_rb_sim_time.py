"""rb-sim stamps each loop period with its nominal time (host/main.c): telemetry frames carry
the time the sensors were read, exactly one loop period apart, also when the process was not
scheduled in time (the simulation then waits and reports the missed periods)."""

from __future__ import annotations

import subprocess
import time

from rigbench.wire import HostCodec
from rigbench.wire import messages as m
from rigbench.wire.frame import encode_frame
from cbuild import built


def test_telemetry_stamps_are_whole_loop_periods_apart():
    proc = subprocess.Popen([str(built().sim), "--stdio", "--rate", "500"],
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE)
    proc.stdin.write(encode_frame("hb") + encode_frame("stream 1 rate_hz=500"))
    proc.stdin.flush()
    time.sleep(0.6)
    out, err = proc.communicate(timeout=20)       # end of input ends rb-sim
    frames = [x for x in HostCodec().receive(out) if isinstance(x, m.Telemetry)]
    assert len(frames) > 50
    period_us = 2000                               # 1 / 500 Hz
    for a, b in zip(frames, frames[1:]):
        assert b.frame == a.frame + 1
        dt = (b.time_us - a.time_us) % (1 << 32)
        # wall-clock stamps would jitter by microseconds and bunch up after a delay
        assert dt == period_us, (a, b)
    assert all(f.time_us % period_us == 0 for f in frames)
    assert b"Sanitizer" not in err
