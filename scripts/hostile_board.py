"""Host memory and time against a board that misbehaves on purpose: a blank-line flood, an
event flood while recording, huge declarations. Prints the peak resident memory of this
process and the time each case took (the fake board of tests/link, virtual clock).

    python scripts/hostile_board.py [--seconds 30]
"""

from __future__ import annotations

import argparse
import resource
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "bench"))
sys.path.insert(0, str(ROOT / "tests" / "link"))

from fake_board import FakeBoard, FakePort  # noqa: E402

from rigbench.link import Link, LinkError  # noqa: E402
from rigbench.recordings.recording import Recorder, load_recording  # noqa: E402
from rigbench.wire.codec import BoardCodec  # noqa: E402
from rigbench.wire.messages import Event, Hello, Ok  # noqa: E402

MB = 1 << 20


def rss_mb() -> float:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * resource.getpagesize() / MB


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def flood(board, payload: bytes, every_s: float) -> None:
    def push(b, t):
        b.out += payload
        b.schedule.append((t + every_s, push))
    board.schedule.append((0.0, push))


class HugeHello(FakeBoard):
    def _act(self, msg, t):
        reply = super()._act(msg, t)
        if isinstance(msg, Hello):
            return Ok(msg.seq, tuple({**dict(reply.fields), "signals": "70000",
                                      "params": "1000000"}.items()))
        return reply


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=30.0, help="board time of each flood")
    args = ap.parse_args(argv)
    print(f"start: RSS {rss_mb():.0f} MB")

    t0 = time.perf_counter()
    try:
        Link.attach(FakePort(HugeHello()), url="fake://huge")
        print("huge declaration: ACCEPTED")
    except LinkError as exc:
        print(f"huge declaration: refused in {time.perf_counter() - t0:.2f} s: {exc}")
    print(f"  RSS {rss_mb():.0f} MB")

    board = FakeBoard()
    flood(board, b"\n" * 20000, 0.002)      # 10 MB of LF per board second
    t0 = time.perf_counter()
    with Link.attach(FakePort(board), url="fake://blank") as link:
        link.stream(100)
        link.sleep(args.seconds)
        tap = link.channel.raw
        print(f"blank-line flood, {args.seconds:g} s: {tap.blank_lines} empty lines counted, "
              f"status {link.status().motor}; {time.perf_counter() - t0:.1f} s wall, RSS "
              f"{rss_mb():.0f} MB")

    board = FakeBoard()
    flood(board, BoardCodec.encode(Event(1, "chatter", (("n", "1"),))) * 40, 0.002)
    out = Path(tempfile.mkdtemp(prefix="rigbench-hostile-")) / "flood.csv"
    t0 = time.perf_counter()
    with Link.attach(FakePort(board), url="fake://events") as link:
        link.stream(100)
        with Recorder(out, link, background=False) as rec:
            end = link.now() + args.seconds
            while link.now() < end:
                link.sleep(0.5)
                rec.poll()
    print(f"  RSS {rss_mb():.0f} MB after recording, before reading it back")
    back = load_recording(out)
    side = out.with_suffix(".yaml").stat().st_size
    print(f"event flood (20 000 ev/s), {args.seconds:g} s recorded: {len(back)} rows, "
          f"{len(back.events)} events kept, {back.sidecar['events_dropped']} dropped, sidecar "
          f"{side / 1e3:.1f} kB; {time.perf_counter() - t0:.1f} s wall, RSS {rss_mb():.0f} MB")
    print(f"peak RSS of the whole run: {peak_mb():.0f} MB (limit 200 MB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
