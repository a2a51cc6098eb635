"""The C board library and the Python simulated board give the same answers (issue: the
Python host cannot tell them apart except by their identity words).

Both boards run the same rig declaration on plants seeded alike (tests/board_c/twin.py);
every frame either sends is compared after the normalisation of twin.normalise. Telemetry
values are compared as sent (6 significant digits): the two firmwares do the same
arithmetic in the same order in double precision, so the loops must agree to the digit.
"""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rigbench.wire.frame import encode_frame

from twin import Twin


def _session(t: Twin, loop: str, amp: float, gains: str, relax: str) -> None:
    """A whole session: discovery, refusals, hold, relay, injections, open loop, kill,
    clear, storage, watchdog."""
    for i, body in enumerate(["hello 1 1.0", "param 2 0", "signal 3 0", "loop 4 0",
                              "stream 5 rate_hz=100", "status 6", "arm 7", "mode 8 hold",
                              "get 9 nope", "set 10 nope=1", "param 11 250"]):
        t.body(body)
    t.run(0.3)
    t.body("arm 12")
    t.body("mode 13 hold")
    t.run(1.5)
    t.body(f"set 14 {gains}")
    t.run(0.5)
    t.body(f"mode 15 relay loop={loop} amp={amp} hyst=0.01")
    t.run(2.0)
    t.body(f"set 16 {gains}")                   # busy: refused during the relay
    t.body("mode 17 hold")
    t.run(0.5)
    t.body(f"mode 18 inject loop={loop} at=setpoint amp={amp / 4} time_s=0.2")
    t.run(0.5)
    t.body(f"mode 19 inject loop={loop} at=output amp={amp / 4} time_s=0.1 shape=step")
    t.run(0.5)
    t.body(f"mode 20 open loop={loop} out=0 time_s=0.2")
    t.run(0.5)
    t.send(b"\x18\x18\x18")
    t.run(0.2)
    for body in ("clear 21", "clear 21", "save 22", f"set 23 {gains}", "restore 24"):
        t.body(body)
    t.send(b"AT\r\n@hb|0000\n")               # junk, a bad CRC: counted, not answered
    t.body("set 28 tilt_kp=abc")                # a bad number: counted and answered
    t.run(2.0)                                  # a fallen rig is stood up again
    if relax:
        t.body(f"set 29 {relax}")               # wider arming limits: the wheel still spins
    t.body("arm 25")
    t.body("mode 26 hold")
    t.run(0.3)
    t.run(1.0, hb_every_s=None)                 # the host goes quiet: watchdog
    t.body("status 27")


_RELAX = "arm_tilt=10 arm_wheel=20"


@pytest.mark.parametrize("rig, kw, loop, amp, gains, relax", [
    ("balance", {"drive": "speed"}, "tilt", 0.5, "tilt_kp=0.7 tilt_ki=11 tilt_kd=0.004", _RELAX),
    ("balance", {"drive": "torque"}, "trim", 0.5, "trim_kp=0.25", _RELAX),
    ("wheel", {}, "speed", 2.0, "speed_kp=0.6 speed_ki=2.5", "arm_wheel=100"),
    ("plant", {"den": (0.001, 0.03, 0.3, 1.0), "delay_s": 0.011}, "main", 1.0,
     "main_kp=2 main_ki=3 main_kd=0.05", ""),
])
def test_a_whole_session_gives_the_same_frames(rig, kw, loop, amp, gains, relax):
    t = Twin(rig, seed=7, **kw)
    _session(t, loop, amp, gains, relax)
    assert t.differences() == []
    lines = t.lines("c")
    # the session did what it meant to: telemetry, a relay, a kill, a watchdog trip
    assert sum(x.startswith("tm ") for x in lines) > 500
    assert any(x.startswith("ev ") and "mode mode=relay" in x for x in lines)
    assert any("trip cause=kill" in x for x in lines)
    assert any("trip cause=watchdog" in x for x in lines)
    assert t.py.rx_err == t.c.rx_err == 3
    # the resend of `clear 21` after nothing changed gives the same reply, acted on once
    assert sum(" clear" in x for x in lines if x.startswith("ev ")) == 1


# ----------------------------------------------------------------------------- fuzzing

_NAMES = ["main_kp", "main_ki", "main_kd", "main_dfilt_s", "main_sp", "u_limit", "trip_y",
          "nope", "r", "y"]
_NUM = st.one_of(st.integers(-2000, 2000).map(str),
                 st.floats(-1e4, 1e4, allow_nan=False).map(lambda v: "%.9g" % v),
                 st.sampled_from(["abc", "1e999", "-0", ".5", "1e-400", "nan", "0.0000001"]))
_FIELD = st.tuples(st.sampled_from(["loop", "amp", "hyst", "bias", "bound", "out", "time_s",
                                    "at", "shape", "x"]),
                   st.one_of(_NUM, st.sampled_from(["main", "setpoint", "output", "body",
                                                    "pulse", "step", "sideways"])))
_SEQ = st.one_of(st.integers(0, 70000).map(str), st.sampled_from(["x", "007", ""]))


@st.composite
def _command(draw):
    verb = draw(st.sampled_from(["hello", "param", "signal", "loop", "get", "set", "stage", "save",
                                 "restore", "arm", "disarm", "clear", "mode", "stream", "kill",
                                 "status", "hb", "jump", "tm"]))
    seq = draw(_SEQ)
    if verb == "hello":
        args = [draw(st.sampled_from(["1.0", "1.7", "2.0", "x", "1"]))]
    elif verb in ("param", "signal", "loop"):
        args = [draw(st.integers(0, 300).map(str))]
    elif verb == "get":
        args = draw(st.lists(st.sampled_from(_NAMES), min_size=0, max_size=4))
    elif verb in ("set", "stage"):
        args = [f"{k}={v}" for k, v in draw(st.lists(st.tuples(st.sampled_from(_NAMES), _NUM),
                                                     min_size=0, max_size=3))]
    elif verb == "mode":
        args = [draw(st.sampled_from(["off", "hold", "relay", "open", "inject", "dance"]))]
        args += [f"{k}={v}" for k, v in draw(st.lists(_FIELD, max_size=5))]
    elif verb == "stream":
        args = [f"rate_hz={draw(_NUM)}"]
    elif verb == "hb":
        return "hb"
    else:
        args = draw(st.lists(_NUM, max_size=1))
    return " ".join([verb, seq, *args])


_ACTION = st.one_of(
    _command().map(lambda body: ("body", body)),
    st.binary(max_size=40).map(lambda raw: ("raw", raw)),
    st.lists(st.sampled_from([b"@", b"|", b"\r", b"\n", b"x", b" ", b"hb", b"D368", b"\x00",
                              b"@hb|D368\n", b"@status 9|", b"A" * 60]),
             max_size=12).map(lambda parts: ("raw", b"".join(parts))),
    st.integers(1, 150).map(lambda n: ("steps", n)),
    st.just(("kill", b"\x18")),
)


@settings(max_examples=int(__import__('os').environ.get('FUZZ_N', 60)), deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(actions=st.lists(_ACTION, min_size=1, max_size=30), chunk=st.integers(1, 64),
       seed=st.integers(0, 3))
def test_random_traffic_gets_the_same_answers(actions, chunk, seed):
    t = Twin("plant", seed=seed, den=(0.01, 0.2, 1.0))
    t.body("stream 1 rate_hz=50")
    for kind, what in actions:
        if kind == "steps":
            t.run(what / 500.0)
            continue
        if kind == "body":
            try:
                data = encode_frame(what)
            except Exception:                    # not a legal body: send it unframed
                data = what.encode("ascii", "replace") + b"\n"
        else:
            data = what
        for i in range(0, len(data), chunk):     # the same bytes in pieces
            t.send(data[i:i + chunk])
    assert t.differences() == []
    assert t.py.rx_err == t.c.rx_err
    assert t.py.motor == t.c.motor and t.py.fault == t.c.fault


def test_a_reply_too_long_for_one_line_is_refused():
    # PROTOCOL.md §2: 200 bytes per line. A `get` of many long names cannot be answered in
    # one line; both boards refuse it (bad_args) instead of sending an illegal frame.
    t = Twin("balance")
    names = [p.name for p in t.py.rig.params]
    body = "get 5 " + " ".join(names)
    while len(body) > 193:
        names.pop()
        body = "get 5 " + " ".join(names)
    t.body(body)
    t.body("get 6 " + " ".join(names[:5]))
    assert t.differences() == []
    replies = [x for x in t.lines("c") if x.startswith(("ok", "err"))]
    assert replies[0] == "err 5 bad_args" and replies[1].startswith("ok 6 tilt_kp=0.64 ")


def test_a_group_longer_than_a_line_is_staged_then_applied_at_once():
    # PROTOCOL.md §5.5: `stage` checks and keeps, the next `set` applies all; a refusal or
    # any other command drops what was staged
    t = Twin("balance")
    writable = [p for p in t.py.rig.params if p.writable]
    half = len(writable) // 2
    first = " ".join(f"{p.name}={p.minimum}" for p in writable[:half])
    rest = " ".join(f"{p.name}={p.minimum}" for p in writable[half:])
    t.body(f"stage 5 {first}")
    t.body(f"get 6 {writable[0].name}")          # any other command drops the group
    t.body(f"set 7 {rest}")
    t.body(f"get 8 {writable[0].name}")          # still the boot value
    t.body(f"stage 9 {first}")
    t.body(f"stage 10 {writable[0].name}=1")     # staged twice: refused, group dropped
    t.body(f"stage 11 {first}")
    t.body(f"stage 11 {first}")                  # a resend: not staged again
    t.body(f"stage 12 {writable[half].name}=-1e9")  # out of range: refused, group dropped
    t.body(f"stage 13 {first}")
    t.body(f"set 14 {rest}")                     # applies both lines at once
    t.body(f"get 15 {writable[0].name} {writable[-1].name}")
    assert t.differences() == []
    replies = [x for x in t.lines("c") if x.startswith(("ok", "err"))]
    boot = t.py.rig.params[0].default
    assert replies[0] == f"ok 5 staged={half}"
    assert replies[3].startswith("ok 8 ") and replies[3].endswith(f"={boot:g}")
    assert replies[5].startswith("err 10 bad_args")  # a name staged twice
    assert replies[6] == replies[7] == f"ok 11 staged={half}"
    assert replies[8].startswith("err 12 range")
    assert replies[9] == f"ok 13 staged={half}" and replies[10].startswith("ok 14 ")
    assert replies[11] == (f"ok 15 {writable[0].name}={writable[0].minimum:g} "
                           f"{writable[-1].name}={writable[-1].minimum:g}")


def test_a_resend_is_known_by_its_body_as_sent():
    # PROTOCOL.md §4.2: the same sequence number and the same body is a resend (answered
    # again, not acted on: after a trip it gets `err state`); the same number with another
    # body, even one meaning the same values, is a new command
    t = Twin("plant")
    t.body("set 5 main_sp=1")
    t.body("set 5 main_sp=1")                   # resend
    t.send(b"\x18")                             # kill byte: tripped since set 5
    t.body("set 5 main_sp=1")                   # resend after the trip: err state
    t.body("set 5 main_sp=1.0")                 # same number, other text: a new command
    t.body("set 5 main_sp=1.0")                 # and its resend
    assert t.differences() == []
    replies = [x for x in t.lines("c") if x.startswith(("ok", "err"))]
    assert replies == ["ok 5 main_sp=1", "ok 5 main_sp=1", "err 5 state",
                       "ok 5 main_sp=1", "ok 5 main_sp=1"]


@pytest.mark.parametrize("rig, kw, loop, amp, gains, relax", [
    ("balance", {"drive": "torque"}, "trim", 0.5, "trim_kp=0.25", _RELAX),
    ("wheel", {}, "speed", 2.0, "speed_kp=0.6 speed_ki=2.5", "arm_wheel=100"),
])
def test_the_float_build_answers_alike_and_its_loops_stay_close(rig, kw, loop, amp, gains,
                                                                relax):
    # -DRB_REAL=float, for cores with a single-precision FPU: every reply, event and status
    # the same; telemetry values within 5 % of each signal's range over the session (the
    # loops run in float; an unstable rig amplifies the differences a little; common
    # practice, no source)
    t = Twin(rig, seed=7, real="float", **kw)
    _session(t, loop, amp, gains, relax)
    py, c = t.lines("py"), t.lines("c")
    assert [x for x in py if not x.startswith("tm ")] == [x for x in c if not x.startswith("tm ")]
    a = np.array([[float(v) for v in x.split()[3:]] for x in py if x.startswith("tm ")])
    b = np.array([[float(v) for v in x.split()[3:]] for x in c if x.startswith("tm ")])
    assert [x.split()[:3] for x in py if x.startswith("tm ")] == \
        [x.split()[:3] for x in c if x.startswith("tm ")]
    span = np.maximum(a.max(axis=0) - a.min(axis=0), 1e-9)
    assert np.all(np.abs(a - b).max(axis=0) <= 0.05 * span)
