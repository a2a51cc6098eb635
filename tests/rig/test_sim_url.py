"""``sim://`` URL options: documented examples, errors naming the option, and fuzzing of the
pure parser (it raises ValueError or returns options that format back to themselves)."""

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigbench.rig.url import SimOptions, format_sim_url, parse_sim_url


@pytest.mark.parametrize("url,want", [
    ("sim://balance", SimOptions()),
    ("sim://balance?drive=torque", SimOptions(drive="torque")),
    ("sim://wheel", SimOptions(rig="wheel")),
    ("sim://plant?num=1&den=1,3,3,1&delay=0.5",
     SimOptions(rig="plant", num=(1.0,), den=(1.0, 3.0, 3.0, 1.0), delay_s=0.5)),
    ("sim://plant?num=1&den=1,0&plant=integrating",
     SimOptions(rig="plant", num=(1.0,), den=(1.0, 0.0), plant_kind="integrating")),
    ("sim://balance?clock=virtual&seed=7&noise=0&rate=1000",
     SimOptions(clock="virtual", seed=7, noise=0.0, rate_hz=1000.0)),
    ("sim://wheel?corrupt=0.001&drop=0.01&stall=2:0.5&reset=3&unplug=9&state=/tmp/nv.json",
     SimOptions(rig="wheel", corrupt=0.001, drop=0.01, stall_after_s=2.0, stall_for_s=0.5,
                reset_after_s=3.0, unplug_after_s=9.0, state_path="/tmp/nv.json")),
])
def test_documented_urls(url, want):
    assert parse_sim_url(url) == want
    assert parse_sim_url(format_sim_url(want)) == want


@pytest.mark.parametrize("url,named", [
    ("sim://robot", "robot"),
    ("loop://", "sim://"),
    ("sim://balance?colour=red", "colour"),
    ("sim://wheel?drive=speed", "drive"),
    ("sim://balance?den=1,1", "den"),
    ("sim://balance?drive=diesel", "drive"),
    ("sim://balance?clock=fast", "clock"),
    ("sim://plant?plant=wobbly", "plant"),
    ("sim://wheel?plant=stable", "plant"),
    ("sim://balance?seed=-1", "seed"),
    ("sim://balance?seed=1.5", "seed"),
    ("sim://balance?noise=-1", "noise"),
    ("sim://balance?noise=nan", "noise"),
    ("sim://balance?rate=0", "rate"),
    ("sim://balance?corrupt=2", "corrupt"),
    ("sim://balance?drop=x", "drop"),
    ("sim://balance?stall=3", "stall"),
    ("sim://balance?stall=3:0", "stall"),
    ("sim://balance?reset=-1", "reset"),
    ("sim://balance?unplug=inf", "unplug"),
    ("sim://balance?seed=1&seed=2", "seed"),
    ("sim://plant?den=0,1", "den"),
    ("sim://plant?den=1,,2", "den"),
    ("sim://plant?num=1,2,3&den=1,1", "num"),
    ("sim://plant?delay=-0.1", "delay"),
    ("sim://balance?state=", "state"),
    ("sim://plant?delay=1_0", "delay"),          # float() takes 1_0; a URL number may not
    ("sim://balance?noise= 1", "noise"),
    ("sim://plant?den=1,0x10", "den"),
])
def test_bad_urls_name_the_option(url, named):
    with pytest.raises(ValueError, match=named):
        parse_sim_url(url)


_TEXT = st.text(alphabet="abcdefghijklmnopqrstuvwxyz0123456789=&?:,./-_%+ ", max_size=60)


@settings(max_examples=300, deadline=None)
@given(rig=st.sampled_from(["balance", "wheel", "plant", "robot", ""]), query=_TEXT)
def test_parser_never_fails_otherwise(rig, query):
    try:
        opts = parse_sim_url(f"sim://{rig}?{query}")
    except ValueError:
        return
    assert parse_sim_url(format_sim_url(opts)) == opts


_POS = st.floats(min_value=0.0, max_value=1e3, allow_nan=False)


@settings(max_examples=200, deadline=None)
@given(rig=st.sampled_from(["balance", "wheel", "plant"]), seed=st.integers(0, 2**32),
       noise=st.floats(0, 100), rate=st.floats(10, 10000), p=st.floats(0, 1),
       stall=st.one_of(st.none(), st.tuples(_POS, st.floats(1e-3, 1e3))),
       reset=st.one_of(st.none(), _POS), den=st.lists(st.floats(-1e3, 1e3), min_size=2,
                                                      max_size=5))
def test_options_format_and_parse_back(rig, seed, noise, rate, p, stall, reset, den):
    if den[0] == 0.0:
        den[0] = 1.0
    opts = SimOptions(rig=rig, seed=seed, noise=noise, rate_hz=rate, corrupt=p, drop=p / 2,
                      stall_after_s=None if stall is None else stall[0],
                      stall_for_s=0.0 if stall is None else stall[1], reset_after_s=reset,
                      den=tuple(den) if rig == "plant" else (1.0, 1.0))
    assert parse_sim_url(format_sim_url(opts)) == opts
