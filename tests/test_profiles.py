"""Gain profiles: the schema (one fixture per kind of mistake, with exact file:line: field),
writing (round trip, atomic replacement), comparison with a board's declaration, diffs."""

from __future__ import annotations

import dataclasses
import os
import re
import sys
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigbench.base import atomic
from rigbench.profiles.diff import diff_profiles, format_diff, same_value
from rigbench.profiles.model import (
    Profile, Provenance, SchemaError, Setting, check_against_board, dump_profile, load_profile,
    load_profile_text, save_profile,
)

sys.path.insert(0, str(Path(__file__).parent))
from board_decl import declared  # noqa: E402

ROOT = Path(__file__).parents[1]
BAD = ROOT / "tests" / "fixtures" / "profiles_bad"


def _expectation(path: Path):
    kind, rest = re.match(r"# (expect(?:-board)?): (.*)", path.read_text().splitlines()[0]).groups()
    line, tail = rest.split(" ", 1)
    return kind, f"{path}:{line}: {tail}"


SCHEMA_FIXTURES = sorted(p for p in BAD.glob("*.yaml") if _expectation(p)[0] == "expect")
BOARD_FIXTURES = sorted(p for p in BAD.glob("*.yaml") if _expectation(p)[0] == "expect-board")


def test_fixtures_cover_every_kind_of_mistake():
    names = {p.stem for p in BAD.glob("*.yaml")}
    for kind in ("unknown_key", "wrong_type", "bad_number", "duplicate_key", "out_of_range",
                 "missing_required", "bad_yaml"):
        assert kind in names


@pytest.mark.parametrize("path", SCHEMA_FIXTURES, ids=lambda p: p.stem)
def test_bad_profile_names_file_line_and_field(path):
    with pytest.raises(SchemaError) as e:
        load_profile(path)
    assert str(e.value) == _expectation(path)[1]


@pytest.mark.parametrize("path", BOARD_FIXTURES, ids=lambda p: p.stem)
def test_profile_that_does_not_fit_the_board(path):
    params, loops, _, info = declared("balance")
    problems = check_against_board(load_profile(path), params, loops, info=info)
    assert [p.format(str(path)) for p in problems] == [_expectation(path)[1]]


@pytest.mark.parametrize("name, rig", [("demo-balance-start", "balance"),
                                       ("demo-balance-soft", "balance"), ("demo-wheel", "wheel")])
def test_demo_profiles_fit_their_simulated_boards(name, rig):
    profile = load_profile(ROOT / "profiles" / f"{name}.yaml")
    params, loops, _, info = declared(rig)
    assert profile.demo
    assert check_against_board(profile, params, loops, info=info) == []


def test_board_checks_name_every_problem():
    params, loops, _, info = declared("balance")
    text = (ROOT / "profiles" / "demo-balance-start.yaml").read_text()
    text = text.replace("board: sim-balance-1", "board: bench-7").replace("rig: balance",
                                                                          "rig: wheel")
    text = text.replace("  tilt_kd: {value: 0.0, unit: rev/deg}\n", "")
    text = text.replace("limits:\n", "limits:\n  torque_limit: {value: 0.3, unit: N.m}\n"
                                     "  trip_tilte: {value: 5, unit: deg}\n")
    got = [(p.field, p.severity, p.message) for p in
           check_against_board(load_profile_text(text, "x.yaml"), params, loops, info=info)]
    assert got == [
        ("rig", "error", "profile is for a 'wheel' rig; the board is a 'balance' rig"),
        ("board", "warning", "profile was made on board 'bench-7'; this is 'sim-balance-1'"),
        ("gains", "error", "loop 'tilt' has gains tilt_kp, tilt_ki, tilt_kd; the profile lacks "
                           "tilt_kd"),
        ("limits.torque_limit", "error", "the parameter is read-only on this board"),
        ("limits.trip_tilte", "error", "the board has no parameter 'trip_tilte' (did you mean "
                                       "'trip_tilt'?)"),
    ]
    other = dataclasses.replace(load_profile_text(text, "x.yaml"), loop="pitch", loops=())
    assert ("loop", "the board has no loop 'pitch'; it has: trim, tilt") in [
        (p.field, p.message) for p in check_against_board(other, params, loops)]


def test_same_name_under_gains_and_limits_is_refused():
    text = (ROOT / "profiles" / "demo-wheel.yaml").read_text().replace(
        "  arm_wheel:", "  speed_kp: {value: 1, unit: V.s/rev}\n  arm_wheel:")
    with pytest.raises(SchemaError) as e:
        load_profile_text(text, "w.yaml")
    assert str(e.value) == "w.yaml:16: limits.speed_kp: 'speed_kp' is also given under gains (line 10)"


def test_newer_format_version_is_refused_first():
    text = "profile: 3\nname: x\nfuture_key: 1\n"
    with pytest.raises(SchemaError) as e:
        load_profile_text(text, "v.yaml")
    assert str(e.value) == ("v.yaml:1: profile: format version 3 is not one this rigbench "
                            "reads (1, 2)")


def _two_loop_text() -> str:
    """The demo start set: format 2, the tilt loop with its trim loop, board units."""
    text = (ROOT / "profiles" / "demo-balance-start.yaml").read_text()
    assert "loops: [tilt, trim]" in text and "trim_kd:" in text
    return text


def test_a_cascade_set_is_format_2_and_needs_every_gain_of_every_loop():
    params, loops, _, info = declared("balance")
    prof = load_profile_text(_two_loop_text(), "two.yaml")
    assert prof.loops == ("tilt", "trim") and prof.loop == "tilt" and prof.version == 2
    assert [p for p in check_against_board(prof, params, loops, info=info)
            if p.severity == "error"] == []
    lacking = load_profile_text(_two_loop_text().replace("  trim_kd: {value: 0.0, unit: "
                                                         f"{params['trim_kd'].unit}}}\n", ""))
    assert ("gains", "loop 'trim' has gains trim_kp, trim_ki, trim_kd; the profile lacks "
                     "trim_kd") in [(p.field, p.message) for p in
                                    check_against_board(lacking, params, loops)]
    text = dump_profile(prof)
    assert load_profile_text(text, "two.yaml") == prof and "loops: [tilt, trim]" in text
    # a one-loop profile is still written as format 1, which older readers take
    one = dataclasses.replace(prof, loops=())
    assert one.loops == ("tilt",) and "profile: 1\n" in dump_profile(one)


def test_format_2_names_its_loops_in_a_list():
    text = _two_loop_text().replace("loops: [tilt, trim]", "loops: tilt")
    with pytest.raises(SchemaError, match="loops: expected a list"):
        load_profile_text(text, "v.yaml")
    text = _two_loop_text().replace("loops: [tilt, trim]", "loops: [tilt, tilt]")
    with pytest.raises(SchemaError, match="named twice"):
        load_profile_text(text, "v.yaml")
    text = _two_loop_text().replace("loops: [tilt, trim]", "loop: tilt")
    with pytest.raises(SchemaError, match="loops"):
        load_profile_text(text, "v.yaml")


def test_every_readme_example_loads_and_fits_the_demo_board():
    params, loops, _, info = declared("balance")
    blocks = re.findall(r"```yaml\n(.*?)```", (ROOT / "profiles" / "README.md").read_text(), re.S)
    assert len(blocks) >= 2
    for block in blocks:
        prof = load_profile_text(block, "profiles/README.md")
        assert check_against_board(prof, params, loops, info=info) == [], prof.name


def test_readme_example_loads():
    block = re.search(r"```yaml\n(.*?)```", (ROOT / "profiles" / "README.md").read_text(), re.S)
    profile = load_profile_text(block.group(1), "README.md")
    assert profile.provenance.predicted["phase_margin_deg"] == 44.1
    assert list(profile.settings()) == ["tilt_kp", "tilt_ki", "tilt_kd", "tilt_dfilt_s",
                                        "trip_tilt", "arm_tilt"]


# --------------------------------------------------------------------------- writing

names = st.from_regex(r"[a-z][a-z0-9_]{0,12}", fullmatch=True)
numbers = st.floats(allow_nan=False, allow_infinity=False, width=64)
texts = st.text(st.characters(blacklist_categories=("Cs",)), min_size=1, max_size=60).filter(
    lambda t: t.strip())
settings_ = st.dictionaries(names, st.tuples(numbers, st.sampled_from(["deg", "1", "rev/s/deg",
                                                                       "V.s/rev", "%", "kp,ki"])),
                            min_size=1, max_size=5)


@st.composite
def profiles(draw):
    gains = draw(settings_)
    limits = {k: v for k, v in draw(settings_).items() if k not in gains}
    mk = lambda d: {n: Setting(n, float(v), u) for n, (v, u) in d.items()}  # noqa: E731
    name = draw(texts.filter(lambda t: "\n" not in t and "\r" not in t and len(t) <= 80))
    return Profile(
        name=name, rig=draw(st.sampled_from(["balance", "wheel", "x-1"])), loop=draw(names),
        gains=mk(gains), limits=mk(limits),
        provenance=Provenance(source="rule", date="2025-03-14", method="amigo-pid",
                              experiment=draw(st.none() | texts),
                              predicted={"phase_margin_deg": draw(numbers)},
                              sweep=draw(st.dictionaries(names, numbers, max_size=3))),
        board=draw(st.none() | st.just("sim-balance-1")), notes=draw(st.none() | texts),
        demo=draw(st.booleans()))


@settings(max_examples=60, deadline=None)
@given(profiles())
def test_written_profiles_read_back_equal(profile):
    assert load_profile_text(dump_profile(profile)) == profile


def test_demo_profile_survives_save_and_load(tmp_path):
    p = load_profile(ROOT / "profiles" / "demo-balance-start.yaml")
    out = save_profile(p, tmp_path / "copy.yaml")
    assert load_profile(out) == p
    assert dump_profile(load_profile(out)) == out.read_text()


def test_invalid_profile_object_is_not_written(tmp_path):
    p = load_profile(ROOT / "profiles" / "demo-wheel.yaml")
    bad = dataclasses.replace(p, gains={"speed_kp": Setting("speed_kp", float("nan"), "V.s/rev")})
    target = tmp_path / "w.yaml"
    target.write_text("old\n")
    with pytest.raises(SchemaError):
        save_profile(bad, target)
    assert target.read_text() == "old\n"


class _Boom(Exception):
    pass


@pytest.mark.parametrize("stage", ["write", "fsync", "replace"])
def test_atomic_write_keeps_the_old_file_when_writing_fails(tmp_path, monkeypatch, stage):
    target = tmp_path / "gains.yaml"
    target.write_text("old contents\n")
    os.chmod(target, 0o640)
    new = dump_profile(load_profile(ROOT / "profiles" / "demo-wheel.yaml"))
    real_fdopen = os.fdopen

    class HalfWriter:
        """A file that writes half of what it is given, then fails (disk full mid-way)."""

        def __init__(self, f):
            self.f = f

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            self.f.close()

        def write(self, data):
            self.f.write(data[: len(data) // 2])
            self.f.flush()
            raise _Boom("disk full")

    def fail(*a, **k):
        raise _Boom(stage)

    if stage == "write":
        monkeypatch.setattr(atomic.os, "fdopen", lambda *a, **k: HalfWriter(real_fdopen(*a, **k)))
    else:
        monkeypatch.setattr(atomic.os, stage, fail)
    with pytest.raises(_Boom):
        atomic.write_text_atomic(target, new)
    assert target.read_text() == "old contents\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["gains.yaml"]  # no temp file left
    monkeypatch.undo()
    atomic.write_text_atomic(target, new)
    assert target.read_text() == new
    assert (target.stat().st_mode & 0o777) == 0o640  # the file keeps its permissions


# --------------------------------------------------------------------------- comparing


def test_same_value_to_seven_significant_digits():
    # Parameters travel with 7 significant digits (PROTOCOL.md §3); float32 holds about 7.2
    # decimal digits (IEEE 754-2008, binary32: 24-bit significand), so the board's rounding
    # of 0.1234567 to float32 must still compare equal.
    import numpy as np
    assert same_value(0.1234567, float(np.float32(0.1234567)))
    assert same_value(0.64, 0.6400000001) and same_value(0.0, 0.0)
    assert not same_value(0.1234567, 0.1234587)
    assert not same_value(0.0, 1e-300)  # zero matches only zero
    assert same_value(123.4567, 123.4568)  # one unit in the 7th digit
    assert not same_value(123.4567, 123.4569) and same_value(123.4567, 123.4569, digits=6)
    assert not same_value(9.999990, 9.999999)  # differ in the 6th digit
    assert same_value(-2.5e-4, -2.500001e-4) and not same_value(-2.5e-4, 2.5e-4)


def test_diff_rows_and_table():
    a = load_profile(ROOT / "profiles" / "demo-balance-start.yaml")
    b = load_profile(ROOT / "profiles" / "demo-balance-soft.yaml")
    b = dataclasses.replace(b, limits={**{k: v for k, v in b.limits.items() if k != "arm_wheel"},
                                       "trip_tilt": Setting("trip_tilt", 0.35, "rad"),
                                       "sp_limit": Setting("sp_limit", 4.0, "deg")})
    rows = {r.name: r for r in diff_profiles(a, b)}
    assert rows["tilt_kp"].change == "changed"
    assert rows["tilt_kp"].relative == pytest.approx((0.45 - 0.64) / 0.64, rel=1e-12)
    assert rows["tilt_kd"].change == "same" and rows["tilt_kd"].relative is None
    assert rows["trip_tilt"].change == "unit" and rows["trip_tilt"].relative is None
    assert rows["arm_wheel"].change == "only_a" and rows["arm_wheel"].b is None
    assert rows["sp_limit"].change == "only_b" and list(rows)[-1] == "sp_limit"
    table = format_diff(list(rows.values()), a_label="start", b_label="soft", changes_only=True)
    lines = table.splitlines()
    assert lines[0].split() == ["parameter", "unit", "start", "soft", "change"]
    assert lines[1].split() == ["tilt_kp", "rev/s/deg", "0.64", "0.45", "-29.7", "%"]
    assert lines[2].split() == ["tilt_ki", "rev/s/deg/s", "9.9", "6", "-39.4", "%"]
    assert "tilt_kd" not in table
    assert lines[3].split() == ["trip_tilt", "deg", "/", "rad", "20", "0.35", "units", "differ"]
    assert lines[-2].split() == ["arm_wheel", "rev/s", "1", "-", "only", "in", "start"]
    assert lines[-1].split() == ["sp_limit", "deg", "-", "4", "only", "in", "soft"]
