"""The strict YAML loader under profiles and sequences: scalar rules, line numbers, refusals,
and fuzzing (any text, and mutated valid files, give a SchemaError or a valid object only)."""

from __future__ import annotations

import math
import os
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rigbench.profiles.model import load_profile_text
from rigbench.sequences.file import load_sequence_text
from rigbench.base.yamlload import SchemaError, load_yaml, load_yaml_text

ROOT = Path(__file__).parents[1]
# FUZZ_EXAMPLES=5000 for a longer search than the default run
FUZZ = settings(max_examples=int(os.environ.get("FUZZ_EXAMPLES", 300)), deadline=None,
                suppress_health_check=[HealthCheck.too_slow])


@pytest.mark.parametrize("text, value", [
    # YAML 1.2 core schema resolution (yaml.org/spec/1.2.2, 10.3 "Core Schema"): decimal
    # integers, floats with exponents without a dot, only true/false as booleans.
    ("010", 10), ("-7", -7), ("1e-3", 0.001), ("2.5E+2", 250.0), (".5", 0.5),
    ("yes", "yes"), ("on", "on"), ("1:30", "1:30"), ("2025-03-14", "2025-03-14"),
    ("0x1F", "0x1F"), ("true", True), ("False", False), ("~", None), ("", None),
    ("null", None), ("'010'", "010"),
])
def test_scalars_resolve_as_yaml_1_2_core(text, value):
    got = load_yaml_text(f"k: {text}\n").value["k"]
    assert got == value and type(got) is type(value)


def test_infinities_and_nan_read_but_numbers_refuse_them():
    doc = load_yaml_text("a: .inf\nb: -.inf\nc: .nan\n")
    assert doc.value["a"] == math.inf and doc.value["b"] == -math.inf
    assert math.isnan(doc.value["c"])
    with pytest.raises(SchemaError) as e:
        doc.mapping(optional=("a", "b", "c"))["a"].number()
    assert str(e.value) == "<text>:1: a: must be a finite number, got inf"


def test_every_key_and_value_keeps_its_line():
    doc = load_yaml_text("# c\na: 1\nb:\n  c: [1,\n     2]\n  d:\n    - x\n    - y\n")
    m = doc.mapping(("a", "b"))
    assert (m["a"].line, m["b"].line) == (2, 4)
    inner = m["b"].mapping(("c", "d"))
    assert [c.line for c in inner["c"].items()] == [4, 5]
    assert [c.line for c in inner["d"].items()] == [7, 8]
    assert [c.field for c in inner["d"].items()] == ["b.d[1]", "b.d[2]"]


@pytest.mark.parametrize("text, expected", [
    ("a: 1\nb: 2\na: 3\n", "f.yaml:3: a: duplicate key (first given on line 1)"),
    ("a: &x 1\nb: *x\n", "f.yaml:1: (yaml): anchors and aliases (&name, *name) are not allowed here"),
    ("a: !!python/object:os.system x\n", "f.yaml:1: a: tag tag:yaml.org,2002:python/object:os.system is not allowed"),
    ("a: !!int abc\n", "f.yaml:1: a: 'abc' is not a valid int"),
    ("? [1]\n: 2\n", "f.yaml:1: (top): keys must be plain names, not lists, mappings or other values"),
    ("a: 1\n---\nb: 2\n", "f.yaml:2: (yaml): expected a single document in the stream but found another document"),
    ("", "f.yaml:1: (file): the file is empty"),
    ("a: \x07\n", "f.yaml:1: (yaml): not valid YAML: special characters are not allowed"),
    ("[" * 40 + "]" * 40, "f.yaml:1: " + "[1]" * 33 + ": nested deeper than 32 levels"),
])
def test_refusals_name_file_line_and_field(text, expected):
    with pytest.raises(SchemaError) as e:
        load_yaml_text(text, "f.yaml")
    assert str(e.value) == expected


def test_unreadable_and_non_utf8_files(tmp_path):
    bad = tmp_path / "latin.yaml"
    bad.write_bytes(b"name: ok\nnote: caf\xe9\n")
    with pytest.raises(SchemaError) as e:
        load_yaml(bad)
    assert str(e.value) == f"{bad}:2: (file): not UTF-8 text"
    with pytest.raises(SchemaError) as e:
        load_yaml(tmp_path / "missing.yaml")
    assert "cannot read" in str(e.value) and e.value.line is None
    with pytest.raises(SchemaError) as e:
        load_yaml(str(tmp_path / "nul\0.yaml"))
    assert "cannot read" in str(e.value)


def test_very_deep_nesting_is_an_error_not_a_crash():
    with pytest.raises(SchemaError):
        load_yaml_text("[" * 3000)


# --------------------------------------------------------------------------- fuzzing

VALID_PROFILE = (ROOT / "profiles" / "demo-balance-start.yaml").read_text()
VALID_SEQUENCE = (ROOT / "sequences" / "demo-balance-check.yaml").read_text()
YAML_BITS = list(":-[]{},#&*!|>'\"%@` \n\t?.0123456789") + [
    "  ", "- ", ": ", "\n  ", "true", "null", ".nan", "1e400", "9" * 400, "!!int ", "*a",
    "&a ", "<<: ", "---\n", "\x00", "\ufeff", "é", "..", "/etc/passwd", "{", "}", "\\0", "\\x00"]


@st.composite
def mutated(draw, text: str):
    """A valid file with a few edits: characters, YAML tokens, or whole lines moved."""
    lines = text.split("\n")
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from(["insert", "delete", "replace", "dup_line", "drop_line",
                                     "swap_lines", "indent"]))
        i = draw(st.integers(0, len(lines) - 1))
        line = lines[i]
        j = draw(st.integers(0, len(line)))
        if kind == "insert":
            lines[i] = line[:j] + draw(st.sampled_from(YAML_BITS)) + line[j:]
        elif kind == "delete":
            lines[i] = line[:j] + line[j + draw(st.integers(1, 5)):]
        elif kind == "replace":
            lines[i] = line[:j] + draw(st.sampled_from(YAML_BITS)) + line[j + 1:]
        elif kind == "dup_line":
            lines.insert(i, line)
        elif kind == "drop_line" and len(lines) > 1:
            lines.pop(i)
        elif kind == "swap_lines":
            k = draw(st.integers(0, len(lines) - 1))
            lines[i], lines[k] = lines[k], lines[i]
        elif kind == "indent":
            lines[i] = " " * draw(st.integers(1, 4)) + line
    return "\n".join(lines)


@FUZZ
@given(st.text(max_size=400))
def test_any_text_gives_a_value_or_schema_error(text):
    try:
        load_yaml_text(text)
    except SchemaError as e:
        assert str(e).startswith("<text>")


@FUZZ
@given(st.lists(st.sampled_from(YAML_BITS + list("abcz_")), max_size=60).map("".join))
def test_yamlish_text_as_profile_or_sequence(text):
    for load in (load_profile_text, lambda t: load_sequence_text(t, ROOT / "sequences" / "x.yaml")):
        try:
            load(text)
        except SchemaError:
            pass


@FUZZ
@given(mutated(VALID_PROFILE))
def test_mutated_profiles_load_or_raise_schema_error(text):
    try:
        profile = load_profile_text(text, "p.yaml")
    except SchemaError as e:
        assert str(e).startswith("p.yaml")
        return
    assert profile.gains and profile.provenance.date


@FUZZ
@given(mutated(VALID_SEQUENCE))
def test_mutated_sequences_load_or_raise_schema_error(text):
    try:
        seq = load_sequence_text(text, ROOT / "sequences" / "m.yaml")
    except SchemaError as e:
        assert str(e).startswith(str(ROOT / "sequences" / "m.yaml")) or "bad profile" in str(e)
        return
    assert seq.steps
