"""What a sequence run produced, and its summary files: ``summary.yaml`` and ``summary.md``.

``SequenceResult`` holds one ``StepOutcome`` per step in run order (repeats unrolled), the
reason the run stopped and the state the motor was left in. ``summary_dict`` turns it into
plain data (what ``summary.yaml`` holds and ``rigbench run --json`` prints);
``summary_markdown`` renders that data (from a live result or a ``summary.yaml`` read back)
as a page for a lab notebook, with plots when a report made some. ``write_summary`` writes
both files atomically, so a crash mid-run leaves the previous complete summary.

Stop reasons (``STOP_REASONS``): ``done`` (every step ran; checks may still have failed),
``guard`` (a host guard or a board trip ended the run: motor killed), ``timeout`` (a step
took longer than its ``timeout_s``), ``refused`` (the board refused a command or the
interlock refused to arm), ``failed`` (a step could not produce its result, e.g. a relay
test without a sustained cycle), ``lost`` (the link went away), ``cancelled``, ``error``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import yaml

from rigbench.base.atomic import write_text_atomic
from rigbench.base.jsonsafe import to_plain

__all__ = ["STOP_REASONS", "SUMMARY_FORMAT", "StepOutcome", "SequenceResult", "summary_dict",
           "summary_markdown", "write_summary", "format_number"]

STOP_REASONS = ("done", "guard", "timeout", "refused", "failed", "lost", "cancelled", "error")
SUMMARY_FORMAT = "rigbench-sequence-results/1"
OUTCOMES = ("not run", "ok", "passed", "failed")


@dataclass
class StepOutcome:
    """One step of the run. ``outcome``: not run | ok | passed (a check) | failed.
    Times are link-clock seconds; ``metrics`` use the check names (``relay.period_s``...);
    ``data`` holds what the report plots (relay analysis, model, proposals, pushes)."""

    index: str
    kind: str
    line: int
    label: str
    settings: dict
    bindings: dict
    outcome: str = "not run"
    detail: str = ""
    started_s: float | None = None
    ended_s: float | None = None
    recordings: list = field(default_factory=list)   # file names in the results folder
    metrics: dict = field(default_factory=dict)
    check: dict | None = None       # metric, op, value, measured, passed
    data: dict = field(default_factory=dict)


@dataclass
class SequenceResult:
    name: str
    sequence_path: str
    results_dir: Path
    url: str
    board: dict
    started: str                    # wall-clock time, ISO 8601
    steps: list
    on_abort: str
    finished: str | None = None
    stopped_by: str = "done"
    detail: str = ""
    stopping_step: str | None = None
    abort_action: str | None = None  # kill | disarm | None (nothing needed)
    motor_after: str | None = None
    trips: int = 0
    fell: int = 0
    link_health: dict = field(default_factory=dict)

    @property
    def checks(self) -> list:
        return [s for s in self.steps if s.check is not None]

    @property
    def checks_failed(self) -> int:
        return sum(1 for s in self.checks if not s.check["passed"])

    @property
    def ok(self) -> bool:
        return self.stopped_by == "done" and self.checks_failed == 0


def format_number(value, digits: int = 4) -> str:
    """A number for people: ``digits`` significant digits, '-' for None, 'inf' kept."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return f"{value:.{digits}g}"
    return str(value)


def summary_dict(result: SequenceResult) -> dict:
    """The run as plain data, in the order ``summary.yaml`` shows it."""
    checks = result.checks
    return to_plain({
        "format": SUMMARY_FORMAT,
        "name": result.name,
        "sequence": result.sequence_path,
        "url": result.url,
        "board": result.board,
        "started": result.started,
        "finished": result.finished,
        "ok": result.ok,
        "stopped_by": result.stopped_by,
        "detail": result.detail,
        "stopping_step": result.stopping_step,
        "on_abort": result.on_abort,
        "abort_action": result.abort_action,
        "motor_after": result.motor_after,
        "checks": {"total": len(checks), "failed": result.checks_failed},
        "trips": result.trips,
        "fell": result.fell,
        "link_health": result.link_health,
        "steps": [{
            "index": s.index, "kind": s.kind, "line": s.line, "label": s.label,
            "settings": s.settings, "bindings": s.bindings, "outcome": s.outcome,
            "detail": s.detail, "started_s": s.started_s, "ended_s": s.ended_s,
            "recordings": list(s.recordings), "metrics": s.metrics, "check": s.check,
            "data": s.data} for s in result.steps],
    })


def write_summary(folder: str | Path, summary: dict, *, plots=()) -> tuple[Path, Path]:
    """Write ``summary.yaml`` and ``summary.md`` into ``folder`` atomically."""
    folder = Path(folder)
    y = write_text_atomic(folder / "summary.yaml",
                          "# rigbench sequence results (written by rigbench run)\n"
                          + yaml.safe_dump(summary, sort_keys=False, width=100,
                                           allow_unicode=True))
    m = write_text_atomic(folder / "summary.md", summary_markdown(summary, plots=plots))
    return y, m


# ---------------------------------------------------------------------------- markdown


def _cell(text) -> str:
    return " ".join(str(text).split()).replace("|", "\\|") or " "


def _table(header: list[str], rows: list[list]) -> list[str]:
    out = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    out += ["| " + " | ".join(_cell(c) for c in r) + " |" for r in rows]
    return out


def _verdict(s: dict) -> str:
    if s["stopped_by"] == "done":
        failed = s["checks"]["failed"]
        if failed:
            return f"FAILED: {failed} of {s['checks']['total']} checks failed"
        return f"PASSED: every step ran, {s['checks']['total']} checks passed"
    where = f" at step {s['stopping_step']}" if s.get("stopping_step") else ""
    return f"STOPPED{where} ({s['stopped_by']}): {s['detail']}"


def summary_markdown(s: dict, *, plots=()) -> str:
    """A Markdown page of a summary dict; ``plots`` are (file name, caption) pairs."""
    board = s.get("board") or {}
    lines = [f"# {s['name']}", "", f"**{_verdict(s)}**", ""]
    lines += _table(["", ""], [
        ["sequence", s["sequence"]], ["port", s["url"]],
        ["board", f"{board.get('board', '?')} ({board.get('rig', '?')}, firmware "
                  f"{board.get('firmware', '?')}{', simulated' if board.get('simulated') else ''})"],
        ["started", s["started"]], ["finished", s.get("finished") or "-"],
        ["motor at the end", s.get("motor_after") or "unknown"],
        ["on abort", f"{s['on_abort']}" + (f" (done: {s['abort_action']})"
                                           if s.get("abort_action") else "")],
        ["trips / falls", f"{s.get('trips', 0)} / {s.get('fell', 0)}"]])
    lines += ["", "## Steps", ""]
    rows = []
    for st in s["steps"]:
        shown = dict(st["metrics"])
        what = st["detail"] or ", ".join(f"{k.split('.', 1)[-1]} {format_number(v)}"
                                         for k, v in shown.items())
        rows.append([st["index"], st["kind"], st["line"],
                     ", ".join(f"{k}={format_number(v)}" for k, v in st["bindings"].items()),
                     st["outcome"], what])
    lines += _table(["step", "kind", "line", "with", "outcome", "result"], rows)
    checks = [st for st in s["steps"] if st.get("check")]
    if checks:
        lines += ["", "## Checks", ""]
        lines += _table(["step", "check", "measured", "verdict"], [
            [st["index"], f"{c['metric']} {c['op']} {format_number(c['value'])}",
             format_number(c["measured"]), "pass" if c["passed"] else "FAIL"]
            for st in checks for c in [st["check"]]])
    for st in s["steps"]:
        if st["kind"] == "relay" and st["data"].get("proposals"):
            lines += ["", f"## Proposals from step {st['index']} (relay on "
                          f"{st['data'].get('loop', {}).get('name', '?')})", ""]
            model = st["data"].get("model") or {}
            if model.get("text"):
                lines += [f"Model: {model['text']}", ""]
            lines += _proposal_table(st["data"])
    records = [(st["index"], r) for st in s["steps"] for r in st["recordings"]]
    if records:
        lines += ["", "## Recordings", ""]
        lines += [f"- step {i}: [{r}]({r}) (sidecar {Path(r).with_suffix('.yaml').name})"
                  for i, r in records]
    if plots:
        lines += ["", "## Plots", ""]
        for name, caption in plots:
            lines += [f"### {caption}", "", f"![{caption}]({name})", ""]
    return "\n".join(lines).rstrip() + "\n"


def _proposal_table(data: dict) -> list[str]:
    rows = []
    for p in ([data["current"]] if data.get("current") else []) + data["proposals"]:
        if not p.get("applies"):
            continue
        m = p.get("margins") or {}
        rows.append([p["rule"], format_number(p.get("rank")), format_number(p.get("kp")),
                     format_number(p.get("ki")), format_number(p.get("kd")),
                     format_number(m.get("gain_margin_upper")),
                     format_number(m.get("gain_margin_lower")),
                     format_number(m.get("phase_margin_deg"), 3),
                     format_number(m.get("ms"), 3), format_number(p.get("iae"))])
    return _table(["rule", "rank", "kp", "ki", "kd", "gain margin", "lower gain margin",
                   "phase margin (deg)", "Ms", "predicted IAE"], rows)
