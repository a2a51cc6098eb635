"""Reports: a Markdown summary and PNG plots from a results folder or one recording.

``make_report(path, out=None)``:
- **a results folder** (``summary.yaml`` from ``rigbench run``): per recording, its signals
  against time with the board's mode changes and trips marked; per relay step, the relay
  cycles (switching instants, cycles used, the measured point), the identified plant's
  frequency response with the measured points (as the run found them, and recomputed
  from the recording's own rows), and the loop's frequency response for the board's gains
  and the ranked proposals with their predicted margins; for sweep steps, the metrics per
  sweep step as bars with their spread. ``summary.md`` is rewritten with the plots.
  Default ``out``: the folder itself.
- **a recording** (``NAME.csv`` with its sidecar): its signals, events and notes; if the
  folder holds the ``summary.yaml`` of the run that made it, the relay figures of its step
  too. Default ``out``: ``NAME-report/`` beside the recording.
- **a folder of recordings** without a summary: every recording as above.

Times on plots are seconds since the recording started. matplotlib is imported only when
plotting; without it the summary is written all the same, without plots, and
``Report.plots_unavailable`` holds the install hint (``plots=False`` skips plots on purpose).

"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from rigbench.base.atomic import write_text_atomic
from rigbench.base.yamlload import SchemaError, load_yaml
from rigbench.recordings.recording import RecordingError, load_recording
from rigbench.reports.plots import (
    Plot, PlotsUnavailable, need_matplotlib, plot_margins, plot_model, plot_relay, plot_signals,
    plot_sweeps, unit_text,
)
from rigbench.sequences.results import SUMMARY_FORMAT, format_number, summary_markdown

__all__ = ["make_report", "Report", "ReportError", "PlotsUnavailable", "Plot"]

MAX_PANELS = 5
TOP_PROPOSALS = 3


class ReportError(ValueError):
    """The input cannot be reported on; the message names the file."""


@dataclass
class Report:
    source: Path
    out: Path
    summary_md: Path
    plots: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    plots_unavailable: str | None = None    # why there are no plots: the install hint


def make_report(path: str | Path, *, out: str | Path | None = None,
                plots: bool = True) -> Report:
    """Write the report of ``path`` (see the module docstring) and return what it wrote.
    Without matplotlib (or with ``plots=False``) only the summary is written."""
    missing = None
    if plots:
        try:
            need_matplotlib()
        except PlotsUnavailable as exc:
            missing = str(exc)
    draw = plots and missing is None
    path = Path(path)
    if path.is_dir():
        if (path / "summary.yaml").exists():
            report = _results_report(path, Path(out) if out else path, draw)
        else:
            csvs = sorted(path.glob("*.csv"))
            if not csvs:
                raise ReportError(f"{path}: no summary.yaml and no recordings (*.csv) in it")
            report = _recordings_report(path, csvs, Path(out) if out else path, None, draw)
    elif path.suffix.lower() == ".csv" and path.is_file():
        summary = _read_summary(path.parent) if (path.parent / "summary.yaml").exists() else None
        report = _recordings_report(path, [path],
                                    Path(out) if out else path.parent / f"{path.stem}-report",
                                    summary, draw)
    else:
        raise ReportError(f"{path}: give a results folder or a recording (.csv)")
    report.plots_unavailable = missing
    return report


SUMMARY_MAX_BYTES = 4 << 20  # a summary holds a few lines per step; a sequence has ≤ 1000


def _read_summary(folder: Path) -> dict:
    try:  # the strict loader of every file rigbench reads: no aliases, bounded size
        doc = load_yaml(folder / "summary.yaml", max_bytes=SUMMARY_MAX_BYTES).value
    except SchemaError as exc:
        raise ReportError(f"cannot read the summary: {exc}") from None
    if not isinstance(doc, dict) or doc.get("format") != SUMMARY_FORMAT:
        raise ReportError(f"{folder / 'summary.yaml'}: not a summary of rigbench run "
                          f"(format {SUMMARY_FORMAT})")
    steps = doc.get("steps")
    if not isinstance(steps, list):
        raise ReportError(f"{folder / 'summary.yaml'}: steps: expected a list")
    for i, step in enumerate(steps, 1):
        problem = _step_problem(step)
        if problem:
            raise ReportError(f"{folder / 'summary.yaml'}: steps[{i}]: {problem}")
    return doc


def _step_problem(step) -> str | None:
    """What a step of a summary lacks for the report, or None."""
    if not isinstance(step, dict):
        return "expected a mapping"
    if isinstance(step.get("index"), (bool, type(None), list, dict)) or not isinstance(
            step.get("kind"), str):
        return "needs index and kind (text)"
    recs = step.get("recordings")
    if not isinstance(recs, list) or not all(
            isinstance(n, str) and re.fullmatch(r"[A-Za-z0-9_.-]+\.csv", n) and n[0] != "."
            for n in recs):
        return "recordings: expected a list of file names (*.csv) in the results folder"
    for key in ("data", "bindings"):
        if not isinstance(step.get(key, {}) or {}, dict):
            return f"{key}: expected a mapping"
    return None


def _load(path: Path):
    try:
        return load_recording(path)
    except RecordingError as exc:
        raise ReportError(str(exc)) from None


# ---------------------------------------------------------------------------- pieces


def _stem(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "-", Path(name).stem)


def _marks(rec, t0: float) -> list:
    """(t since start, label, colour) for mode changes, trips and kills of a recording."""
    out = []
    for note in (rec.sidecar or {}).get("notes") or []:
        t, text = note.get("host_time_s"), str(note.get("text", ""))
        if t is None or not text.startswith("mode "):
            continue
        words = text.split()
        field = dict(w.split("=", 1) for w in words[2:] if "=" in w)
        label = words[1]
        if label == "inject" and "amp" in field:  # a push on the body is a torque (§8)
            label += f" {field['amp']}" + (" N.m" if field.get("at") == "body" else "")
        out.append((t - t0, label, "#2e6f40"))
    if not out:  # no notes from an experiment: the board's own mode events
        out += [(e["host_time_s"] - t0, (e.get("fields") or {}).get("mode", "mode"), "#2e6f40")
                for e in rec.events if e.get("source") == "board" and e.get("kind") == "mode"]
    for e in rec.events:
        if e.get("kind") == "trip" and e.get("source") == "board":
            out.append((e["host_time_s"] - t0, f"trip: {(e.get('fields') or {}).get('cause')}",
                        "#b22222"))
        elif e.get("kind") == "kill" and e.get("source") == "link":
            out.append((e["host_time_s"] - t0, "kill sent", "#b22222"))
    return out


def _signal_columns(rec) -> list:
    """The signals worth a panel: not the relay state (it has its own figure), not a flat
    line (unless every signal is flat), at most MAX_PANELS."""
    cols = [(n, u, rec.values[:, i]) for i, (n, u) in enumerate(zip(rec.signals, rec.units))
            if n != "relay"]
    moving = [c for c in cols if len(c[2]) and np.ptp(c[2]) > 0]
    return (moving or cols[:1])[:MAX_PANELS]


def _signals_plot(rec, out: Path, caption: str) -> Plot:
    t = rec.host_time_s - (rec.host_time_s[0] if len(rec) else 0.0)
    return plot_signals(out / f"{_stem(rec.path.name)}-signals.png", title=caption,
                        source=rec.path.name, t_s=t, columns=_signal_columns(rec),
                        marks=_marks(rec, rec.host_time_s[0] if len(rec) else 0.0))


def _relay_plots(step: dict, folder: Path, out: Path) -> list[Plot]:
    """Cycles, identified model and margins of one relay step of a summary."""
    from rigbench.experiments.pointmodel import harmonic_points
    from rigbench.tuning.relay import rising_switches

    data, plots = step["data"], []
    an, loop, s = data.get("analysis"), data.get("loop") or {}, data.get("settings")
    if not step["recordings"] or not an or an.get("period_s") is None or not s:
        return plots
    rec = _load(folder / step["recordings"][0])
    t0 = rec.host_time_s[0]
    col = {n: rec.signal(n) for n in rec.signals}
    start = next((n["host_time_s"] for n in (rec.sidecar or {}).get("notes") or []
                  if str(n.get("text", "")).startswith("mode relay")), an["t_start_s"])
    end = an["t_end_s"] + 2 * an["period_s"]
    sel = (rec.host_time_s >= start - 2 * an["period_s"]) & (rec.host_time_s <= end)
    t = rec.host_time_s[sel]
    relay = col.get(loop.get("relay_signal") or "", None)
    r = relay[sel] if relay is not None else np.sign(col[loop["output"]][sel] - s["centre"])
    sw = t[rising_switches(r)] - t0
    point = (data.get("points") or [None])[0]
    mu, ou = loop["measure_unit"], loop["output_unit"]
    text = (f"period {an['period_s']:.4g} s, oscillation {an['amplitude']:.3g}"
            f"{unit_text(mu)}, {an['cycles']} cycles used")
    if point:
        per = "" if mu == ou == "1" else f" {mu} per {ou}"
        text += (f"\nG(jω) at ω = {point['omega_rad_s']:.4g} rad/s: gain {point['gain']:.4g}"
                 f"{per}, phase {point['phase_deg']:.1f}°")
    sp = loop.get("setpoint")
    stem = _stem(step["recordings"][0])
    plots.append(plot_relay(
        out / f"{stem}-cycles.png", source=rec.path.name,
        title=f"Step {step['index']}: relay test on {loop['name']}, cycles and switching",
        t_s=t - t0, measure=(loop["measure"], loop["measure_unit"], col[loop["measure"]][sel]),
        output=(loop["output"], loop["output_unit"], col[loop["output"]][sel]),
        relay=None if relay is None else (loop["relay_signal"], "1", r),
        setpoint=None if not sp or sp not in col else (sp, loop["measure_unit"], col[sp][sel]),
        switches_s=sw, used=(an["t_start_s"] - t0, an["t_end_s"] - t0), text=text))
    model = data.get("model") or {}
    if not model.get("num"):
        return plots
    from rigbench.tuning.loop import LoopController, PlantModel, loop_transfer

    plant = PlantModel(model["num"], model["den"], model["delay_s"] or 0.0)
    pts = [(p["omega_rad_s"], p["gain"] * np.exp(1j * math.radians(p["phase_deg"])))
           for p in data.get("points") or []]
    try:
        again = harmonic_points(rec.host_time_s, col[loop["output"]] - s["centre"],
                                col[loop["measure"]], t_start_s=an["t_start_s"],
                                t_end_s=an["t_end_s"], cycles=an["cycles"])
        again = [(p.omega_rad_s, p.value) for p in again]
    except (ValueError, KeyError):
        again = []
    w_pts = [w for w, _ in pts] or [2 * math.pi / an["period_s"]]
    h_s = data.get("h_s")
    w_hi = max(w_pts) * 30
    if h_s:
        w_hi = min(w_hi, 0.9 * math.pi / h_s)
    omega = np.geomspace(min(w_pts) / 50, w_hi, 600)
    plots.append(plot_model(
        out / f"{stem}-model.png", source=rec.path.name, omega=omega,
        response=plant.response(omega), units="1" if mu == ou == "1" else f"{mu} per {ou}",
        title=f"Step {step['index']}: identified plant of {loop['name']} ({model['kind']})",
        points={"measured in the run": pts, "recomputed from the recording": again}))
    loops = []
    chosen = [("board's gains", data.get("current"))] + [
        (p["rule"], p) for p in sorted((p for p in data.get("proposals") or []
                                        if p.get("rank") and not p.get("state_feedback")),
                                       key=lambda p: p["rank"])[:TOP_PROPOSALS]]
    for label, p in chosen:
        if not p or not p.get("margins") or p.get("kp") is None:
            continue
        ctrl = LoopController(p["kp"], p["ki"] or 0.0, p["kd"] or 0.0, tf_s=data.get("tf_s") or 0.0,
                              h_s=h_s, direct_acting=bool(model.get("direct_acting")))
        loops.append((label, loop_transfer(ctrl, plant).response(omega), p["margins"]))
    if loops:
        plots.append(plot_margins(
            out / f"{stem}-margins.png", omega=omega, loops=loops,
            title=f"Step {step['index']}: loop {loop['name']}, predicted margins on the "
                  "identified model"))
    return plots


def _sweep_plot(summary: dict, out: Path) -> list[Plot]:
    steps = [s for s in summary["steps"] if s["kind"] == "sweep" and s["data"].get("pushes")]
    if not steps:
        return []
    groups = []
    for s in steps:
        with_ = ", ".join(f"{k}={format_number(v)}" for k, v in s["bindings"].items())
        groups.append((f"step {s['index']}" + (f"\n{with_}" if with_ else ""),
                       s["data"]["pushes"]))
    unit = steps[0]["data"].get("measure_unit", "")
    return [plot_sweeps(out / "sweeps.png", groups=groups, unit=unit,
                        amplitude_unit=steps[0]["data"].get("amplitude_unit", ""),
                        title=f"Disturbance sweeps on {steps[0]['data'].get('loop', '?')}")]


# ---------------------------------------------------------------------------- reports


def _results_report(folder: Path, out: Path, draw: bool = True) -> Report:
    summary = _read_summary(folder)
    try:
        return _results_report_of(summary, folder, out, draw)
    except (KeyError, TypeError, AttributeError, IndexError, ValueError) as exc:
        if isinstance(exc, ReportError):
            raise
        # a hand-edited summary with a figure of the wrong kind deep inside a step
        raise ReportError(f"{folder / 'summary.yaml'}: unexpected content "
                          f"({type(exc).__name__}: {exc})") from None


def _results_report_of(summary: dict, folder: Path, out: Path, draw: bool) -> Report:
    out.mkdir(parents=True, exist_ok=True)
    plots: list[Plot] = []
    for step in summary["steps"] if draw else ():
        for name in step["recordings"]:
            rec = _load(folder / name)
            plots.append(_signals_plot(rec, out, f"Step {step['index']} {step['kind']}: "
                                                  f"signals of {name}"))
        if step["kind"] == "relay":
            plots += _relay_plots(step, folder, out)
    if draw:
        plots += _sweep_plot(summary, out)
    md = write_text_atomic(out / "summary.md", summary_markdown(
        summary, plots=[(p.path.name, p.caption) for p in plots]))
    return Report(folder, out, md, plots)


def _recordings_report(source: Path, csvs: list, out: Path, summary: dict | None,
                       draw: bool = True) -> Report:
    out.mkdir(parents=True, exist_ok=True)
    plots, lines, notes = [], [], []
    for path in csvs:
        rec = _load(path)
        if draw:
            plots.append(_signals_plot(rec, out, f"Signals of {path.name}"))
        lines += _recording_markdown(rec)
        step = None if summary is None else next(
            (s for s in summary["steps"] if path.name in s["recordings"]), None)
        if step is not None and step["kind"] == "relay":
            if draw:
                plots += _relay_plots(step, path.parent, out)
        elif any(str(n.get("text", "")).startswith("mode relay")
                 for n in (rec.sidecar or {}).get("notes") or []):
            notes.append(f"{path.name} holds a relay test; its cycles and model need the "
                         "loop's signals, which the results folder's summary.yaml names: "
                         "report the folder")
    title = csvs[0].name if len(csvs) == 1 else f"{len(csvs)} recordings in {source}"
    text = [f"# Report: {title}", ""] + lines
    if notes:
        text += ["## Notes", ""] + [f"- {n}" for n in notes] + [""]
    text += ["## Plots", ""] + ([] if draw else ["No plots in this report.", ""])
    for p in plots:
        text += [f"### {p.caption}", "", f"![{p.caption}]({p.path.name})", ""]
    md = write_text_atomic(out / "summary.md", "\n".join(text).rstrip() + "\n")
    return Report(source, out, md, plots, notes)


def _recording_markdown(rec) -> list[str]:
    side = rec.sidecar or {}
    board = side.get("board") or {}
    dur = float(rec.host_time_s[-1] - rec.host_time_s[0]) if len(rec) > 1 else 0.0
    lines = [f"## {rec.path.name}", "",
             f"- board: {board.get('board', 'unknown')} ({board.get('rig', '?')}"
             f"{', simulated' if board.get('simulated') else ''}) at {side.get('url', '?')}",
             f"- {len(rec)} rows over {dur:.3f} s"
             + (f", {side.get('rows_skipped')} rows skipped" if side.get("rows_skipped") else "")
             + ("" if rec.complete else " (recording not closed cleanly)"), "",
             "| signal | unit | min | mean | max |", "|---|---|---|---|---|"]
    for i, (name, unit) in enumerate(zip(rec.signals, rec.units)):
        y = rec.values[:, i]
        lines.append(f"| {name} | {unit} | {format_number(float(y.min()) if len(y) else None)} "
                     f"| {format_number(float(y.mean()) if len(y) else None)} | "
                     f"{format_number(float(y.max()) if len(y) else None)} |")
    events = [e for e in rec.events if e.get("source") in ("board", "link")]
    if events:
        t0 = rec.host_time_s[0] if len(rec) else 0.0
        lines += ["", "| time [s] | from | event | fields |", "|---|---|---|---|"]
        for e in events[:60]:
            f = " ".join(f"{k}={v}" for k, v in (e.get("fields") or {}).items())
            lines.append(f"| {e['host_time_s'] - t0:.3f} | {e['source']} | {e['kind']} | {f} |")
    return lines + [""]
