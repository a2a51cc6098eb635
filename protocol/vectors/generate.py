"""Write protocol/vectors/frames.json from the bodies and meanings listed here.

Run: python protocol/vectors/generate.py. The meanings are written by hand from
PROTOCOL.md; only the CRC field is computed (CRC-16/IBM-3740, a bit-by-bit loop written out
below so this script does not depend on the package). Re-run after changing the list.
"""

from pathlib import Path

import json


def crc16(data: bytes) -> int:
    crc = 0xFFFF
    for byte in data:
        crc ^= byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ 0x1021) & 0xFFFF if crc & 0x8000 else (crc << 1) & 0xFFFF
    return crc


def frame(body: str) -> str:
    return "@%s|%04X\n" % (body, crc16(body.encode()))


# A loop reply with every optional field of PROTOCOL.md §5.4.
_LOOP_FULL = ("ok 4 index=1 name=tilt measure=tilt output=cmd gains=tilt_kp,tilt_ki,tilt_kd "
              "plant=unstable relay=integral setpoint=sp limit=cmd_limit dfilt=tilt_dfilt_s "
              "rate=rate action=direct")
_LOOP_BARE = ("ok 4 index=0 name=trim measure=wheel output=sp gains=trim_kp,trim_ki,trim_kd "
              "plant=integrating relay=output")

# (direction, body, meaning). direction: who sends it: "host" or "board".
GOOD = [
    ("host", "hello 1 1.0", {"type": "Hello", "seq": 1, "version": "1.0"}),
    ("host", "param 2 0", {"type": "DescribeParam", "seq": 2, "index": 0}),
    ("host", "signal 3 4", {"type": "DescribeSignal", "seq": 3, "index": 4}),
    ("host", "loop 4 1", {"type": "DescribeLoop", "seq": 4, "index": 1}),
    ("host", "get 5 tilt_kp tilt_ki", {"type": "Get", "seq": 5, "names": ["tilt_kp", "tilt_ki"]}),
    ("host", "set 6 tilt_kp=0.64 tilt_ki=9.9 tilt_kd=0",
     {"type": "Set", "seq": 6, "values": {"tilt_kp": 0.64, "tilt_ki": 9.9, "tilt_kd": 0.0}}),
    ("host", "set 7 trip_tilt=2.5e1", {"type": "Set", "seq": 7, "values": {"trip_tilt": 25.0}}),
    ("host", "stage 21 tilt_kp=0.64 trim_kp=0.1",
     {"type": "Stage", "seq": 21, "values": {"tilt_kp": 0.64, "trim_kp": 0.1}}),
    ("host", "save 8", {"type": "Save", "seq": 8}),
    ("host", "restore 9", {"type": "Restore", "seq": 9}),
    ("host", "arm 10", {"type": "Arm", "seq": 10}),
    ("host", "disarm 11", {"type": "Disarm", "seq": 11}),
    ("host", "clear 12", {"type": "Clear", "seq": 12}),
    ("host", "mode 13 hold", {"type": "Mode", "seq": 13, "name": "hold", "args": {}}),
    ("host", "mode 14 relay loop=tilt amp=0.5 hyst=0.06 bias=0 bound=8",
     {"type": "Mode", "seq": 14, "name": "relay",
      "args": {"loop": "tilt", "amp": "0.5", "hyst": "0.06", "bias": "0", "bound": "8"}}),
    ("host", "mode 15 open loop=speed out=20 time_s=2",
     {"type": "Mode", "seq": 15, "name": "open", "args": {"loop": "speed", "out": "20", "time_s": "2"}}),
    ("host", "mode 16 inject loop=tilt shape=pulse at=body amp=0.05 time_s=0.1",
     {"type": "Mode", "seq": 16, "name": "inject",
      "args": {"loop": "tilt", "shape": "pulse", "at": "body", "amp": "0.05", "time_s": "0.1"}}),
    ("host", "mode 17 off", {"type": "Mode", "seq": 17, "name": "off", "args": {}}),
    ("host", "stream 18 rate_hz=250", {"type": "Stream", "seq": 18, "rate_hz": 250.0}),
    ("host", "stream 20 rate_hz=1e-310", {"type": "Stream", "seq": 20, "rate_hz": 1e-310}),
    ("host", "kill 19", {"type": "Kill", "seq": 19}),
    ("host", "status 65535", {"type": "StatusRequest", "seq": 65535}),
    ("host", "hb", {"type": "Heartbeat"}),
    ("board", "ok 1 proto=1.0 board=demo-balance-1 fw=0.1.0 rig=balance rate_hz=500 "
     "watchdog_ms=500 params=20 signals=7 loops=2 sim=1",
     {"type": "Ok", "seq": 1, "fields": {
         "proto": "1.0", "board": "demo-balance-1", "fw": "0.1.0", "rig": "balance",
         "rate_hz": "500", "watchdog_ms": "500", "params": "20", "signals": "7",
         "loops": "2", "sim": "1"}}),
    ("board", "ok 2 index=0 name=tilt_kp unit=rev/s/deg min=0 max=10 value=0.64 access=rw",
     {"type": "Ok", "seq": 2, "fields": {
         "index": "0", "name": "tilt_kp", "unit": "rev/s/deg", "min": "0", "max": "10",
         "value": "0.64", "access": "rw"}}),
    ("board", "ok 4 index=1 name=tilt measure=tilt output=cmd gains=tilt_kp,tilt_ki,tilt_kd "
     "plant=unstable relay=integral",
     {"type": "Ok", "seq": 4, "fields": {
         "index": "1", "name": "tilt", "measure": "tilt", "output": "cmd",
         "gains": "tilt_kp,tilt_ki,tilt_kd", "plant": "unstable", "relay": "integral"}}),
    ("board", "err 6 range tilt_kp 0..10", {"type": "Err", "seq": 6, "code": "range", "text": "tilt_kp 0..10"}),
    ("board", "ok 20 rate_hz=1.164153e-7", {"type": "Ok", "seq": 20, "fields": {"rate_hz": "1.164153e-7"}}),
    ("board", "err 16 bad_args shape must be pulse or step",
     {"type": "Err", "seq": 16, "code": "bad_args", "text": "shape must be pulse or step"}),
    ("board", "err 10 interlock heartbeat,tilt",
     {"type": "Err", "seq": 10, "code": "interlock", "text": "heartbeat,tilt"}),
    ("board", "tm 1234 4294967000 0.812 -3.5 12.25 0 1",
     {"type": "Telemetry", "frame": 1234, "time_us": 4294967000,
      "values": [0.812, -3.5, 12.25, 0.0, 1.0]}),
    ("board", "tm 0 12 1e-3 -2.5E+2", {"type": "Telemetry", "frame": 0, "time_us": 12, "values": [0.001, -250.0]}),
    ("board", "st 5000000 mode=hold loop=- motor=running fault=none why=none drops=0 rx_err=1 hb_ms=40",
     {"type": "Status", "time_us": 5000000, "fields": {
         "mode": "hold", "loop": "-", "motor": "running", "fault": "none", "why": "none",
         "drops": "0", "rx_err": "1", "hb_ms": "40"}}),
    ("board", "ev 5000123 trip cause=tilt_limit value=25.3",
     {"type": "Event", "time_us": 5000123, "kind": "trip", "fields": {"cause": "tilt_limit", "value": "25.3"}}),
    ("board", "ev 0 boot reason=power", {"type": "Event", "time_us": 0, "kind": "boot", "fields": {"reason": "power"}}),
    ("board", "ev 777 mode mode=relay loop=tilt",
     {"type": "Event", "time_us": 777, "kind": "mode", "fields": {"mode": "relay", "loop": "tilt"}}),
    ("board", _LOOP_FULL, {"type": "Ok", "seq": 4, "fields": {
        "index": "1", "name": "tilt", "measure": "tilt", "output": "cmd",
        "gains": "tilt_kp,tilt_ki,tilt_kd", "plant": "unstable", "relay": "integral",
        "setpoint": "sp", "limit": "cmd_limit", "dfilt": "tilt_dfilt_s", "rate": "rate",
        "action": "direct"}}),
]

# (direction, raw line as written (escapes allowed), error code it must raise)
BAD = [
    ("host", "@hello 1 1.0|0000\n", "crc"),
    ("host", "@hello 1 1.0|12G4\n", "crc"),
    ("host", "@hello 1 1.0|12\n", "crc"),
    ("host", "@hello 1 1.0\n", "truncated"),
    ("host", "@hello 1 1@" + frame("hb")[1:], "truncated"),
    ("host", "@" + "x" * 250 + "|0000\n", "too_long"),
    ("host", "AT+GCAP\r\n", "junk"),
    ("host", "garbage" + frame("hb"), "junk"),
    ("host", "@hello 1 1.0\t|" + "%04X" % crc16(b"hello 1 1.0\t") + "\n", "bad_char"),
    ("host", frame("jump 3"), "unknown_verb"),
    ("host", frame("set 3 tilt_kp=abc"), "bad_number"),
    ("host", frame("set 3 tilt_kp=nan"), "bad_number"),
    ("host", frame("set 3 tilt_kp=.5"), "bad_number"),
    ("host", frame("set 3 tilt_kp=1 tilt_kp=2"), "bad_field"),
    ("host", frame("set 3"), "bad_field"),
    ("host", frame("stage 3"), "bad_field"),
    ("host", frame("stage 3 tilt_kp=1 tilt_kp=2"), "bad_field"),
    ("host", frame("get 70000 tilt_kp"), "bad_number"),
    ("host", frame("mode 3 dance"), "bad_field"),
    ("host", frame("tm 1 2 3"), "wrong_direction"),
    ("board", frame("tm 1 2 x"), "bad_number"),
    ("board", frame("tm 4294967296 2 1"), "bad_number"),
    ("board", frame("ok"), "bad_field"),
    ("board", frame("ok 1 name"), "bad_field"),
    ("board", frame("hello 1 1.0"), "wrong_direction"),
    ("board", frame("wat 1"), "unknown_verb"),
]

# Byte streams and what a receiver counts in them (PROTOCOL.md §2: errors are counted byte
# by byte, the same however the bytes are split into reads). (raw bytes as written, the
# frame errors in order, the bodies read, kill bytes seen)
_ST = frame("status 7")
STREAMS = [
    ("xx@abc@" + _ST[1:], ["junk", "truncated"], ["status 7"], 0),
    ("@status 7|" + "@" + _ST[1:], ["truncated"], ["status 7"], 0),
    ("\r\n" + _ST.replace("\n", "\r\n"), [], ["status 7"], 0),
    ("\r\r\n" + _ST, ["junk"], ["status 7"], 0),
    ("x" * 250 + "\n" + _ST, ["too_long"], ["status 7"], 0),
    ("@" + "y" * 250 + _ST, ["too_long"], ["status 7"], 0),
    ("@sta\x18tus 7|0000\n" + _ST, ["junk"], ["status 7"], 1),
    ("junk\x18" + _ST, [], ["status 7"], 1),
    ("\n\n" + _ST + "AT\r\n", ["junk"], ["status 7"], 0),
]

# Exchanges with a board just booted, heartbeats flowing, motor off (PROTOCOL.md §4.2, §7):
# each step sends a body (or "KILL": one kill byte 0x18) and lists what the board answers
# before the next step, in order: the start of each reply body (`ok <seq>` or `err <seq>
# <code>`) and each event without its time (`ev trip cause=kill`); status and telemetry
# frames are left out. (name, [(send, [answers])])
EXCHANGES = [
    ("a restarted host sends the same hello after a trip and is answered",
     [("hello 1 1.0", ["ok 1 proto=1.0"]), ("KILL", ["ev trip cause=kill"]),
      ("hello 1 1.0", ["ok 1 proto=1.0"]), ("status 2", ["ok 2 mode=off"])]),
    ("a resend after a trip gets state and is not acted on again",
     [("clear 5", ["ok 5 motor=off"]), ("KILL", ["ev trip cause=kill"]),
      ("clear 5", ["err 5 state"]), ("status 6", ["ok 6 mode=off loop=- motor=tripped"])]),
    ("a hello clears the resend memory",
     [("status 5", ["ok 5 mode=off"]), ("hello 6 1.0", ["ok 6 proto=1.0"]),
      ("KILL", ["ev trip cause=kill"]), ("status 5", ["ok 5 mode=off loop=- motor=tripped"])]),
    ("three kill bytes latch one trip and send one event",
     [("KILL", ["ev trip cause=kill"]), ("KILL", []), ("KILL", []),
      ("kill 3", ["ok 3 motor=tripped"]), ("clear 4", ["ev clear", "ok 4 motor=off"]),
      ("clear 4", ["ok 4 motor=off"])]),
    ("disarm leaves a tripped motor tripped",
     [("kill 1", ["ev trip cause=kill", "ok 1 motor=tripped"]),
      ("disarm 2", ["ok 2 motor=tripped"]), ("arm 3", ["err 3 interlock fault"])]),
    ("an unknown verb is refused with unknown_verb",
     [("jump 3", ["err 3 unknown_verb"]), ("status 4", ["ok 4 mode=off"])]),
    ("a kill that fails to parse still stops",
     [("kill x", ["ev trip cause=kill"]), ("clear 1", ["ev clear", "ok 1 motor=off"]),
      ("kill 2 now", ["ev trip cause=kill", "err 2 bad_args"]),
      ("status 3", ["ok 3 mode=off loop=- motor=tripped fault=kill"])]),
    ("a trip forces mode off",
     [("arm 1", ["ok 1 motor=armed"]), ("mode 2 hold", ["ev mode mode=hold", "ok 2 mode=hold"]),
      ("KILL", ["ev trip cause=kill", "ev mode mode=off loop=-"])]),
    ("numbers and sequence numbers",
     [("status 007", ["ok 7 mode=off"]), ("set 1 tilt_kp=1e999", ["err 1 bad_args"]),
      ("set 2 tilt_kp=1e-999", ["ok 2 tilt_kp=0"]),
      ("stream 3 rate_hz=9999", ["ok 3 rate_hz=500"]), ("stream 4 rate_hz=0", ["ok 4 rate_hz=0"])]),
    ("the first error in argument order wins; names and ranges before the motor state",
     [("set 1 nope=1 tilt_kp=99", ["err 1 unknown_name"]),
      ("set 2 tilt_kp=99 nope=1", ["err 2 range tilt_kp 0..10"]),
      ("set 3 tilt_kp=1 tilt_kp=2", ["err 3 bad_args"]),
      ("mode 4 open loop=tilt out=0 time_s=99", ["err 4 range time_s 0..10"]),
      ("mode 5 open loop=nope out=0 time_s=1", ["err 5 unknown_name"]),
      ("mode 6 hold", ["err 6 not_armed"])]),
]

_LOOP_DECL = {"index": 1, "name": "tilt", "measure": "tilt", "output": "cmd",
              "gains": ["tilt_kp", "tilt_ki", "tilt_kd"], "plant": "unstable",
              "relay": "integral"}
_NO_OPTIONAL = {"setpoint": None, "limit": None, "dfilt": None, "rate": None, "action": None}

# Replies to `loop` (PROTOCOL.md §5.4): frames the codec reads (an ok reply), then what the
# host reads from their fields: the declared loop (absent optional fields: null), or the
# error code. (body, declaration or error code)
LOOP_REPLIES = [
    (_LOOP_FULL, {**_LOOP_DECL, "setpoint": "sp", "limit": "cmd_limit",
                  "dfilt": "tilt_dfilt_s", "rate": "rate", "action": "direct"}),
    (_LOOP_BARE, {**_LOOP_DECL, **_NO_OPTIONAL, "index": 0, "name": "trim", "measure": "wheel",
                  "output": "sp", "gains": ["trim_kp", "trim_ki", "trim_kd"],
                  "plant": "integrating", "relay": "output"}),
    (_LOOP_BARE + " setpoint=wheel_sp action=reverse",
     {**_LOOP_DECL, **_NO_OPTIONAL, "index": 0, "name": "trim", "measure": "wheel",
      "output": "sp", "gains": ["trim_kp", "trim_ki", "trim_kd"], "plant": "integrating",
      "relay": "output", "setpoint": "wheel_sp", "action": "reverse"}),
    (_LOOP_FULL.replace("action=direct", "action=sideways"), "bad_field"),
    (_LOOP_FULL.replace("limit=cmd_limit", "limit=Cmd_Limit"), "bad_field"),
    (_LOOP_FULL.replace("rate=rate", "rate=deg/s"), "bad_field"),
    (_LOOP_FULL.replace("plant=unstable", "plant=wobbly"), "bad_field"),
]


def main() -> None:
    out = {
        "about": "Test vectors for protocol/PROTOCOL.md version 1.0. 'frame' is the exact byte "
        "string (JSON string escapes: \\n = LF, \\r = CR, \\u0018 = kill byte). Good frames decode to 'meaning'; bad ones must be rejected "
        "with 'error' (PROTOCOL.md §2-§3). direction = who sends it. 'streams' are byte "
        "streams ('bytes', same escapes) with the frame errors a receiver counts in them in "
        "order, the bodies it reads and the kill bytes it sees, however the bytes are split "
        "into reads. 'exchanges' are steps with a board just booted (heartbeats flowing, "
        "motor off): 'send' is a body, or KILL for one kill byte; 'answers' are the starts of "
        "the replies and events (time left out) it sends before the next step, status and "
        "telemetry left out (§4.2, §7). 'loop_replies' are "
        "board replies to `loop` (§5.4) that every codec reads; their fields declare the "
        "loop in 'declares' (optional fields absent: null) or must be refused with 'error'.",
        "crc_check": {"algorithm": "CRC-16/IBM-3740", "poly": "0x1021", "init": "0xFFFF",
                      "refin": False, "refout": False, "xorout": "0x0000",
                      "input": "123456789", "check": "0x29B1"},
        "good": [{"direction": d, "frame": frame(b), "meaning": m} for d, b, m in GOOD],
        "bad": [{"direction": d, "frame": raw, "error": e} for d, raw, e in BAD],
        "streams": [{"bytes": raw, "errors": e, "bodies": b, "kills": k}
                    for raw, e, b, k in STREAMS],
        "exchanges": [{"about": name, "steps": [{"send": send, "answers": answers}
                                                 for send, answers in steps]}
                      for name, steps in EXCHANGES],
        "loop_replies": [
            {"frame": frame(b), **({"error": r} if isinstance(r, str) else {"declares": r})}
            for b, r in LOOP_REPLIES],
    }
    path = Path(__file__).with_name("frames.json")
    path.write_text(json.dumps(out, indent=1, ensure_ascii=True) + "\n")
    print(f"wrote {path} ({len(GOOD)} good, {len(BAD)} bad)")


if __name__ == "__main__":
    main()
