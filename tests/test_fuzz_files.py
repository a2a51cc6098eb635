"""Every kind of file rigbench reads, damaged at random, read through the command line:
profiles (`push --dry-run`), sequences (`run --dry-run`), recordings with their sidecar and
events file (`report`, `replay://` through `info`), results folders (`report` on
summary.yaml). Whatever the damage, the answer is a working command or one clear line with
a usage, link or check exit code: never an internal error (exit 1), never a hang.

Also: a long sweep's recording (notes past their cap, many events) still reads back.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rigbench.cli import main
from rigbench.recordings import recording as recmod
from rigbench.recordings.recording import events_path, load_recording, sidecar_path

ROOT = Path(__file__).parents[1]
FUZZ = settings(max_examples=25, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow])

_BITS = [b",", b"\n", b" ", b"[", b"]", b"{", b"}", b"nan", b".inf", b"-", b"1e999", b"\x00",
         b"\xff", b"#", b":", b"- ", b"&a ", b"*a", b"!!python/object:os.system", b"<<: *a",
         b"\t", b"0x1", b"~", b"null", b"'", b'"', b"../../x", b"/dev/zero", b"999999999"]

_VALUES = [None, True, -1, 0, 1e308, -1e308, float("nan"), "x", "../../etc/passwd", [], {},
           [1, 2], {"a": 1}, "a" * 300, 2 ** 70]


@st.composite
def damaged(draw, data: bytes) -> bytes:
    """``data`` with a few bytes flipped, spliced, cut or lines dropped."""
    out = bytearray(data)
    for _ in range(draw(st.integers(1, 4))):
        if not out:
            break
        i = draw(st.integers(0, len(out) - 1))
        kind = draw(st.sampled_from(["flip", "splice", "cut", "drop_line", "trunc"]))
        if kind == "flip":
            out[i] ^= 1 << draw(st.integers(0, 7))
        elif kind == "splice":
            out[i:i] = draw(st.sampled_from(_BITS))
        elif kind == "cut":
            del out[i:i + draw(st.integers(1, 20))]
        elif kind == "drop_line":
            lines = bytes(out).split(b"\n")
            del lines[draw(st.integers(0, len(lines) - 1))]
            out = bytearray(b"\n".join(lines))
        else:
            del out[i:]
    return bytes(out)


def _paths(doc, prefix=()):
    """Every (path, value) in a YAML document, mappings and lists."""
    yield prefix, doc
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            yield from _paths(v, prefix + (i,))


@st.composite
def retyped(draw, doc):
    """``doc`` (parsed YAML) with one value anywhere replaced by one of another kind."""
    doc = json.loads(json.dumps(doc, default=str))
    paths = [p for p, _ in _paths(doc) if p]
    path = draw(st.sampled_from(paths))
    node = doc
    for k in path[:-1]:
        node = node[k]
    node[path[-1]] = draw(st.sampled_from(_VALUES))
    return doc


def _cli(capsys, *argv) -> tuple[int, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, err


def _no_internal_error(code: int, err: str) -> None:
    assert code != 1 and "internal error" not in err and "Traceback" not in err, err
    assert code in (0, 2, 3, 4, 6), (code, err)


# ---------------------------------------------------------------------------- files


SMALL_RUN = """sequence: 1
name: small run
port: sim://balance?clock=virtual
guards: {tilt_deg: 15, wheel_fraction: 0.8}
steps:
  - arm
  - hold
  - record: {seconds: 1, name: quiet}
  - relay: {loop: tilt, amplitude: 1.0, hysteresis: 0.1, bound: 8, max_s: 30, cycles: 4}
  - hold
  - sweep: {loop: tilt, shape: pulse, at: body, amplitudes: [0.05], repeats: 1,
            spacing_s: 1, time_s: 0.05}
  - disarm
"""


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    """A real results folder (recordings of each kind of step), run on the virtual clock."""
    base = tmp_path_factory.mktemp("res")
    (base / "s.yaml").write_text(SMALL_RUN)
    out = base / "results"
    code = main(["run", str(base / "s.yaml"), "--out", str(out), "--no-plots"])
    assert code == 0
    return out


@FUZZ
@given(data=st.data())
def test_a_damaged_profile_is_refused_in_one_line(tmp_path, capsys, data):
    text = (ROOT / "profiles" / "demo-balance-start.yaml").read_bytes()
    path = tmp_path / "p.yaml"
    path.write_bytes(data.draw(damaged(text)))
    code, err = _cli(capsys, "push", path, "--port", "sim://balance?clock=virtual",
                     "--dry-run")
    _no_internal_error(code, err)


@FUZZ
@given(data=st.data())
def test_a_damaged_sequence_is_refused_in_one_line(tmp_path, capsys, data):
    proj = tmp_path / "proj"
    shutil.rmtree(proj, ignore_errors=True)
    shutil.copytree(ROOT / "profiles", proj / "profiles")
    (proj / "sequences").mkdir()
    text = (ROOT / "sequences" / "demo-balance-check.yaml").read_bytes()
    path = proj / "sequences" / "s.yaml"
    path.write_bytes(data.draw(damaged(text)))
    code, err = _cli(capsys, "run", path, "--dry-run")
    _no_internal_error(code, err)


def _copy_recording(src_csv: Path, folder: Path) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    for f in (src_csv, sidecar_path(src_csv), events_path(src_csv)):
        if f.exists():
            shutil.copy(f, folder / f.name)
    return folder / src_csv.name


@FUZZ
@given(data=st.data())
def test_a_retyped_sidecar_replays_or_is_refused_in_one_line(results, tmp_path, capsys, data):
    csv = _copy_recording(results / "quiet.csv", tmp_path / "r")
    side = sidecar_path(csv)
    doc = yaml.safe_load(side.read_text())
    side.write_text(yaml.safe_dump(data.draw(retyped(doc)), sort_keys=False))
    code, err = _cli(capsys, "info", "--port", f"replay://{csv}?clock=virtual")
    _no_internal_error(code, err)


@FUZZ
@given(data=st.data())
def test_damaged_events_replay_or_are_refused_in_one_line(results, tmp_path, capsys, data):
    csv = _copy_recording(results / "relay-tilt.csv", tmp_path / "e")
    ev = events_path(csv)
    ev.write_bytes(data.draw(damaged(ev.read_bytes())))
    code, err = _cli(capsys, "info", "--port", f"replay://{csv}?clock=virtual")
    _no_internal_error(code, err)


@settings(max_examples=6, deadline=None,   # each report draws its plots: seconds each
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(data=st.data())
def test_a_damaged_or_retyped_summary_reports_or_is_refused(results, tmp_path, capsys, data):
    folder = tmp_path / "f"
    shutil.rmtree(folder, ignore_errors=True)
    shutil.copytree(results, folder)
    summary = folder / "summary.yaml"
    if data.draw(st.booleans()):
        summary.write_bytes(data.draw(damaged(summary.read_bytes())))
    else:
        doc = yaml.safe_load(summary.read_text())
        summary.write_text(yaml.safe_dump(data.draw(retyped(doc)), sort_keys=False))
    pytest.importorskip("matplotlib")
    code, err = _cli(capsys, "report", folder, "--out", tmp_path / "out")
    _no_internal_error(code, err)


def test_an_alias_bomb_in_summary_yaml_is_refused_at_once(results, tmp_path, capsys):
    folder = tmp_path / "bomb"
    shutil.copytree(results, folder)
    bomb = "format: x\na: &a [x, x, x, x, x, x, x, x, x]\n" + "".join(
        f"{c}: &{c} [*{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}]\n"
        for p, c in zip("abcdefgh", "bcdefghi"))
    (folder / "summary.yaml").write_text(bomb)
    code, err = _cli(capsys, "report", folder)
    assert code == 2 and "anchors and aliases" in err


# ---------------------------------------------------------------------------- long runs


def test_a_long_sweeps_recording_reads_back_past_every_cap(tmp_path, capsys, monkeypatch):
    # the caps made small so that a short sweep passes them (scripts/sweep_recording.py
    # runs 2 x 2000 injections with the real ones)
    monkeypatch.setattr(recmod, "NOTES_MAX", 8)
    monkeypatch.setattr(recmod, "EVENTS_MAX", 40)
    out = tmp_path / "sweep"
    code, err = _cli(capsys, "sweep", "--port", "sim://balance?clock=virtual", "--gains",
                     ROOT / "profiles" / "demo-balance-start.yaml", "--gains",
                     ROOT / "profiles" / "demo-balance-soft.yaml", "--amplitudes", "0.02,0.04",
                     "--repeats", "4", "--settle", "0.3", "--width", "0.05", "--out", out)
    assert code == 0, err
    monkeypatch.undo()
    (csv,) = sorted(out.glob("*.csv"))
    rec = load_recording(csv)
    assert rec.complete and len(rec) > 1000
    assert len(rec.sidecar["notes"]) == 8 and rec.sidecar["notes_dropped"] > 0
    assert len(rec.events) == 40 and rec.sidecar["events_dropped"] > 0
