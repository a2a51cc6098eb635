"""Fuzzing the ``sim://`` URL option parser (bench/rigbench/rig/url.py) beyond the alphabet of
tests/rig/test_sim_url.py: any text at all, options built from the documented keys with
good, edge and junk values, values that are not strings, and the same URLs opened through
pyserial. The parser may only raise ValueError (pyserial turns it into SerialException);
what it accepts formats back to itself and holds the values that were given.
"""

import math
from urllib.parse import quote

import pytest
import serial
from hypothesis import given, settings
from hypothesis import strategies as st

from rigbench.rig.url import SimOptions, format_sim_url, parse_sim_url

_RIGS = st.sampled_from(["balance", "wheel", "plant", "", "Balance", "plant/", "wheel:1"])


@settings(max_examples=300, deadline=None)
@given(_RIGS, st.text(max_size=80))
def test_any_text_raises_value_error_or_parses_back(rig, query):
    try:
        opts = parse_sim_url(f"sim://{rig}?{query}")
    except ValueError:
        return
    assert parse_sim_url(format_sim_url(opts)) == opts


@settings(max_examples=50, deadline=None)
@given(st.one_of(st.none(), st.integers(), st.binary(max_size=20), st.lists(st.text())))
def test_a_url_that_is_not_text_is_a_value_error(value):
    with pytest.raises(ValueError):
        parse_sim_url(value)


_NUMERIC = {"seed": "seed", "noise": "noise", "rate": "rate_hz", "corrupt": "corrupt",
            "drop": "drop", "reset": "reset_after_s", "unplug": "unplug_after_s",
            "delay": "delay_s"}
_VALUE = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-10, 10**6).map(str),
    st.sampled_from(["", "0", "1", "-0", "1e-3", "1e400", "nan", "inf", "speed", "torque",
                     "real", "virtual", "1,2", "1,,2", "0,1", "1:2", ":", "1:0", "x", "%",
                     "1 ", "\u0663", "\u00b2", "/tmp/nv.json"]),
    st.text(max_size=12),
)
_KEYS = st.sampled_from(["seed", "noise", "rate", "clock", "corrupt", "drop", "stall", "reset",
                         "unplug", "drive", "num", "den", "delay", "colour"])


@settings(max_examples=400, deadline=None)
@given(_RIGS, st.lists(st.tuples(_KEYS, _VALUE), max_size=6))
def test_documented_keys_with_any_values(rig, pairs):
    query = "&".join(f"{k}={quote(v, safe='')}" for k, v in pairs)
    try:
        opts = parse_sim_url(f"sim://{rig}?{query}")
    except ValueError:
        return
    assert isinstance(opts, SimOptions) and parse_sim_url(format_sim_url(opts)) == opts
    for key, text in pairs:                        # what was accepted is what was given
        if key in _NUMERIC:
            got = getattr(opts, _NUMERIC[key])
            assert math.isfinite(got) and got == (int(text) if key == "seed" else float(text))
        elif key in ("clock", "drive"):
            assert getattr(opts, key) == text
    assert 0.0 <= opts.corrupt <= 1.0 and 0.0 <= opts.drop <= 1.0
    assert 10.0 <= opts.rate_hz <= 10000.0 and opts.noise >= 0.0 and opts.seed >= 0


@settings(max_examples=40, deadline=None)
@given(st.sampled_from(["balance", "wheel", "plant", "robot"]),
       st.lists(st.tuples(_KEYS, _VALUE), max_size=3))
def test_opening_any_url_gives_a_port_or_a_serial_exception(rig, pairs):
    query = "&".join([f"{k}={quote(v, safe='')}" for k, v in pairs if k != "clock"]
                     + ["clock=virtual"])
    try:
        port = serial.serial_for_url(f"sim://{rig}?{query}", timeout=0.01)
    except serial.SerialException:
        return
    try:
        assert port.board.rig.rig.startswith(rig) and port.clock.virtual
        port.write(b"@hb|D368\n")
        port.read(64)
    finally:
        port.close()


def test_a_bad_seed_error_names_the_option():
    with pytest.raises(ValueError, match="seed"):
        parse_sim_url("sim://balance?seed=\u00b2")
