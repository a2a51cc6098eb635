"""The C library's own number text (protocol/board-c/src/rb_num.c) against the Python codec
(bench/rigbench/wire/messages.py format_number / parse_number, i.e. Python's correctly rounded '%g'
and float()): bit-identical text and values on random doubles drawn from every bit pattern
(subnormals, powers of ten, values near the range limits, negative zero), on rounding ties,
and on every number token of the protocol vectors; the sanitizer build (UBSan) is the one
loaded here.

The number of random examples is RB_NUM_EXAMPLES (default 2000; the 10^5 run for the report:
RB_NUM_EXAMPLES=100000 pytest tests/board_c/test_c_numbers.py). Both the double build and the
float build (whose own telemetry path formats binary32 values) are checked.
"""

from __future__ import annotations

import ctypes as C
import json
import os
import re
import struct
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.messages import format_number, parse_number
from cboard import lib

EXAMPLES = int(os.environ.get("RB_NUM_EXAMPLES", "2000"))
VECTORS = json.loads((Path(__file__).parents[2] / "protocol" / "vectors" / "frames.json")
                     .read_text())


def c_format(value: float, digits: int, real: str = "double") -> str:
    out = C.create_string_buffer(64)
    n = lib(real).rb_format_number(out, 64, value, digits)
    return out.raw[:n].decode()


def c_format_float(value: float, digits: int) -> str:
    """rb_format_real of the float build: a binary32 value taken apart as binary32"""
    so = lib("float")
    so.rb_format_real.argtypes = [C.c_char_p, C.c_size_t, C.c_float, C.c_int]
    so.rb_format_real.restype = C.c_size_t
    out = C.create_string_buffer(64)
    n = so.rb_format_real(out, 64, value, digits)
    return out.raw[:n].decode()


def c_parse(tok: str, real: str = "double"):
    v = C.c_double()
    ok = lib(real).rb_parse_number(tok.encode(), len(tok.encode()), C.byref(v))
    return v.value if ok else None


def py_parse(tok: str):
    try:
        return parse_number(tok)
    except RemoteProtocolError:
        return None


def bits(x: float | None):
    return None if x is None else struct.pack("<d", x)


any_double = st.integers(0, 2**64 - 1).map(lambda b: struct.unpack("<d", struct.pack("<Q", b))[0])


@settings(max_examples=EXAMPLES, deadline=None)
@given(value=st.one_of(any_double, st.floats(allow_nan=False, allow_infinity=False)))
def test_random_doubles_written_and_read_back_as_python_does(value):
    # Python's float formatting and float() are correctly rounded (D. Gay, 1990, "Correctly
    # rounded binary-decimal and decimal-binary conversions"): the reference here
    if value != value or value in (float("inf"), float("-inf")):
        assert c_format(value, 7) == ""            # not finite: nothing written
        return
    for digits in (6, 7):
        text = c_format(value, digits)
        assert text == format_number(value, digits)
        assert bits(c_parse(text)) == bits(py_parse(text))
    assert bits(c_parse(repr(value))) == bits(value)      # 17 digits read back exactly


@pytest.mark.parametrize("value", [
    0.5, 1.5, 2.5, 12345675.0, 1234567.5, 123456.25, 0.125, 9.9999995, 9.99999949,
    999999.5, 0.0, -0.0, 5e-324, -5e-324, 2.2250738585072014e-308, 2.225073858507201e-308,
    1.7976931348623157e308, -1.7976931348623157e308, 1e22, 1e23, 1e-5, 1e-4, 0.0001,
    1e7, 1e6, 999999.95, 3.4028234663852886e38, 1.401298464324817e-45, 1e-7, 100.0])
def test_ties_powers_of_ten_and_range_limits(value):
    # exact ties (x.5 at the 7th digit) round to even as in C and Python's '%.7g'; powers of
    # ten cross the fixed/exponent boundary of %g (common practice, no source)
    for digits in (6, 7):
        assert c_format(value, digits) == format_number(value, digits)


@pytest.mark.parametrize("tok", [
    "1e999", "1.7976931348623158e308", "1.7976931348623159e308", "2.4703282292062327e-324",
    "2.4703282292062328e-324", "1e-400", "-0", "0e99999", "9007199254740993",
    "123456789012345678901234567890", "0.000000000000000000000000000001234",
    "4.9406564584124654e-324", "-1e-400", "00012", "1E5", "1e+5", "2.5e-4", ".5", "+1",
    "1.", "nan", "inf", "1e", "--1", "1" * 63, "1" * 64])
def test_reading_at_the_edges(tok):
    # halfway cases between doubles and beyond the largest one (value from memory: the
    # binary64 limits DBL_MAX = 1.7976931348623157e308, min subnormal 4.94e-324)
    assert bits(c_parse(tok)) == bits(py_parse(tok)) or (len(tok) >= 64 and c_parse(tok) is None)


def _vector_numbers():
    out = set()
    for v in VECTORS["good"] + VECTORS["bad"]:
        body = v["frame"][1:v["frame"].rfind("|")] if "|" in v["frame"] else v["frame"]
        for tok in re.split(r"[ =,]", body):
            if re.fullmatch(r"-?\d+(\.\d+)?([eE][-+]?\d+)?", tok):
                out.add(tok)
    return sorted(out)


@pytest.mark.parametrize("tok", _vector_numbers())
def test_every_number_of_the_vectors(tok):
    value = py_parse(tok)
    assert bits(c_parse(tok)) == bits(value)
    if value is not None:
        for digits in (6, 7):
            assert c_format(value, digits) == format_number(value, digits)


@settings(max_examples=max(200, EXAMPLES // 10), deadline=None)
@given(bits32=st.integers(0, 2**32 - 1))
def test_float_build_writes_every_binary32_as_python_writes_its_value(bits32):
    # the float build's numbers are binary32 values; a float widens to double exactly, so the
    # text of the double must be the same
    value = struct.unpack("<f", struct.pack("<I", bits32))[0]
    if value != value or abs(value) == float("inf"):
        return
    for digits in (6, 7):
        assert c_format_float(value, digits) == format_number(value, digits)
        assert c_format(value, digits, "float") == format_number(value, digits)
