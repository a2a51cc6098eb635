"""scripts/footprint_c.py on the real C board library: the figures it prints are there and
hang together (code size, sizeof(rb_board) per configuration, stack paths, per-call work).

Skipped only when no C compiler is found. No speed is asserted: times are printed by the
script; here only instruction counts (which repeat exactly) are compared.
"""

from __future__ import annotations

import importlib.util
import shutil
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest

ROOT = Path(__file__).parents[2]
_spec = importlib.util.spec_from_file_location("footprint_c", ROOT / "scripts" / "footprint_c.py")
fp = importlib.util.module_from_spec(_spec)
sys.modules["footprint_c"] = fp
_spec.loader.exec_module(fp)

CC = fp.find_cc()
pytestmark = pytest.mark.skipif(CC is None, reason="no C compiler (cc, gcc, clang) found")


@pytest.fixture(scope="module")
def figures(tmp_path_factory):
    """Everything built once, two builds at a time."""
    tmp = tmp_path_factory.mktemp("footprint")

    def size(opt):
        return fp.code_size(fp.compile_library(CC, tmp / f"size{opt}", opt, pic=False), "", opt)

    with ThreadPoolExecutor(max_workers=2) as pool:
        sizes = dict(zip(("-Os", "-O2"), pool.map(size, ("-Os", "-O2"))))
        rams = dict(zip(fp.CONFIGS, pool.map(lambda c: fp.board_ram(CC, tmp / f"ram-{c}", c),
                                             fp.CONFIGS)))
    return {"size": sizes, "ram": rams, "tmp": tmp}


def test_size_optimisation_gives_less_code(figures):
    # -Os trades speed for size: the library's code must come out smaller than at -O2
    # (common practice, no source)
    os_, o2 = figures["size"]["-Os"], figures["size"]["-O2"]
    assert 0 < os_.code < o2.code
    assert os_.flash == os_.code + os_.rodata + os_.data
    assert set(os_.per_object) == {s.stem + ".o" for s in fp.lib_sources()}
    assert sum(os_.per_object.values()) == os_.code


def test_library_keeps_no_state_of_its_own(figures):
    # rb_board.h promises "no globals": all state lives in the caller's rb_board, so the
    # library's objects carry no .data or .bss (a second board is a second rb_board;
    # common practice, no source: reentrant C libraries keep state in a caller's struct)
    for s in figures["size"].values():
        assert s.data == 0 and s.bss == 0


def test_board_size_follows_the_build_time_sizes(figures):
    ram = figures["ram"]
    default, flt, small = ram["default"], ram["float"], ram["small"]
    assert default.real_bytes == 8 and flt.real_bytes == 4 and small.real_bytes == 4
    # rb_board holds the transmit buffer, the receive ring, the stored image and two lines
    # of RB_MAX_LINE (the one being read, the last reply) at their default sizes (rb_board.h)
    assert default.board_bytes >= 4096 + 256 + 512 + 2 * 200
    assert flt.board_bytes < default.board_bytes
    # the small configuration saves at least the bytes its smaller buffers leave out
    assert default.board_bytes - small.board_bytes >= (4096 - 512) + (256 - 64)
    assert small.board_bytes < flt.board_bytes


def test_worst_stack_on_a_hand_made_graph():
    # a > b > d is the deepest path: 10 + 20 + 40 bytes; printf is entered from c with
    # a's and c's frames in use (15); the port from d (70). Sums worked by hand.
    frames = {("x", "a"): (10, "static"), ("x", "b"): (20, "static"),
              ("y", "c"): (5, "static"), ("y", "d"): (40, "static")}
    calls = {("x", "a"): ["b", "c"], ("x", "b"): ["d"], ("y", "c"): ["printf"],
             ("y", "d"): ["__indirect_call"]}
    got = fp.worst_stack(frames, calls, "a")
    assert (got.bytes, got.path, got.libc) == (70, ["a", "b", "d"], ["printf"])
    assert (got.bytes_at_libc, got.bytes_at_port, got.bounded) == (15, 70, True)
    calls[("y", "d")] = ["a"]                           # recursion: no bound from the graph
    assert not fp.worst_stack(frames, calls, "a").bounded
    # a static function of another file with the same name is not the one called
    frames[("y", "b")] = (999, "static")
    frames[("x", "e")] = (1, "static")
    calls = {("x", "e"): ["b"]}
    assert fp.worst_stack(frames, calls, "e").bytes == 21


def test_stack_paths_of_the_entry_points(figures):
    if not fp.supports_call_graph(CC):
        pytest.skip(f"{CC} has no -fcallgraph-info=su (gcc 10 or newer has)")
    st = fp.stack_usage(CC, figures["tmp"] / "stack", "-Os")
    for entry in fp.ENTRIES:
        s = st[entry]
        assert s.bounded and s.bytes > 0 and s.path[0] == entry
        assert s.bytes >= s.bytes_at_libc and s.bytes >= s.bytes_at_port
    # the receive-interrupt path: no C library call, only the port's set_output (the kill)
    assert st["rb_rx_byte"].libc == [] and st["rb_rx_byte"].bytes_at_port > 0
    # numbers are the library's own (src/rb_num.c): from every entry point the only C library
    # calls left are the memory and string primitives, no printf/strtod family
    for entry in fp.ENTRIES:
        assert set(st[entry].libc) <= {"memcpy", "memmove", "memset", "memcmp", "strlen"}, entry
    assert st["rb_poll"].bytes > st["rb_rx_byte"].bytes


def test_per_call_figures(figures):
    exe = fp.build_main(CC, figures["tmp"] / "cpu", "-Os")
    times = fp.cpu_time(exe, "default", runs=3, calls=400)
    assert set(times) == set(fp.CASES)
    for t in times.values():
        assert 0 < t.fastest_ns <= t.median_ns and t.calls == 400
    if shutil.which("valgrind") is None:
        pytest.skip("valgrind not installed: no instruction counts")
    quiet = fp.instructions(exe, "period_quiet", calls=(20, 120))
    stream = fp.instructions(exe, "period_stream", calls=(20, 120))
    # a telemetry frame per period adds the formatting of six numbers (common practice,
    # no source: printing a number costs far more than a PID update)
    assert 0 < quiet < stream
