"""Run the fault-injection scenarios and print their figures as a Markdown table.

The scenarios are the ones tests/faults runs (tests/faults/fault_scenarios.py): a noisy line at
several rates, garbage before the handshake, partial lines, a stall, a board reset, an
unplug mid-experiment and mid-recording, a host that dies, heartbeat starvation and a host
process SIGKILLed on a pty-served board. The table in docs/FAULTS.md is this script's
output. The figures vary a little from run to run (thread timing moves where the line's
random faults land); the motor must always end off, and "accepted but wrong" stay within
what a CRC-16 lets through (0 for flipped bits; about one line in 65 536 that lost bytes).

    python scripts/fault_table.py [--seconds 3] [--noise-only] [--no-pty] [--json]

``--seconds`` sets how long each noisy-line scenario records (the tests use 3 s);
``--noise-only`` runs just the noisy-line scenarios.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from dataclasses import asdict
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))
sys.path.insert(0, str(ROOT / "tests" / "faults"))

import fault_scenarios as scenarios  # noqa: E402
from rigbench.link.urls import register_url_handlers  # noqa: E402


def _shows(o) -> str:
    parts = ["→".join(o.states_seen) if o.states_seen else o.link_state]
    if o.states_seen and o.link_state != o.states_seen[-1]:
        parts[0] += f" ({o.link_state})"
    if o.stopped_by:
        parts.append(f"experiment stopped: {o.stopped_by}")
    if o.host_events:
        parts.append(", ".join(o.host_events))
    if o.resends:
        parts.append(f"{o.resends} resends")
    return "; ".join(parts)


def _recording(o) -> str:
    if o.recording_rows is None:
        return "–"
    text = f"{o.recording_rows} rows, {'in order' if o.recording_ok else 'NOT IN ORDER'}"
    if o.recording_gap_s is not None:
        text += f", last row {o.recording_gap_s * 1e3:.0f} ms before the fault"
    return text


def _motor(o) -> str:
    return o.motor_end + (f" ({o.fault_end})" if o.fault_end else "")


def table(outcomes) -> str:
    head = ("| scenario | fault injected | line bytes hit | telemetry sent | accepted | lost "
            "(host counted) | lines refused | accepted but wrong (CRC-16 allows) | host shows | "
            "motor at end (board) | recording | link settings | notes |")
    rows = [head, "|" + "---|" * 13]
    for o in outcomes:
        sent = str(o.frames_sent) if o.frames_sent else "–"
        rows.append(
            f"| {o.scenario} | {o.fault} | {o.line_bytes_hit} | {sent} | {o.frames_accepted} | "
            f"{o.telemetry_lost} ({o.host_counted_lost}) | {o.lines_rejected} | "
            f"**{o.accepted_wrong}** (≤ {o.wrong_allowed}) | {_shows(o)} | {_motor(o)} | {_recording(o)} | {o.settings} | {o.notes} |")
    return "\n".join(rows)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=3.0,
                    help="recording time of each noisy-line scenario (s of board time)")
    ap.add_argument("--json", action="store_true", help="print one JSON object instead")
    ap.add_argument("--no-pty", action="store_true", help="skip the real-time pty scenario")
    ap.add_argument("--noise-only", action="store_true",
                    help="only the noisy-line scenarios (corrupt, drop)")
    args = ap.parse_args(argv)
    register_url_handlers()  # sim:// (importing rigbench registers nothing)
    work = Path(tempfile.mkdtemp(prefix="rigbench-faults-"))
    outcomes = []
    t0 = time.perf_counter()
    for name, run in scenarios.all_scenarios(work, pty=not args.no_pty):
        noisy = name.startswith(("corrupt", "drop"))
        if args.noise_only and not noisy:
            continue
        if noisy:
            kind, rate = name.split()
            outcomes.append(scenarios.noisy_line(kind, float(rate), seconds=args.seconds,
                                                 workdir=work))
        else:
            outcomes.append(run())
    wall = time.perf_counter() - t0
    bad = [o.scenario for o in outcomes if o.accepted_wrong > o.wrong_allowed
           or not o.motor_off or o.recording_ok is False]
    if args.json:
        print(json.dumps({"wall_s": wall, "failed": bad,
                          "scenarios": [asdict(o) | {"motor_off": o.motor_off} for o in outcomes]},
                         indent=1))
    else:
        print(table(outcomes))
        print(f"\n{len(outcomes)} scenarios in {wall:.1f} s wall; "
              f"{sum(o.accepted_wrong for o in outcomes)} accepted frames differed from what "
              f"the board sent (a CRC-16 lets {sum(o.wrong_allowed for o in outcomes)} through "
              f"at most, except with probability 1e-6 each); motor off at the end in "
              f"{sum(o.motor_off for o in outcomes)}/{len(outcomes)}.")
        if bad:
            print("FAILED: " + ", ".join(bad))
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
