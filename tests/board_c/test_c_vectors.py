"""The C library on the protocol's test vectors (protocol/vectors/frames.json) and on the
number and frame rules of PROTOCOL.md §2-§3, through ctypes, and the sanitizer build of the
host simulation fed every host vector and random bytes on stdin.

Same vectors, same answers: each host vector is also given to the Python simulated board,
and both must answer it alike (the same reply, the same error count and code).
"""

from __future__ import annotations

import ctypes as C
import json
import os
import subprocess
import threading
import time
from pathlib import Path

import crcmod.predefined
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigbench.wire import HostCodec
from rigbench.wire import messages as m
from rigbench.wire.frame import encode_frame
from rigbench.wire.messages import format_number, parse_number
from rigbench.wire.errors import RemoteProtocolError
from cboard import lib
from cbuild import built
from twin import Twin, normalise

VECTORS = json.loads((Path(__file__).parents[2] / "protocol" / "vectors" / "frames.json")
                     .read_text())


def c_frame(body: bytes) -> bytes:
    out = C.create_string_buffer(256)
    n = lib().rb_frame(out, 256, body, len(body))
    return out.raw[:n]


def c_format(value: float, digits: int) -> str:
    out = C.create_string_buffer(64)
    n = lib().rb_format_number(out, 64, value, digits)
    return out.raw[:n].decode()


def c_parse(tok: str):
    v = C.c_double()
    ok = lib().rb_parse_number(tok.encode(), len(tok.encode()), C.byref(v))
    return v.value if ok else None


def test_crc_check_value_and_random_data():
    # CRC-16/IBM-3740 check value 0x29B1 over "123456789" (G. Cook, Catalogue of
    # parametrised CRC algorithms); random data against crcmod's "crc-ccitt-false"
    assert lib().rb_crc16(b"123456789", 9) == 0x29B1
    ref = crcmod.predefined.mkCrcFun("crc-ccitt-false")
    rng = np.random.default_rng(5)
    for n in (1, 2, 7, 64, 193, 1000):
        data = rng.integers(0, 256, n, dtype=np.uint8).tobytes()
        assert lib().rb_crc16(data, n) == ref(data)


def test_every_good_vector_frame_is_what_the_library_frames():
    for v in VECTORS["good"]:
        frame = v["frame"].encode("latin-1")
        assert c_frame(frame[1:frame.rindex(b"|")]) == frame


def test_illegal_bodies_are_not_framed():
    for body in (b"", b"x" * 194, b"a|b", b"a@b", b"tab\there", b"\x18"):
        assert c_frame(body) == b""


@settings(max_examples=400, deadline=None)
@given(value=st.floats(allow_nan=False, allow_infinity=False), digits=st.sampled_from([6, 7]))
def test_numbers_are_written_as_the_python_codec_writes_them(value, digits):
    assert c_format(value, digits) == format_number(value, digits)


@settings(max_examples=400, deadline=None)
@given(tok=st.one_of(st.text(alphabet="0123456789-+.eE", max_size=12),
                     st.floats(allow_nan=False).map(repr),
                     st.sampled_from(["nan", "inf", "-inf", "1e999", "-0", "1e-400", ".5"])))
def test_numbers_are_read_with_the_python_codec_grammar(tok):
    try:
        want = parse_number(tok)
    except RemoteProtocolError:
        want = None
    assert c_parse(tok) == want


def _answers(board, frame: bytes):
    """(errors counted, the replies normalised as in twin.normalise)"""
    before = board.rx_err
    board.receive(frame)
    lines = [normalise(x) for x in board.output().split(b"\n") if x]
    return board.rx_err - before, [x for x in lines if x.startswith(("ok ", "err "))]


def test_host_vectors_get_the_same_answers_from_both_boards():
    for v in VECTORS["good"] + VECTORS["bad"]:
        if v["direction"] != "host":
            continue
        frame = v["frame"].encode("latin-1")
        t = Twin("balance")
        t.send(encode_frame("hb"))
        got_c = _answers(t.c, frame)
        got_py = _answers(t.py, frame)
        assert got_c == got_py, v
        errors, replies = got_c
        if "error" in v:
            assert errors == 1, v
            want = v["error"]
            assert t.c.last_rx_error == want, v
            if want in ("bad_number", "bad_field") and replies:   # seq readable: answered
                assert [r.split()[2] for r in replies] == ["bad_args"]
        else:
            assert errors == 0, v
            seq = v["meaning"].get("seq")
            assert [int(r.split()[1]) for r in replies] == ([] if seq is None else [seq]), v


def test_the_sanitizer_build_takes_every_vector_and_random_bytes_on_stdin():
    host = [v for v in VECTORS["good"] + VECTORS["bad"] if v["direction"] == "host"]
    rng = np.random.default_rng(11)
    noise = rng.integers(0, 256, 20000, dtype=np.uint8).tobytes().replace(b"\x18", b"")
    data = b"".join(v["frame"].encode("latin-1") for v in host) + noise + b"\n"
    env = dict(os.environ, ASAN_OPTIONS="exitcode=86", UBSAN_OPTIONS="halt_on_error=1:exitcode=87")
    proc = subprocess.Popen([str(built().sim_sanitized), "--stdio"], stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    for i in range(0, len(data), 512):            # in pieces, as a serial port delivers
        proc.stdin.write(data[i:i + 512])
        proc.stdin.flush()
        time.sleep(0.002)
    proc.stdin.write(encode_frame("status 999"))
    proc.stdin.flush()
    time.sleep(0.3)
    out, err = proc.communicate(timeout=20)     # closes stdin: end of input ends rb-sim
    assert proc.returncode == 0, err.decode(errors="replace")
    assert b"Sanitizer" not in err and b"runtime error" not in err
    msgs = HostCodec().receive(out)
    status = [x for x in msgs if isinstance(x, m.Ok) and x.seq == 999]
    assert len(status) == 1
    bad = sum("error" in v for v in host)
    assert int(status[0].get("rx_err")) >= bad     # every bad vector counted, and the noise
    kills = [x for x in msgs if isinstance(x, m.Event) and x.kind == "trip"]
    assert [x.get("cause") for x in kills] == ["kill"]   # the kill vector, once latched


def test_a_full_receive_ring_loses_a_line_counts_it_and_still_takes_the_kill():
    # common practice, no source: a receive buffer that overflows is counted, never silent
    t = Twin("plant")
    t.c.receive_unpolled(encode_frame("status 1") * 20 + b"\x18")   # > 256 bytes unpolled
    assert t.c.motor == "off"                   # off before the kill, and the kill ...
    t.c.receive(b"")
    t.c.lib.rb_poll(t.c._board)
    assert t.c.motor == "tripped" and t.c.fault == "kill"   # ... is latched though lost
    assert t.c.rx_err >= 1 and t.c.last_rx_error in ("overrun", "truncated", "crc")


@pytest.mark.skipif(not Path("/proc/self/maps").exists(), reason="Linux /proc only")
def test_the_library_under_test_runs_with_the_undefined_behaviour_sanitizer():
    lib()
    assert "libubsan" in Path("/proc/self/maps").read_text()


def _random_commands(rng, n: int) -> list[str]:
    names = ["main_kp", "main_ki", "main_kd", "main_dfilt_s", "main_sp", "u_limit", "trip_y",
             "nope", "y"]
    nums = ["0", "1", "-1", "0.5", "1e3", "-2.5e-3", "999999", "1e-300", "abc", "12345678901"]
    out = []
    for seq in range(1, n + 1):
        verb = rng.choice(["hello", "param", "signal", "loop", "get", "set", "save", "restore",
                           "arm", "disarm", "clear", "mode", "stream", "kill", "status"])
        args: list[str] = []
        if verb == "hello":
            args = [str(rng.choice(["1.0", "1.9", "2.0", "0.1"]))]
        elif verb in ("param", "signal", "loop"):
            args = [str(rng.integers(0, 12))]
        elif verb == "get":
            args = list(dict.fromkeys(rng.choice(names, rng.integers(1, 5))))
        elif verb == "set":
            keys = list(dict.fromkeys(rng.choice(names, rng.integers(1, 4))))
            args = [f"{k}={rng.choice(nums)}" for k in keys]
        elif verb == "mode":
            kind = str(rng.choice(["off", "hold", "relay", "open", "inject"]))
            fields = {"relay": ["loop=main", f"amp={rng.choice(nums)}", "hyst=0.01",
                                f"bound={rng.choice(nums)}"],
                      "open": ["loop=main", f"out={rng.choice(nums)}",
                               f"time_s={rng.choice(['0.01', '1', '20'])}"],
                      "inject": ["loop=main", f"at={rng.choice(['setpoint', 'output', 'body'])}",
                                 f"amp={rng.choice(nums)}", "time_s=0.02"]}.get(kind, [])
            args = [kind, *fields]
        elif verb == "stream":
            args = [f"rate_hz={rng.choice(['0', '50', '500', '1e-310', '-1', '7'])}"]
        out.append(" ".join([verb, str(seq), *args]))
    return out


def test_the_sanitizer_build_answers_every_one_of_many_random_commands():
    # every command gets exactly one reply (PROTOCOL.md §4), under AddressSanitizer and
    # UndefinedBehaviorSanitizer, with heartbeats so that modes really run
    rng = np.random.default_rng(23)
    commands = _random_commands(rng, 3000)
    data = bytearray()
    for i, body in enumerate(commands):
        if i % 20 == 0:
            data += encode_frame("hb")
        data += encode_frame(body)
    env = dict(os.environ, ASAN_OPTIONS="exitcode=86", UBSAN_OPTIONS="halt_on_error=1:exitcode=87")
    proc = subprocess.Popen([str(built().sim_sanitized), "--stdio"], stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    def feed():                                   # paced like a link, so no reply is
        for i in range(0, len(data), 4096):        # dropped for want of a reader
            proc.stdin.write(bytes(data[i:i + 4096]))
            proc.stdin.flush()
            time.sleep(0.005)
        proc.stdin.close()

    writer = threading.Thread(target=feed)
    writer.start()
    out = proc.stdout.read()
    writer.join()
    err = proc.stderr.read()
    assert proc.wait(timeout=30) == 0, err.decode(errors="replace")
    assert b"Sanitizer" not in err and b"runtime error" not in err
    msgs = HostCodec().receive(out)
    seqs = [x.seq for x in msgs if isinstance(x, (m.Ok, m.Err))]
    assert sorted(seqs) == list(range(1, len(commands) + 1))
    assert any(isinstance(x, m.Event) and x.kind == "mode" and x.get("mode") == "relay"
               for x in msgs)


@pytest.mark.parametrize("vec", VECTORS["streams"], ids=lambda v: v["bytes"][:24])
def test_stream_vectors_whole_and_byte_by_byte(vec):
    # PROTOCOL.md §2: the same errors however the bytes arrive; the bodies here are all
    # `status 7`, whose reply shows that the frame after the damage was read
    data = vec["bytes"].encode("latin-1")
    for size in (len(data), 1, 5):
        t = Twin("plant")
        codes = []
        for i in range(0, len(data), size):
            before = t.c.rx_err
            t.send(data[i:i + size])
            if t.c.rx_err > before:
                codes.append(t.c.last_rx_error)
        assert t.c.rx_err == t.py.rx_err == len(vec["errors"]), size
        assert codes[-1:] == vec["errors"][-1:], size
        replies = [x for x in t.lines("c") if x.startswith("ok 7 ")]
        assert len(replies) == len(vec["bodies"]), size
        assert t.differences() == [], size
        assert (t.c.fault == "kill") == (vec["kills"] > 0), size


def _answers_of(lines: list[str]) -> list[str]:
    out = []
    for line in lines:
        tokens = line.split(" ")
        if tokens[0] in ("ok", "err"):
            out.append(line)
        elif tokens[0] == "ev":
            out.append(" ".join(["ev"] + tokens[2:]))
    return out


@pytest.mark.parametrize("vec", VECTORS["exchanges"], ids=lambda v: v["about"][:40])
def test_exchange_vectors_on_both_boards(vec):
    # PROTOCOL.md §4.2, §7: each step's replies and events, on the C board and the Python
    # simulated board alike
    t = Twin("balance")
    t.run(0.2)
    for step in vec["steps"]:
        seen = {key: len(t.lines(key)) for key, _ in t.boards}
        t.send(b"\x18" if step["send"] == "KILL" else encode_frame(step["send"]))
        for key, _ in t.boards:
            got = _answers_of(t.lines(key)[seen[key]:])
            assert len(got) == len(step["answers"]), (key, step, got)
            for g, want in zip(got, step["answers"]):
                assert g.startswith(want), (key, step, got)
    assert t.differences() == []
