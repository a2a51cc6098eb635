"""How fast `rigbench kill` from a second terminal stops a motor another rigbench program
drives: the kill request over the holder's kill socket (rigbench.link.killsock).

A simulated balance board (`rigbench sim`) on a pseudo-terminal in another process, paced
in wall time; this script holds the port (``Link.open``, which starts the kill service),
arms and holds, then asks for the kill through the socket as a second terminal does,
``--runs`` times (clear and arm again between). Printed per run and as median / max:

- ``answer``: wall time from the request to the holder's "sent" answer (the kill bytes are
  written), target < 50 ms;
- ``board``: from the kill bytes being written to the board's trip time stamp (board clock
  mapped onto the host's by the telemetry, link latency taken out; what PROTOCOL.md §7.1
  bounds), target < 50 ms. Negative: the board stamps its trip with the time of the last
  sample it read (rigbench's simulated board does, PROTOCOL.md §6.3), up to one loop
  period before the moment it acted;
- ``confirmed``: wall time until the holder reports the board confirmed.

Not a test: the figures depend on the machine and its load (printed).

    PYTHONPATH=bench python scripts/bench_kill.py [--runs 20]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import time

from rigbench.link import Link
from rigbench.link.killsock import request_kill


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--runs", type=int, default=20)
    args = ap.parse_args()
    sim = subprocess.Popen([sys.executable, "-m", "rigbench", "sim", "balance"],
                           stdout=subprocess.PIPE, text=True)
    try:
        line = sim.stdout.readline()
        path = line.split(" on ")[-1].split()[0] if " on " in line else line.strip()
        answers, boards, confirms = [], [], []
        with Link.open(path) as link:
            link.stream(500)
            for i in range(args.runs):
                link.clear()
                link.sleep(0.2)
                link.arm()
                link.mode("hold")
                link.sleep(0.3)
                t0, w0 = link.now(), time.perf_counter()   # link clock: monotonic here
                out = request_kill(path)
                t1 = time.perf_counter()
                if not out or not out.get("sent"):
                    print(f"run {i + 1}: no answer from the kill service")
                    return 1
                answers.append(out["sent_s"] - t0)
                boards.append(out.get("latency_board_s") or float("nan"))
                confirms.append(t1 - w0)
                print(f"run {i + 1:2d}: answer {answers[-1] * 1e3:6.2f} ms  board "
                      f"{boards[-1] * 1e3:6.2f} ms  confirmed {confirms[-1] * 1e3:6.2f} ms  "
                      f"motor {out.get('motor')}")
        load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
        for name, xs in (("answer", answers), ("board", boards), ("confirmed", confirms)):
            xs = [x for x in xs if x == x]   # board: runs without a trip event (already
            if not xs:                       # tripped, e.g. the rig fell) are left out
                continue
            ratio = f"{50e-3 / max(xs):.1f}x" if max(xs) > 0 else "met: never after the send"
            print(f"{name:9s} median {statistics.median(xs) * 1e3:6.2f} ms  max "
                  f"{max(xs) * 1e3:6.2f} ms  (target < 50 ms: {ratio})")
        print(f"load average {load:.2f}")
    finally:
        sim.terminate()
        sim.wait(10)
    return 0


if __name__ == "__main__":
    sys.exit(main())
