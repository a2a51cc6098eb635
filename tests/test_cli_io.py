"""The command line at its edges: no terminal, --version, ``-`` for standard input and
output, the report without matplotlib, and help texts in plain words (common practice, no
source)."""

from __future__ import annotations

import io
import re
import subprocess
import sys
import textwrap
import tomllib
from pathlib import Path

import pytest

from rigbench import cli
from rigbench.profiles.model import load_profile, load_profile_text

ROOT = Path(__file__).parents[1]
VSIM = "sim://balance?clock=virtual"
DEMO = ROOT / "profiles" / "demo-balance-start.yaml"


def run(argv, capsys, stdin: str | None = None, monkeypatch=None):
    if stdin is not None:
        monkeypatch.setattr(sys, "stdin", io.StringIO(stdin))
    code = cli.main(argv)
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("argv", [[], ["ui"], ["--port", "sim://wheel"]])
def test_the_ui_without_a_terminal_exits_2_at_once_with_one_line(argv, tmp_path):
    # stdin from /dev/null, stdout to a file: the situation of `rigbench </dev/null >file`
    out_file = tmp_path / "out.txt"
    with open(out_file, "w") as out:
        proc = subprocess.run([sys.executable, "-m", "rigbench", *argv],
                              stdin=subprocess.DEVNULL, stdout=out, stderr=subprocess.PIPE,
                              text=True, timeout=60)
    assert proc.returncode == 2, proc.stderr
    assert out_file.read_text() == ""  # no escape codes, nothing at all
    assert proc.stderr.count("\n") == 1 and "needs a terminal" in proc.stderr
    assert "\x1b" not in proc.stderr


def test_version_is_the_package_metadata_version(capsys):
    from rigbench.base.version import UNKNOWN, package_version

    import rigbench

    code, out, _ = run(["--version"], capsys)
    assert code == 0 and out.strip() == f"rigbench {rigbench.__version__}"
    assert rigbench.__version__ == package_version()
    declared = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["version"]
    # installed from this tree, or a source tree never installed
    assert rigbench.__version__ in (declared, UNKNOWN)


def test_importing_rigbench_loads_nothing_else():
    code = ("import sys; before = set(sys.modules); import rigbench; "
            "print(sorted(m for m in set(sys.modules) - before))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         timeout=60).stdout.strip()
    assert out == "['rigbench']"


def test_pull_to_standard_output_gives_a_profile_that_loads(capsys):
    code, out, err = run(["pull", "-o", "-", "--loop", "tilt", "--port", VSIM], capsys)
    assert code == 0, err
    profile = load_profile_text(out, "<stdout>")
    assert profile.loop == "tilt" and "tilt_kp" in profile.gains
    assert "standard output" in err and not Path("-").exists()


def test_pull_to_standard_output_refuses_json_too(capsys):
    code, out, _ = run(["pull", "-o", "-", "--json", "--port", VSIM], capsys)
    assert code == 2 and '"ok": false' in out


def test_push_reads_the_profile_from_standard_input(capsys, monkeypatch):
    code, out, err = run(["push", "-", "--dry-run", "--port", VSIM], capsys,
                         stdin=DEMO.read_text(), monkeypatch=monkeypatch)
    assert code == 0, err
    assert "<stdin>" in out and "dry run: nothing sent" in out


def test_a_bad_profile_on_standard_input_is_named_stdin(capsys, monkeypatch):
    code, _, err = run(["push", "-", "--dry-run", "--port", VSIM], capsys,
                       stdin="profile: [\n", monkeypatch=monkeypatch)
    assert code == 2 and "<stdin>:" in err and err.count("\n") == 1


def test_diff_takes_one_profile_from_standard_input(capsys, monkeypatch):
    soft = ROOT / "profiles" / "demo-balance-soft.yaml"
    code, out, err = run(["diff", "-", str(soft), "--json"], capsys,
                         stdin=DEMO.read_text(), monkeypatch=monkeypatch)
    assert code == 0, err
    import json

    rows = {r["name"]: r for r in json.loads(out)["rows"]}
    a, b = load_profile(DEMO), load_profile(soft)
    for name in a.gains:
        assert rows[name]["a"] == a.gains[name].value
        assert rows[name]["b"] == b.gains[name].value
    code, _, err = run(["diff", "-", "-"], capsys, stdin="", monkeypatch=monkeypatch)
    assert code == 2 and "only one" in err


@pytest.mark.parametrize("argv, words", [
    (["watch", "--csv", "-", "--seconds", "1", "--port", VSIM], "sidecar"),
    (["run", "-"], "its own folder"),
])
def test_dash_where_a_file_is_needed_is_refused_with_the_reason(argv, words, capsys):
    code, _, err = run(argv, capsys)
    assert code == 2 and words in err and err.count("\n") == 1
    assert not Path("-").exists()


def test_report_without_matplotlib_writes_the_summary(tmp_path):
    rec = tmp_path / "quiet.csv"
    assert cli.main(["watch", "--seconds", "0.5", "--csv", str(rec), "--port", VSIM]) == 0
    shim = textwrap.dedent(f"""
        import sys
        sys.modules["matplotlib"] = None  # import matplotlib raises ImportError
        from rigbench.cli import main
        sys.exit(main(["report", {str(rec)!r}, "--out", {str(tmp_path / "r")!r}]))
    """)
    proc = subprocess.run([sys.executable, "-c", shim], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 0, proc.stderr
    md = (tmp_path / "r" / "summary.md").read_text()
    assert "quiet.csv" in md and "No plots" in md
    assert not list((tmp_path / "r").glob("*.png"))
    assert "pip install 'rigbench[plots]'" in proc.stderr
    assert "pipx inject rigbench matplotlib" in proc.stderr
    assert proc.stderr.count("\n") == 1


# reST markup, roles, and names of modules of the package have no place in --help
MARKUP = [re.compile(p) for p in (r"``", r"`", r":[a-z]+:`", r"\brigbench\.[a-z_]+",
                                  r"\bbench\.[a-z_]+", r"\bMust not\b", r"\*\*")]


def _helps(capsys):
    yield "rigbench", run(["--help"], capsys)
    for name in cli.COMMANDS:
        yield name, run([name, "--help"], capsys)


def test_help_texts_are_plain_words(capsys):
    seen = 0
    for name, (code, out, err) in _helps(capsys):
        assert code == 0 and out.startswith("usage: rigbench"), (name, err)
        for pattern in MARKUP:
            assert not pattern.search(out), (name, pattern.pattern,
                                             pattern.search(out).group(0))
        seen += 1
    assert seen == len(cli.COMMANDS) + 1
