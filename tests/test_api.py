"""The Python API: the README's example runs as written on the simulated wheel rig in
virtual time, and recordings load as arrays or a DataFrame (common practice, no source)."""

from __future__ import annotations

import ast
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import rigbench.api as api
from rigbench.cli import main

ROOT = Path(__file__).parents[1]


def _readme_example() -> str:
    text = (ROOT / "README.md").read_text()
    section = text.split("## Python API", 1)[1].split("\n## ", 1)[0]
    return re.search(r"```python\n(.*?)```", section, re.S).group(1)


def test_the_readme_example_runs(tmp_path):
    code = _readme_example()
    assert "clock=virtual" in code  # whole experiment in virtual time
    proc = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True,
                          text=True, timeout=240)
    assert proc.returncode == 0, proc.stderr[-3000:]
    lines = proc.stdout.splitlines()
    assert lines[0].startswith("relay test: converged, Ku ")
    # e^(-0.5s)/(s+1)^3: three proposals meet the ranking limits (docs/METHODS.md §2)
    assert len(lines) == 5 and all("phase margin" in ln for ln in lines[1:4])
    assert lines[4].startswith("recorded ") and " y," in lines[4]
    assert list((tmp_path / "results" / "api-demo").glob("*.csv"))


def test_every_exported_name_exists():
    for name in api.__all__:
        assert getattr(api, name) is not None, name


@pytest.fixture
def recording(tmp_path):
    path = tmp_path / "r.csv"
    assert main(["watch", "--seconds", "0.3", "--csv", str(path), "--port",
                 "sim://wheel?clock=virtual"]) == 0
    return path


def test_recording_as_arrays(recording):
    rec = api.load_recording(recording)
    assert rec.values.shape == (len(rec), len(rec.signals)) and len(rec) > 5
    assert np.all(np.diff(rec.host_time_s) >= 0)


def test_recording_frame_needs_pandas_and_says_how_to_get_it(recording, monkeypatch):
    monkeypatch.setitem(sys.modules, "pandas", None)  # import pandas raises ImportError
    with pytest.raises(ImportError, match="pip install pandas"):
        api.recording_frame(recording)


def test_recording_frame_holds_the_same_numbers(recording):
    pytest.importorskip("pandas")
    rec = api.load_recording(recording)
    df = api.recording_frame(recording)
    assert list(df.columns) == ["host_time_s", "board_time_s", "frame", *rec.signals]
    for i, name in enumerate(rec.signals):
        np.testing.assert_array_equal(df[name].to_numpy(), rec.values[:, i])
    assert df.attrs["units"] == dict(zip(rec.signals, rec.units))


def test_library_code_configures_no_logging():
    # loggers only: handlers, levels and formats are the application's choice
    for path in (ROOT / "bench" / "rigbench").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute):
                assert node.func.attr not in ("basicConfig", "addHandler", "dictConfig",
                                              "fileConfig"), (path, node.lineno)
