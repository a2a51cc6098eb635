"""Discovery replies as typed declarations (PROTOCOL.md §5.4): a loop reply with and without
its optional fields goes through the codecs and back to the same LoopInfo; bad optional
values are refused with bad_field; unknown keys are ignored (§5.1)."""

from dataclasses import replace

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigbench.wire import BoardCodec, HostCodec, LoopInfo
from rigbench.wire import messages as m
from rigbench.wire.describe import ACTIONS, LOOP_OPTIONAL
from rigbench.wire.errors import LocalProtocolError, RemoteProtocolError

BARE = LoopInfo(0, "pos", "angle", "drive", ("pos_p", "pos_i", "pos_d"), "stable", "output")
NAMES = st.from_regex(r"[a-z][a-z0-9_]{0,7}", fullmatch=True)   # all five fit a line


def _through_wire(loop: LoopInfo, seq: int = 7) -> LoopInfo:
    (reply,) = HostCodec().receive(BoardCodec.encode(m.Ok(seq, tuple(loop.to_fields()))))
    return LoopInfo.from_fields(reply.fields)


@settings(max_examples=200, deadline=None)
@given(setpoint=st.none() | NAMES, limit=st.none() | NAMES, dfilt=st.none() | NAMES,
       rate=st.none() | NAMES, action=st.none() | st.sampled_from(ACTIONS))
def test_loop_declaration_round_trips_with_any_optional_fields(setpoint, limit, dfilt, rate,
                                                               action):
    loop = LoopInfo(3, "pos", "angle", "drive", ("pos_p", "pos_i", "pos_d"), "unstable",
                    "integral", setpoint=setpoint, limit=limit, dfilt=dfilt, action=action,
                    rate=rate)
    assert _through_wire(loop) == loop
    sent = dict(loop.to_fields())
    # optional fields are sent only when declared: an older host sees the 1.0 reply it knew
    assert {k for k in LOOP_OPTIONAL if k in sent} == \
        {k for k in LOOP_OPTIONAL if getattr(loop, k) is not None}


def test_bare_loop_reply_reads_with_no_optional_fields():
    got = _through_wire(BARE)
    assert got == BARE and all(getattr(got, k) is None for k in LOOP_OPTIONAL)


@pytest.mark.parametrize("key,value", [
    ("action", "sideways"), ("action", "Direct"), ("setpoint", "Target"), ("limit", "9max"),
    ("dfilt", "tau.s"), ("rate", "deg/s"),
])
def test_bad_optional_value_is_a_bad_field(key, value):
    fields = [(k, str(v)) for k, v in BARE.to_fields()] + [(key, value)]
    with pytest.raises(RemoteProtocolError) as exc:
        LoopInfo.from_fields(fields)
    assert exc.value.code == "bad_field" and key in str(exc.value)


def test_unknown_loop_keys_are_ignored():
    # PROTOCOL.md §5.1: a receiver ignores reply fields it does not know
    fields = [(k, str(v)) for k, v in BARE.to_fields()] + [("deadband", "x"), ("limit", "u_max")]
    got = LoopInfo.from_fields(fields)
    assert got.limit == "u_max" and got.setpoint is None


def test_a_reply_too_long_for_a_line_cannot_be_sent():
    # PROTOCOL.md §2, §5.4: the optional fields count toward the 200-byte line; a board
    # with long names must leave some out (the encoder refuses, it never truncates)
    long = "x" * 32
    loop = replace(BARE, setpoint=long, limit=long, dfilt=long, rate=long, action="direct")
    with pytest.raises(LocalProtocolError) as exc:
        BoardCodec.encode(m.Ok(65535, tuple(loop.to_fields())))
    assert exc.value.code == "too_long"
    assert _through_wire(replace(loop, setpoint=None, dfilt=None, rate=None), 65535).limit == long
