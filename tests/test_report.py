"""Reports on a relay run (a sequence on the simulated third-order lag, virtual clock): the
PNG files and summary.md are written, every plotted series comes from the recordings, the
measured point on the model plot is the plant's true response; a lone recording gets its
own report; without matplotlib the command says what to install."""

import builtins
import math
import sys
from pathlib import Path

import numpy as np
import pytest
import yaml

from rigbench.cli import main
from rigbench.recordings.recording import load_recording
from rigbench.reports.report import make_report

pytest.importorskip("matplotlib")

LAG3 = """\
sequence: 1
name: lag3 relay
port: sim://plant?num=1&den=0.001,0.03,0.3,1&clock=virtual&seed=3
guards: {}
steps:
  - set: {main_kp: 1, main_ki: 5}
  - arm
  - hold
  - wait: 0.5
  - relay: {loop: main, amplitude: 4, hysteresis: 0.01, bound: 50, max_s: 10, cycles: 4}
  - hold
  - wait: 2
  - sweep: {loop: main, shape: pulse, at: output, amplitudes: [2, -2], repeats: 2, spacing_s: 2, time_s: 0.1}
  - disarm
"""


@pytest.fixture(scope="module")
def relay_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("lag3")
    seq = folder / "lag3.yaml"
    seq.write_text(LAG3)
    out = folder / "results"
    assert main(["run", str(seq), "--out", str(out), "--no-plots"]) == 0
    report = make_report(out)
    return out, report, yaml.safe_load((out / "summary.yaml").read_text())


def _png(path: Path) -> bool:
    return path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_report_of_a_relay_run_writes_pngs_and_the_summary(relay_run):
    out, report, _ = relay_run
    kinds = sorted(p.kind for p in report.plots)
    assert kinds == ["margins", "model", "relay", "signals", "signals", "sweep"]
    for p in report.plots:
        assert p.path.parent == out and _png(p.path) and p.path.stat().st_size > 10_000
    md = (out / "summary.md").read_text()
    assert md.startswith("# lag3 relay") and "## Plots" in md and "## Proposals from step 5" in md
    for p in report.plots:
        assert f"![{p.caption}]({p.path.name})" in md


def test_plotted_series_are_the_recordings_rows(relay_run):
    out, report, summary = relay_run
    for p in (p for p in report.plots if p.kind == "signals"):
        rec = load_recording(out / p.source)
        for name, (t, y) in p.series.items():
            np.testing.assert_array_equal(y, rec.signal(name))
            np.testing.assert_array_equal(t, rec.host_time_s - rec.host_time_s[0])
    cycles = next(p for p in report.plots if p.kind == "relay")
    rec = load_recording(out / cycles.source)
    t, y = cycles.series["y"]
    k = np.searchsorted(rec.host_time_s - rec.host_time_s[0], t[0])
    np.testing.assert_array_equal(y, rec.signal("y")[k:k + len(y)])
    sweep = next(p for p in report.plots if p.kind == "sweep")
    pushes = next(s for s in summary["steps"] if s["kind"] == "sweep")["data"]["pushes"]
    _, peaks = sweep.series["step 8: peak at 2"]
    assert sorted(peaks) == sorted(q["peak"] for q in pushes if q["amplitude"] == 2)


def test_measured_point_on_the_model_plot_is_the_plants_response(relay_run):
    _, report, _ = relay_run
    model = next(p for p in report.plots if p.kind == "model")
    w, g = model.series["recomputed from the recording"]
    # G(s) = 1/(0.1s+1)^3: G(jω) = (1 + 0.1jω)^-3 (closed form); the relay's fundamental and third
    # harmonic over whole periods give G at ω and 3ω exactly for a linear plant
    # (Åström & Hägglund 1984, as docs/METHODS.md §3 states); noise and ZOH sampling leave ~1%
    exact = (1 + 0.1j * w) ** -3
    np.testing.assert_allclose(np.abs(g), np.abs(exact), rtol=0.02)
    np.testing.assert_allclose(np.angle(g / exact, deg=True), 0.0, atol=2.0)
    # the oscillation of a relay with small hysteresis sits near the −180° crossing of
    # 1/(0.1s+1)^3 at ω = √3/0.1 rad/s (analytic)
    assert w[0] == pytest.approx(math.sqrt(3) / 0.1, rel=0.05)
    # what the run measured in memory, and what the report recomputes from the CSV (values
    # kept to 6 significant digits) agree
    run_w, run_g = model.series["measured in the run"]
    np.testing.assert_allclose(run_w, w, rtol=1e-9)
    np.testing.assert_allclose(run_g, g, atol=2e-3 * abs(g[0]))


def test_margins_plot_shows_the_ranked_proposals(relay_run):
    _, report, summary = relay_run
    margins = next(p for p in report.plots if p.kind == "margins")
    relay = next(s for s in summary["steps"] if s["kind"] == "relay")
    ranked = sorted((p for p in relay["data"]["proposals"] if p["rank"]),
                    key=lambda p: p["rank"])
    assert list(margins.series) == ["board's gains"] + [p["rule"] for p in ranked[:3]]
    # at each proposal's stored gain crossover, |L| drawn is 1 (the margins and the curve
    # come from the same model)
    for p in ranked[:3]:
        w, h = margins.series[p["rule"]]
        wc = p["margins"]["crossover_rad_s"]
        assert abs(np.interp(math.log(wc), np.log(w), np.abs(h)) - 1.0) < 0.02


def test_report_on_one_recording(relay_run, tmp_path, capsys):
    out, _, _ = relay_run
    code = main(["report", str(out / "sweep-main.csv"), "--out", str(tmp_path / "r")])
    text = capsys.readouterr().out
    assert code == 0 and "summary" in text
    md = (tmp_path / "r" / "summary.md").read_text()
    rec = load_recording(out / "sweep-main.csv")
    assert md.startswith("# Report: sweep-main.csv") and f"{len(rec)} rows" in md
    assert "| y | 1 |" in md and _png(tmp_path / "r" / "sweep-main-signals.png")


def test_without_matplotlib_the_report_writes_the_summary_and_says_what_to_install(relay_run, tmp_path, monkeypatch,
                                                             capsys):
    out, _, _ = relay_run
    real_import = builtins.__import__

    def no_matplotlib(name, *args, **kwargs):
        if name == "matplotlib" or name.startswith("matplotlib."):
            raise ImportError("no matplotlib here")
        return real_import(name, *args, **kwargs)

    for mod in [m for m in sys.modules if m == "matplotlib" or m.startswith("matplotlib.")]:
        monkeypatch.delitem(sys.modules, mod)
    monkeypatch.setattr(builtins, "__import__", no_matplotlib)
    # the summary is written all the same, without plots; the hint works for pip and pipx
    report = make_report(out, out=tmp_path / "x")
    assert report.plots == [] and not list((tmp_path / "x").glob("*.png"))
    assert "rigbench[plots]" in report.plots_unavailable
    assert "pipx inject rigbench matplotlib" in report.plots_unavailable
    md = (tmp_path / "x" / "summary.md").read_text()
    assert "relay" in md and "![" not in md
    assert main(["report", str(out), "--out", str(tmp_path / "y")]) == 0
    captured = capsys.readouterr()
    assert (tmp_path / "y" / "summary.md").is_file() and "summary" in captured.out
    assert "rigbench[plots]" in captured.err and captured.err.count("\n") == 1


def test_report_refuses_what_it_cannot_read(tmp_path, capsys):
    assert main(["report", str(tmp_path)]) == 2
    assert "no summary.yaml and no recordings" in capsys.readouterr().err
    (tmp_path / "x.csv").write_text("not a recording\n")
    assert main(["report", str(tmp_path / "x.csv")]) == 2
    assert "x.csv:1" in capsys.readouterr().err
