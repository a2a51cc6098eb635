"""Sequence files: one fixture per kind of mistake (exact file:line: field), the step
vocabulary, paths kept inside the project folder, repeat unrolling, and the shipped demos."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from rigbench.sequences.file import (
    STEP_KINDS, SchemaError, expand, load_sequence, load_sequence_text, project_folder,
)
from rigbench.sequences.steps import (
    METRICS, CheckStep, describe_step, Guards, PushStep, RecordStep, RelayStep, RepeatStep, SetStep, SweepStep,
    WaitStep,
)

ROOT = Path(__file__).parents[1]
BAD = ROOT / "tests" / "fixtures" / "sequences_bad"
PROFILE = (ROOT / "profiles" / "demo-wheel.yaml").read_text()


def _expected(path: Path) -> str:
    line, tail = re.match(r"# expect: (\d+) (.*)", path.read_text().splitlines()[0]).groups()
    return f"{path}:{line}: {tail}"


@pytest.mark.parametrize("path", sorted(BAD.glob("*.yaml")), ids=lambda p: p.stem)
def test_bad_sequence_names_file_line_and_step(path):
    with pytest.raises(SchemaError) as e:
        load_sequence(path)
    assert str(e.value).startswith(_expected(path).rstrip())


def test_fixtures_cover_every_kind_of_mistake():
    names = {p.stem for p in BAD.glob("*.yaml")}
    assert {"unknown_key", "wrong_type", "bad_number", "duplicate_key", "out_of_range",
            "missing_required", "bad_yaml", "escape_dotdot", "escape_absolute",
            "unknown_step_kind"} <= names


def _project(tmp_path: Path) -> Path:
    (tmp_path / "profiles").mkdir(parents=True)
    (tmp_path / "profiles" / "w.yaml").write_text(PROFILE)
    (tmp_path / "sequences").mkdir()
    return tmp_path


def _seq(steps: str, guards: str = "{tilt_deg: 15}") -> str:
    return f"sequence: 1\nname: t\nguards: {guards}\nsteps:\n{steps}"


def test_symlink_leading_out_of_the_project_is_refused(tmp_path):
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    (outside / "p.yaml").write_text(PROFILE)
    proj = _project(tmp_path / "proj")
    (proj / "profiles" / "sneaky.yaml").symlink_to(outside / "p.yaml")
    (proj / "profiles" / "linkdir").symlink_to(outside, target_is_directory=True)
    for path in ("profiles/sneaky.yaml", "profiles/linkdir/p.yaml"):
        with pytest.raises(SchemaError) as e:
            load_sequence_text(_seq(f"  - push: {path}\n"), proj / "sequences" / "s.yaml")
        assert str(e.value).startswith(
            f"{proj / 'sequences' / 's.yaml'}:5: steps[1].push.profile: {path!r} leads outside "
            "the project folder")
    inside = proj / "profiles" / "alias.yaml"
    inside.symlink_to(proj / "profiles" / "w.yaml")
    seq = load_sequence_text(_seq("  - push: profiles/alias.yaml\n"), proj / "sequences" / "s.yaml")
    assert seq.steps[0].path == proj / "profiles" / "alias.yaml"


@pytest.mark.parametrize("path, words", [
    ("C:/x.yaml", "write paths with /"), ("profiles\\w.yaml", "write paths with /"),
    ("~/w.yaml", "write paths with /"), ("profiles", "is not a file"),
    ("profiles/../profiles/w.yaml", "steps out with '..'"),
    ("profiles/\0w.yaml", "contains control characters"),
])
def test_other_bad_paths(tmp_path, path, words):
    proj = _project(tmp_path)
    with pytest.raises(SchemaError) as e:
        load_sequence_text(_seq(f"  - push: {json.dumps(path)}\n"), proj / "sequences" / "s.yaml")
    assert words in e.value.message and e.value.field == "steps[1].push.profile"


def test_project_folder_rule(tmp_path):
    assert project_folder(tmp_path / "sequences" / "a.yaml") == tmp_path
    assert project_folder(tmp_path / "tests" / "a.yaml") == tmp_path / "tests"
    proj = _project(tmp_path)
    (proj / "here.yaml").write_text(_seq("  - push: profiles/w.yaml\n"))
    assert load_sequence(proj / "here.yaml").project == proj
    seq = load_sequence_text(_seq("  - push: w.yaml\n"), tmp_path / "x" / "s.yaml",
                             project=proj / "profiles")
    assert seq.steps[0].profile.loop == "speed"


def test_every_kind_reads_into_its_dataclass(tmp_path):
    proj = _project(tmp_path)
    text = _seq("""\
  - push: {profile: profiles/w.yaml, persist: true}
  - arm
  - hold:
  - wait: 2.5
  - wait: {settled: {signal: tilt, below: 0.5, for_s: 1}, timeout_s: 10, guards: {tilt_deg: 5}}
  - relay: {loop: tilt, amplitude: 0.5, hysteresis: 0.1, bound: 8, max_s: 30}
  - sweep: {loop: tilt, shape: step, at: setpoint, amplitudes: [1, -1], repeats: 2, spacing_s: 2, time_s: 1}
  - record: {seconds: 3, name: quiet.run-1}
  - set: {tilt_kp: 0.7, trip_tilt: 25, timeout_s: 1}
  - check: relay.period_s <= 1.5e0
  - check: {metric: fell, op: "<", value: 1}
  - disarm
""", guards="{}")
    seq = load_sequence_text(text, proj / "sequences" / "s.yaml")
    kinds = [s.kind for s in seq.steps]
    assert kinds == ["push", "arm", "hold", "wait", "wait", "relay", "sweep", "record", "set",
                     "check", "check", "disarm"]
    push, _, _, w1, w2, relay, sweep, rec, st, c1, c2, _ = seq.steps
    assert isinstance(push, PushStep) and push.persist and push.profile.rig == "wheel"
    assert isinstance(w1, WaitStep) and w1.seconds == 2.5 and w1.settled is None
    assert w2.settled.signal == "tilt" and w2.settled.below == 0.5 and w2.timeout_s == 10
    assert w2.guards == Guards(tilt_deg=5)
    assert isinstance(relay, RelayStep) and (relay.bias, relay.cycles) == (0.0, 6)
    assert isinstance(sweep, SweepStep) and sweep.amplitudes == (1.0, -1.0)
    assert isinstance(rec, RecordStep) and rec.name == "quiet.run-1"
    assert isinstance(st, SetStep) and st.values == {"tilt_kp": 0.7, "trip_tilt": 25.0}
    assert st.timeout_s == 1
    assert isinstance(c1, CheckStep) and (c1.metric, c1.op, c1.value) == ("relay.period_s", "<=", 1.5)
    assert (c2.metric, c2.op, c2.value) == ("fell", "<", 1.0)
    assert c2.passes(0) and not c2.passes(1)
    assert seq.guards == Guards(stale_s=0.5) and seq.on_abort == "kill"
    assert [s.line for s in seq.steps] == list(range(5, 17))
    assert seq.steps[5].where == "steps[6].relay"


def test_expand_unrolls_nested_repeats_with_values_substituted(tmp_path):
    text = _seq("""\
  - arm
  - repeat:
      for: {param: tilt_kp, values: [0.5, 0.75]}
      guards: {tilt_deg: 10}
      steps:
        - repeat:
            for: {param: tilt_ki, values: [8, 12.5]}
            steps:
              - record: {seconds: 1, name: "kp{tilt_kp}-ki{tilt_ki}"}
  - disarm
""", guards="{tilt_deg: 15, stale_s: 0.2}")
    seq = load_sequence_text(text, tmp_path / "s.yaml")
    assert isinstance(seq.steps[1], RepeatStep) and seq.steps[1].steps[0].index == "2.1"
    flat = expand(seq)
    got = [(s.kind, s.index, getattr(s, "values", None) or getattr(s, "name", None))
           for s in flat]
    assert got == [
        ("arm", "1", None),
        ("set", "2", {"tilt_kp": 0.5}),
        ("set", "2.1", {"tilt_ki": 8.0}), ("record", "2.1.1", "kp0.5-ki8"),
        ("set", "2.1", {"tilt_ki": 12.5}), ("record", "2.1.1", "kp0.5-ki12.5"),
        ("set", "2", {"tilt_kp": 0.75}),
        ("set", "2.1", {"tilt_ki": 8.0}), ("record", "2.1.1", "kp0.75-ki8"),
        ("set", "2.1", {"tilt_ki": 12.5}), ("record", "2.1.1", "kp0.75-ki12.5"),
        ("disarm", "3", None),
    ]
    assert flat[3].bindings == (("tilt_kp", 0.5), ("tilt_ki", 8.0))
    assert flat[3].label() == "step 2.1.1 record (tilt_kp=0.5, tilt_ki=8)"
    assert flat[3].guards == Guards(tilt_deg=10, stale_s=0.2)  # the repeat's override
    assert flat[-1].guards == Guards(tilt_deg=15, stale_s=0.2)


def test_limits_on_size_and_nesting(tmp_path):
    big = _seq("  - repeat:\n      for: {param: a, values: [%s]}\n      steps:\n"
               "        - repeat:\n            for: {param: b, values: [%s]}\n"
               "            steps: [hold]\n" % (", ".join(["1"] * 200), ", ".join(["1"] * 60)))
    with pytest.raises(SchemaError) as e:
        load_sequence_text(big, tmp_path / "s.yaml")
    assert str(e.value) == f"{tmp_path / 's.yaml'}:5: steps: more than 10000 steps once " \
                           "repeats are unrolled"
    nest = "  - repeat: {for: {param: p%d, values: [1]}, steps: [%s]}"
    inner = "hold"
    for i in range(4):
        inner = "{repeat: {for: {param: p%d, values: [1]}, steps: [%s]}}" % (i, inner)
    with pytest.raises(SchemaError) as e:
        load_sequence_text(_seq(f"  - {inner}\n"), tmp_path / "s.yaml")
    assert "repeats nest at most 3 deep" in str(e.value)
    with pytest.raises(SchemaError) as e:
        load_sequence_text(_seq(nest % (1, "{repeat: {for: {param: p1, values: [2]}, "
                                           "steps: [hold]}}") + "\n"), tmp_path / "s.yaml")
    assert "'p1' is already the parameter of an enclosing repeat" in str(e.value)


@pytest.mark.parametrize("step, message", [
    ("- relay", "steps[1].relay: relay needs its fields: loop, amplitude, hysteresis, bound, max_s"),
    ("- arm: 5", "steps[1].arm: expected a mapping (key: value lines), got the number 5"),
    ("- check: relay.period_s ~ 2", "steps[1].check.text: expected 'METRIC OP NUMBER'"),
    ("- check: relay.period_s < two", "steps[1].check.text: 'two' is not a number"),
    ("- check: {metric: fell, op: '=', value: 0}", "steps[1].check.op: expected one of <, <=, >, >="),
    ("- check: {metric: fell, op: '<'}", "steps[1].check.value: required key missing"),
    ("- wait: {seconds: 1, settled: {signal: tilt, below: 1, for_s: 1}, timeout_s: 3}",
     "steps[1].wait: give either seconds or settled (not both)"),
    ("- wait: -1", "steps[1].wait.seconds: -1 is below the minimum 0.001"),
    ("- wait: 1e308", "steps[1].wait.seconds: 1e+308 is above the maximum 86400"),
    ("- wait: {seconds: 1, timeout_s: 1e-300}",
     "steps[1].wait.timeout_s: 1e-300 is below the minimum 0.001"),
    ("- relay: {loop: tilt, amplitude: 1e308, hysteresis: 0, bound: 1, max_s: 5}",
     "steps[1].relay.amplitude: 1e+308 is larger than 1e+12 in size"),
    ("- set: {timeout_s: 2}", "steps[1].set: set needs at least one parameter: value"),
    ("- set: {Tilt_kp: 2}", "steps[1].set.Tilt_kp: 'Tilt_kp' is not a parameter name"),
    ("- sweep: {loop: tilt, shape: pulse, at: body, amplitudes: [1], repeats: 1, spacing_s: 0.5, "
     "time_s: 1}", "steps[1].sweep.spacing_s: spacing_s 0.5 is shorter than time_s 1"),
    ("- record: {seconds: 1, name: ../x}", "steps[1].record.name: '../x' is not a plain file name"),
    ("- 5", "steps[1]: expected a step (one of push, arm"),
    ("- repeat: {for: {param: kp, values: []}, steps: [hold]}",
     "steps[1].repeat.for.values: needs at least 1 item(s)"),
])
def test_step_mistakes(tmp_path, step, message):
    with pytest.raises(SchemaError) as e:
        load_sequence_text(_seq(f"  {step}\n"), tmp_path / "s.yaml")
    assert str(e.value).startswith(f"{tmp_path / 's.yaml'}:5: {message}")


@pytest.mark.parametrize("name", ["demo-balance-check", "demo-wheel-relay"])
def test_demo_sequences_load(name):
    seq = load_sequence(ROOT / "sequences" / f"{name}.yaml")
    assert seq.demo and seq.project == ROOT
    flat = expand(seq)
    assert flat[-1].kind == "disarm" and any(s.kind == "relay" for s in flat)
    assert all(isinstance(s.guards, Guards) and s.guards.stale_s == 0.5 for s in flat)


def test_balance_demo_has_the_promised_shape():
    seq = load_sequence(ROOT / "sequences" / "demo-balance-check.yaml")
    kinds = [s.kind for s in seq.steps]
    assert kinds[:4] == ["push", "arm", "hold", "wait"] and seq.steps[3].settled is not None
    relay = next(s for s in seq.steps if s.kind == "relay")
    sweep = next(s for s in seq.steps if s.kind == "sweep")
    assert relay.loop == "tilt" and len(sweep.amplitudes) == 2 and sweep.repeats == 3
    assert kinds.count("check") >= 2


def test_readme_documents_the_vocabulary_and_its_example_loads():
    text = (ROOT / "sequences" / "README.md").read_text()
    for kind in STEP_KINDS:
        assert f"| `{kind}` |" in text, kind
    for metric in METRICS:
        assert f"`{metric}`" in text, metric
    block = re.search(r"```yaml\n(.*?)```", text, re.S).group(1)
    seq = load_sequence_text(block, ROOT / "sequences" / "README-example.yaml")
    assert [s.name for s in expand(seq) if s.kind == "record"] == [
        "after-kp0.5", "after-kp0.64", "after-kp0.8"]


def test_dry_run_lines():
    seq = load_sequence(ROOT / "sequences" / "demo-wheel-relay.yaml")
    lines = [describe_step(s, project=seq.project).split() for s in expand(seq)]
    assert lines[0] == ["1", "push", "path=profiles/demo-wheel.yaml", "persist=false"]
    assert lines[6] == ["7", "check", "relay.cycles", ">=", "6"]
    assert lines[9] == ["10", "set", "speed_kp=0.2", "[speed_kp=0.2]"]
    assert lines[11] == ["10.2", "sweep", "loop=speed", "shape=step", "at=setpoint",
                         "amplitudes=2,-2", "repeats=2", "spacing_s=2", "time_s=1",
                         "[speed_kp=0.2]"]
    assert lines[12][3] == "name=after-kp0.2"
    seq = load_sequence(ROOT / "sequences" / "demo-balance-check.yaml")
    assert describe_step(seq.steps[3]).split() == ["4", "wait", "settled=|tilt|<1", "for", "2",
                                                   "s", "timeout_s=20"]
