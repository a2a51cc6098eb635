"""Benchmark: how fast the simulated board runs a whole experiment on the virtual clock.

A 60 s relay test on the balance rig's tilt loop through ``serial.serial_for_url(
'sim://balance?clock=virtual')``, the host reading every byte and decoding it with
``HostCodec`` (heartbeat every 0.1 s of simulated time), telemetry at 500 Hz and at
100 Hz. Prints simulated seconds per wall second, and the bare board balancing in hold (no port,
no telemetry) for comparison.

Run: python scripts/bench_sim.py
"""

from __future__ import annotations

import time

import serial

from rigbench.rig.firmware.board import make_board
from rigbench.wire import HostCodec
from rigbench.wire import messages as m
from rigbench.link.urls import register_url_handlers  # noqa: E402

register_url_handlers()  # sim:// for serial_for_url


def relay_run(rate_hz: float, seconds: float = 60.0) -> dict:
    port = serial.serial_for_url("sim://balance?clock=virtual&seed=1", timeout=0.05)
    codec = HostCodec()
    clock = port.clock
    counts = {"telemetry": 0, "bad": 0, "bytes": 0}
    next_hb = 0.0

    def pump_until(t_end: float, want_seq: int | None = None):
        nonlocal next_hb
        while clock.now() < t_end:
            if clock.now() >= next_hb:
                port.write(codec.encode(m.Heartbeat()))
                next_hb = clock.now() + 0.1
            data = port.read(port.in_waiting or 1)
            counts["bytes"] += len(data)
            for x in codec.receive(data):
                if isinstance(x, m.Telemetry):
                    counts["telemetry"] += 1
                elif want_seq is not None and isinstance(x, (m.Ok, m.Err)) and x.seq == want_seq:
                    return x
        return None

    def ask(cls, *args):
        msg, frame = codec.command(cls, *args)
        port.write(frame)
        reply = pump_until(clock.now() + 1.0, msg.seq)
        if not isinstance(reply, m.Ok):
            raise SystemExit(f"{cls.VERB} refused: {reply}")
        return reply

    pump_until(0.3)
    ask(m.Arm)
    ask(m.Mode, "hold")
    pump_until(clock.now() + 2.0)
    ask(m.Stream, rate_hz)
    ask(m.Mode, "relay", (("loop", "tilt"), ("amp", "0.5"), ("hyst", "0.06"), ("bound", "8")))
    t0_sim, t0 = clock.now(), time.perf_counter()
    pump_until(t0_sim + seconds)
    wall = time.perf_counter() - t0
    board = port.board
    counts["bad"] = codec.bad_frames
    port.close()
    return {"sim_s": seconds, "wall_s": wall, "ratio": seconds / wall, "motor": board.motor,
            "drops": board.drops, **counts}


def bare_board(seconds: float = 60.0, rig: str = "balance", **rig_kw) -> float:
    """Simulated s per wall s of a board closing its loops in hold (no port, no telemetry)."""
    board = make_board(rig, seed=1, **rig_kw)
    codec = HostCodec()
    hb = codec.encode(m.Heartbeat())
    board.receive(hb)
    board.receive(codec.command(m.Arm)[1] + codec.command(m.Mode, "hold")[1])
    assert board.motor == "running"
    n = round(seconds * board.rate_hz)
    t0 = time.perf_counter()
    for k in range(n):
        if k % 50 == 0:
            board.receive(hb)
        board.step()
        board.output()
    return seconds / (time.perf_counter() - t0)


def main() -> None:
    for rate in (500.0, 100.0):
        r = relay_run(rate)
        print(f"relay test 60 s, telemetry {rate:g} Hz, via serial_for_url + HostCodec: "
              f"{r['ratio']:.1f} simulated s per wall s ({r['wall_s']:.2f} s wall; "
              f"{r['telemetry']} frames, {r['bytes']} bytes, {r['bad']} bad, "
              f"{r['drops']} dropped; motor {r['motor']})")
    print(f"bare board balancing (hold), no telemetry, no port: {bare_board():.1f} "
          "simulated s per wall s")


if __name__ == "__main__":
    main()
