"""Fuzzing the simulated board's command handling through BoardCodec (PROTOCOL.md §4–§8):
random commands that follow the grammar, with random names, numbers, mode fields, sequence
numbers, loop periods, heartbeats and kill bytes in between. The board must never raise,
must give exactly one reply per command with the command's sequence number and a documented
error code, keep every parameter inside its declared range, apply a ``set`` wholly or not
at all, and follow the interlock: nothing but a successful ``arm`` leaves ``off`` or
``tripped`` for an enabled state, a kill always trips, ``clear`` never starts the motor. A
command identical to the last one answered (same sequence number and body) is a resend: it
gets the same reply and changes nothing (§4.2), even after a kill byte in between.
"""

import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rigbench.rig.firmware.board import make_board
from rigbench.rig.firmware.modes import MODE_KEYS
from rigbench.wire import BoardCodec, HostCodec, LocalProtocolError
from rigbench.wire import messages as m
from rigbench.wire.codec import KILL

# PROTOCOL.md §4.3: the codes a board may answer with.
ERROR_CODES = {"unknown_verb", "bad_args", "unknown_name", "range", "readonly", "interlock",
               "not_armed", "busy", "version", "storage", "state"}

RIGS = [("balance", {}), ("balance", {"drive": "torque"}), ("wheel", {}),
        ("plant", {"num": (2.0,), "den": (1.0, 3.0, 3.0, 1.0), "delay_s": 0.1})]

_name = st.from_regex(r"[a-z][a-z0-9_]{0,12}", fullmatch=True)
_number = st.one_of(
    st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False),
    st.sampled_from([0.0, -0.0, 1e-300, -1e-300, 1e30, -1e30, 1.0, -1.0, 0.5, 10.0, 1e6]),
    st.integers(-10**6, 10**6).map(float),
)
_word = st.one_of(_number.map(lambda v: m.format_number(v)),
                  st.from_regex(r"[A-Za-z0-9_.:/%+^,-]{1,12}", fullmatch=True))


@st.composite
def commands(draw, board):
    """One host command that the codec can send, aimed at ``board``'s declaration."""
    params = [p.name for p in board.rig.params]
    loops = [lp.name for lp in board.rig.loops]
    pname = st.one_of(st.sampled_from(params), _name)
    seq = draw(st.integers(0, 65535))
    verb = draw(st.sampled_from(sorted(m.COMMANDS)))
    cls, shape = m.COMMANDS[verb]
    if shape == "none":
        return cls(seq)
    if shape == "int":
        return cls(seq, draw(st.integers(0, 255)))
    if shape == "version":
        return cls(seq, f"{draw(st.integers(0, 3))}.{draw(st.integers(0, 20))}")
    if shape == "names":   # repeats too: refused with bad_args (PROTOCOL.md §5.5)
        return cls(seq, tuple(draw(st.lists(pname, min_size=1, max_size=4))))
    if shape == "assign":
        pairs = draw(st.lists(st.tuples(pname, _number), min_size=1, max_size=4))
        return cls(seq, tuple(pairs))
    if shape == "rate":   # subnormal rates too: loop rate / rate overflows to inf
        return cls(seq, draw(st.one_of(st.floats(-1e6, 0.0), st.floats(0.0, 1e6),
                                       st.sampled_from([0.0, 1.0, 100.0, 500.0, 1e-310,
                                                        5e-324, 1e-7]))))
    name = draw(st.sampled_from(m.MODES))
    required, optional = MODE_KEYS[name]
    keys = draw(st.lists(st.sampled_from(sorted(set(required) | set(optional) | {"amp", "x"})),
                         unique=True, max_size=6))
    if draw(st.booleans()):
        keys = list(dict.fromkeys(list(required) + keys))
    values = {"loop": st.one_of(st.sampled_from(loops), _name),
              "shape": st.one_of(st.sampled_from(["pulse", "step"]), _word),
              "at": st.one_of(st.sampled_from(["setpoint", "output", "body"]), _word)}
    return cls(seq, name, tuple((k, draw(values.get(k, _word))) for k in keys))


@st.composite
def sessions(draw):
    rig, kw = draw(st.sampled_from(RIGS))
    board = make_board(rig, seed=draw(st.integers(0, 3)), **kw)
    steps = []
    for _ in range(draw(st.integers(1, 25))):
        steps.append((draw(st.sampled_from(["cmd", "cmd", "cmd", "hb", "step", "kill"])),
                      draw(commands(board)), draw(st.integers(1, 30))))
    return board, steps


def _in_range(board) -> bool:
    vals = board.params.values
    return all(p.minimum <= vals[p.name] <= p.maximum and math.isfinite(vals[p.name])
               for p in board.rig.params)


def _replies(board, host) -> list:
    return [x for x in host.receive(board.output()) if isinstance(x, (m.Ok, m.Err))]


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(sessions())
def test_every_command_gets_exactly_one_documented_reply_and_the_rules_hold(session):
    board, steps = session
    host = HostCodec()
    board.receive(host.encode(m.Heartbeat()))
    _replies(board, host)
    assert _in_range(board)
    last = None                                       # the last command answered, as read
    for action, cmd, n in steps:
        if action == "hb":
            board.receive(host.encode(m.Heartbeat()))
            continue
        if action == "step":
            for _ in range(n):
                board.step()
            assert board.motor in ("off", "armed", "running", "tripped")
            continue
        if action == "kill":
            board.receive(KILL)
            assert board.motor == "tripped"           # PROTOCOL.md §7.1: at once
            continue
        try:
            frame = host.encode(cmd)
        except LocalProtocolError:
            continue                                  # too long for one frame: not sendable
        before_motor, before_vals = board.motor, dict(board.params.values)
        board.receive(frame)
        replies = _replies(board, host)
        assert len(replies) == 1, (cmd, replies)      # PROTOCOL.md §4: exactly one reply
        reply = replies[0]
        assert reply.seq == cmd.seq
        (read,) = BoardCodec().receive(frame)
        if last is not None and read == last[0]:      # §4.2: the same command again is a
            # resend: the same reply, not acted on — or `err state` when the board tripped
            # since (the old reply would describe the state before the trip)
            assert reply == last[1] or (reply == m.Err(cmd.seq, "state", reply.text)
                                        and board.motor == "tripped"), (reply, last[1])
            assert board.motor == before_motor and board.params.values == before_vals
            continue
        last = (read, reply)
        if isinstance(reply, m.Err):
            assert reply.code in ERROR_CODES, reply
        assert _in_range(board), cmd                  # §4.3 range: the old value stays
        if isinstance(cmd, m.Set) and isinstance(reply, m.Err):
            assert board.params.values == before_vals  # §5.5: all or nothing
        if isinstance(cmd, m.Set) and isinstance(reply, m.Ok):
            for key, text in reply.fields:
                assert m.parse_number(text) == board.params.values[key]
        enabled = board.motor in ("armed", "running")
        if before_motor in ("off", "tripped") and enabled:
            assert isinstance(cmd, m.Arm) and isinstance(reply, m.Ok), (before_motor, cmd)
        if isinstance(cmd, m.Clear) and before_motor == "tripped":
            assert board.motor == "off" and board.fault is None   # §7.3: never starts it
        if isinstance(cmd, m.Kill):
            assert board.motor == "tripped" and isinstance(reply, m.Ok)
        if board.motor == "tripped":
            assert board.fault is not None


@settings(max_examples=150, deadline=None)
@given(st.sampled_from(RIGS), st.lists(st.binary(max_size=80), max_size=12),
       st.integers(0, 20))
def test_any_bytes_never_break_the_board_and_get_no_more_replies_than_frames(rig, chunks, n):
    name, kw = rig
    board = make_board(name, **kw)
    host = HostCodec()
    sent = b""
    for chunk in chunks:
        board.receive(chunk)
        sent += chunk
        for _ in range(n):
            board.step()
    replies = _replies(board, host)
    # a reply answers a frame: never more replies than frame starts the board was sent
    assert len(replies) <= sent.count(b"@")
    assert board.rx_err >= 0 and board.motor in ("off", "tripped")  # nothing armed it
    assert _in_range(board)


@settings(max_examples=100, deadline=None)
@given(st.data())
def test_commands_split_anywhere_and_repeated_still_get_one_reply_each(data):
    # a command cut into pieces across reads, then the same bytes again (a host resending
    # after a lost reply, PROTOCOL.md §4.2): one reply each, the same reply, not acted twice
    board = make_board("wheel")
    host = HostCodec()
    board.receive(host.encode(m.Heartbeat()))
    cmd = data.draw(commands(board))
    try:
        frame = host.encode(cmd)
    except LocalProtocolError:
        return
    cuts = sorted(data.draw(st.lists(st.integers(1, len(frame) - 1), max_size=4, unique=True)))
    pieces = [frame[a:b] for a, b in zip([0] + cuts, cuts + [len(frame)])]
    got = []
    for _ in range(2):
        for piece in pieces:
            board.receive(piece)
        got += _replies(board, BoardCodec.__mro__[1]())  # decode with a fresh host-side codec
    assert len(got) == 2 and got[0] == got[1] and got[0].seq == cmd.seq


def test_get_with_a_repeated_name_gets_a_reply_the_host_can_read():
    board = make_board("wheel")
    board.receive(HostCodec.encode(m.Get(1, ("speed_kp", "speed_kp"))))
    replies = _replies(board, HostCodec())
    assert len(replies) == 1 and replies[0].seq == 1
    # PROTOCOL.md §5.5: refused like a `set` naming a parameter twice
    assert isinstance(replies[0], m.Err) and replies[0].code == "bad_args"


@pytest.mark.parametrize("shape,at,word", [("ramp", "setpoint", "shape"),
                                           ("pulse", "floor", "at")])
def test_a_mode_with_an_unknown_shape_is_refused_not_a_crash(shape, at, word):
    board = make_board("wheel")
    board.receive(HostCodec.encode(m.Mode(1, "inject", (
        ("loop", "speed"), ("shape", shape), ("at", at), ("amp", "1"),
        ("time_s", "1")))))
    (reply,) = _replies(board, HostCodec())
    assert isinstance(reply, m.Err) and reply.code == "bad_args"
    assert reply.text.startswith(f"{word} must be ")      # names the field it refuses


@pytest.mark.parametrize("rate_hz", [1e-310, 5e-324, 1e-300])
def test_a_vanishing_stream_rate_is_answered_not_a_crash(rate_hz):
    board = make_board("wheel")
    board.receive(HostCodec.encode(m.Stream(1, rate_hz)))
    (reply,) = _replies(board, HostCodec())
    assert reply.seq == 1
    # PROTOCOL.md §6.1: the slowest rate the board makes, loop rate / (2**32 - 1)
    assert isinstance(reply, m.Ok)
    assert m.parse_number(reply.get("rate_hz")) == pytest.approx(board.rate_hz / (2**32 - 1),
                                                                 rel=1e-6)


def test_a_clear_resent_after_a_kill_is_refused_and_leaves_the_fault():
    # PROTOCOL.md §4.2: a resend (same seq, same body) is not acted on again, so a retry of
    # a clear sent before a kill cannot undo the kill, and its reply does not claim the
    # motor is off (err state: tripped since); a new clear can clear
    board = make_board("wheel")
    board.receive(HostCodec.encode(m.Heartbeat()) + HostCodec.encode(m.Clear(5)))
    board.output()
    board.receive(KILL)
    board.receive(HostCodec.encode(m.Clear(5)))
    (again,) = _replies(board, HostCodec())
    assert isinstance(again, m.Err) and again.seq == 5 and again.code == "state"
    assert board.motor == "tripped"
    board.receive(HostCodec.encode(m.Clear(6)))
    (new,) = _replies(board, HostCodec())
    assert new == m.Ok(6, (("motor", "off"),)) and board.motor == "off" and board.fault is None
