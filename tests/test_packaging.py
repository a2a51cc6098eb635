"""The package as a user gets it: a wheel built from this tree holds the demos, the protocol
specification and its vectors, and the README's demo commands work from a folder made by
``rigbench examples`` with only the installed wheel on the path; a package named ``bench``
from some other project beside rigbench changes nothing; the example files come from one
source (common practice, no source)."""

from __future__ import annotations

import ast
import os
import shutil
import subprocess
import sys
import tomllib
import zipfile
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

import pytest

from rigbench.base.examples import (
    EXAMPLES, ExamplesMissing, copy_examples, example_files, examples_root,
)

ROOT = Path(__file__).parents[1]
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text())
VIRTUAL = "sim://balance?clock=virtual"


def _setuptools_ok() -> bool:
    try:
        major = int(version("setuptools").split(".")[0])
        version("wheel")
    except (PackageNotFoundError, ValueError):
        return False
    return major >= 77  # SPDX license expressions and license-files


def _source_copy(dest: Path) -> Path:
    """The files a build reads, copied so the build leaves nothing in this tree."""
    skip = shutil.ignore_patterns("__pycache__", "*.pyc", "*.egg-info", "build", "build-san",
                                  ".pytest_cache")
    for name in ("bench", "profiles", "sequences", "protocol"):
        shutil.copytree(ROOT / name, dest / name, ignore=skip)
    for name in ("pyproject.toml", "setup.py", "README.md", "LICENSE", "MANIFEST.in"):
        shutil.copy2(ROOT / name, dest / name)
    return dest


def _run(args, cwd, env, timeout=240):
    proc = subprocess.run([sys.executable, *args], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=timeout)
    assert proc.returncode == 0, (args, proc.stdout[-2000:], proc.stderr[-2000:])
    return proc


def _clean_env(pythonpath: str) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PYTHON", "RIGBENCH_"))}
    env["PYTHONPATH"] = pythonpath
    return env


@pytest.mark.skipif(not _setuptools_ok(), reason="needs setuptools>=77 and wheel (the test "
                    "extra installs them) to build the wheel without the network")
def test_the_wheel_ships_the_demos_and_the_readme_commands_run_from_it(tmp_path):
    src = _source_copy(tmp_path / "src")
    dist = tmp_path / "dist"
    _run(["-m", "pip", "wheel", "-q", "--no-deps", "--no-build-isolation", "-w", str(dist),
          str(src)], cwd=tmp_path, env=dict(os.environ, PIP_NO_INDEX="1"))
    wheel = next(dist.glob("rigbench-*.whl"))
    names = set(zipfile.ZipFile(wheel).namelist())
    for _, rel in example_files():
        assert f"rigbench/examples/{rel}" in names, rel
    assert "rigbench/py.typed" in names and "rigbench/ui/rigbench.tcss" in names
    info = f"rigbench-{PYPROJECT['project']['version']}.dist-info"
    assert f"{info}/licenses/LICENSE" in names
    # one import name: nothing outside rigbench/ and its metadata
    assert {n.split("/")[0] for n in names} == {"rigbench", info}

    site = tmp_path / "site"
    _run(["-m", "pip", "install", "-q", "--no-deps", "--target", str(site), str(wheel)],
         cwd=tmp_path, env=dict(os.environ, PIP_NO_INDEX="1"))
    work = tmp_path / "work"
    work.mkdir()
    env = _clean_env(str(site))
    where = _run(["-c", "import rigbench; print(rigbench.__file__); print(rigbench.__version__)"],
                 cwd=work, env=env).stdout.split()
    assert Path(where[0]).is_relative_to(site), where  # the wheel, not this tree
    assert where[1] == PYPROJECT["project"]["version"]

    _run(["-m", "rigbench", "examples", "demo"], cwd=work, env=env)
    demo = work / "demo"
    for _, rel in example_files():
        assert (demo / rel).is_file(), rel
    out = _run(["-m", "rigbench", "push", "profiles/demo-balance-start.yaml", "--dry-run"],
               cwd=demo, env=env).stdout
    assert "dry run: nothing sent" in out
    out = _run(["-m", "rigbench", "run", "sequences/demo-balance-check.yaml", "--port",
                VIRTUAL], cwd=demo, env=env).stdout
    assert "checks passed" in out and (demo / "results").is_dir()


def test_a_package_named_bench_beside_rigbench_changes_nothing(tmp_path):
    fake = tmp_path / "other" / "bench"
    fake.mkdir(parents=True)
    # another project's top-level ``bench``: importing it at all is the failure
    (fake / "__init__.py").write_text("raise ImportError('the other bench package was "
                                      "imported')\n")
    (fake / "cli.py").write_text("def main():\n    return 99\n")
    env = _clean_env(os.pathsep.join([str(tmp_path / "other"), str(ROOT / "bench")]))
    work = tmp_path / "work"
    work.mkdir()
    out = _run(["-c", "import rigbench.api, rigbench.cli, sys; print('bench' in sys.modules)"],
               cwd=work, env=env).stdout
    assert out.strip() == "False"
    out = _run(["-m", "rigbench", "info", "--json", "--port", VIRTUAL, "--listen", "0"],
               cwd=work, env=env).stdout
    assert '"simulated": true' in out
    out = _run(["-m", "rigbench", "push", str(ROOT / "profiles" / "demo-balance-start.yaml"),
                "--dry-run", "--port", VIRTUAL], cwd=work, env=env).stdout
    assert "dry run: nothing sent" in out
    proc = subprocess.run([sys.executable, "-c", "import bench"], cwd=work, env=env,
                          capture_output=True, text=True)
    assert "the other bench package was imported" in proc.stderr  # the fake is reachable


def test_no_module_imports_a_top_level_bench():
    for path in (ROOT / "bench" / "rigbench").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import) else
                     [node.module or ""] if isinstance(node, ast.ImportFrom) and not node.level
                     else [])
            assert not any(n == "bench" or n.startswith("bench.") for n in names), path


def test_examples_come_from_the_repository_folders_in_a_source_tree():
    assert examples_root() == ROOT
    rels = [rel for _, rel in example_files()]
    assert "profiles/demo-balance-start.yaml" in rels
    assert "sequences/demo-balance-check.yaml" in rels
    assert "protocol/PROTOCOL.md" in rels and "protocol/vectors/frames.json" in rels
    assert not any("board-c" in r or r.endswith(".py") for r in rels)
    assert {folder for folder, _ in EXAMPLES} == {"profiles", "sequences", "protocol",
                                                   "protocol/vectors"}


def test_examples_missing_everywhere_is_a_clear_error(tmp_path):
    pkg = tmp_path / "a" / "b" / "rigbench"
    pkg.mkdir(parents=True)
    with pytest.raises(ExamplesMissing, match="not in this installation"):
        examples_root(pkg)


def test_copy_examples_keeps_what_is_there_and_refuses_to_overwrite(tmp_path):
    first = copy_examples(tmp_path / "ex")
    assert len(first.written) == len(example_files()) and not first.unchanged
    for src, rel in example_files():
        assert (tmp_path / "ex" / rel).read_bytes() == src.read_bytes()
    again = copy_examples(tmp_path / "ex")
    assert not again.written and len(again.unchanged) == len(example_files())
    mine = tmp_path / "ex" / "profiles" / "demo-wheel.yaml"
    mine.write_text("my own edits\n")
    with pytest.raises(FileExistsError, match="demo-wheel.yaml"):
        copy_examples(tmp_path / "ex")
    assert mine.read_text() == "my own edits\n"
    assert copy_examples(tmp_path / "ex", force=True).written == [mine]


def test_examples_command(tmp_path, capsys):
    from rigbench.cli import main

    assert main(["examples", str(tmp_path / "d")]) == 0
    assert (tmp_path / "d" / "sequences" / "demo-balance-check.yaml").is_file()
    (tmp_path / "d" / "protocol" / "PROTOCOL.md").write_text("changed\n")
    capsys.readouterr()
    assert main(["examples", str(tmp_path / "d")]) == 2
    err = capsys.readouterr().err
    assert "PROTOCOL.md" in err and "--force" in err and err.count("\n") == 1


def test_ci_finds_the_lowest_declared_textual():
    out = subprocess.run([sys.executable, str(ROOT / "scripts" / "textual_floor.py")],
                         capture_output=True, text=True, timeout=60).stdout.strip()
    dep = next(d for d in PYPROJECT["project"]["dependencies"] if d.startswith("textual"))
    assert out and f">={out}" in dep.replace(" ", "")


@pytest.mark.skipif(not _setuptools_ok() or shutil.which("git") is None
                    or not (ROOT / ".git").exists(),
                    reason="needs setuptools>=77, wheel and a git checkout")
def test_the_sdist_holds_every_tracked_file(tmp_path):
    tracked = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True,
                             check=True).stdout.split()
    tracked = [f for f in tracked if (ROOT / f).is_file()]  # not deleted, not yet committed
    src = tmp_path / "src"
    for name in tracked:
        (src / name).parent.mkdir(parents=True, exist_ok=True)
        shutil.copy2(ROOT / name, src / name)
    _run(["-c", "from setuptools import build_meta as b; b.build_sdist('dist')"], cwd=src,
         env=dict(os.environ, PIP_NO_INDEX="1"))
    import tarfile

    with tarfile.open(next((src / "dist").glob("rigbench-*.tar.gz"))) as tar:
        names = {n.split("/", 1)[1] for n in tar.getnames() if "/" in n}
    missing = sorted(set(tracked) - names - {".gitignore"})
    assert not missing, missing
    for needed in ("LICENSE", "tests/conftest.py", ".ci/run", "setup.py", "MANIFEST.in",
                   "protocol/board-c/src/rb_board.c", "protocol/vectors/frames.json"):
        assert needed in names, needed
    assert any(n.startswith("tests/fixtures/") for n in names)
