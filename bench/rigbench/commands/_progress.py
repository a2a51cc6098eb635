"""A one-line progress bar on stderr for long experiments (tune, sweep): redrawn in place on
a terminal, silent otherwise (pipes and log files get the final result only).

``experiment_run()`` is the block both commands run their experiment in: it hands out the
bar, closes it at the end, and turns the board's refusal to arm (exit 4) and a bad option
(``ValueError``, exit 2) into ``CommandError``.
"""

from __future__ import annotations

import shutil
import sys
from collections.abc import Iterator
from contextlib import contextmanager

from rigbench.base.stops import EXIT_REFUSED, EXIT_USAGE  # noqa: F401
from rigbench.commands._common import CommandError
from rigbench.experiments.guards import CLEAR_HINT
from rigbench.experiments.runner import ArmRefused


class ProgressBar:
    """Callable for rigbench.experiments progress callbacks (runner.Progress)."""

    def __init__(self, stream=None, *, width: int = 24, enabled: bool | None = None) -> None:
        self.stream = stream or sys.stderr
        self.width = width
        isatty = getattr(self.stream, "isatty", lambda: False)
        self.enabled = isatty() if enabled is None else enabled
        self._shown = False

    def __call__(self, p) -> None:
        if not self.enabled:
            return
        frac = p.fraction if p.fraction is not None else 0.0
        done = int(round(self.width * min(max(frac, 0.0), 1.0)))
        bar = "#" * done + "." * (self.width - done)
        parts = [f"{p.experiment}: {p.phase}", f"[{bar}]"]
        if p.cycles_needed:
            parts.append(f"{p.cycles}/{p.cycles_needed}")
        est = p.estimate or {}
        if est.get("period_s"):
            parts.append(f"period {est['period_s']:.4g} s")
        if est.get("ku"):
            parts.append(f"Ku {est['ku']:.4g}")
        if est.get("amplitude"):
            parts.append(f"a {est['amplitude']:.3g}")
        parts.append(f"{p.elapsed_s:6.1f} s")
        line = "  ".join(parts)
        cols = max(20, shutil.get_terminal_size((100, 20)).columns - 1)
        self.stream.write("\r" + line[:cols].ljust(cols))
        self.stream.flush()
        self._shown = True

    def close(self) -> None:
        if self._shown:
            self.stream.write("\n")
            self.stream.flush()
            self._shown = False


@contextmanager
def experiment_run() -> Iterator[ProgressBar]:
    """Run an experiment inside: yields a ProgressBar on stderr for its ``progress``, closes
    it at the end; ArmRefused becomes CommandError(EXIT_REFUSED) naming the board's reasons,
    ValueError (an option the experiment rejects) CommandError(EXIT_USAGE)."""
    bar = ProgressBar(sys.stderr)
    try:
        yield bar
    except ArmRefused as exc:
        hint = f"; {CLEAR_HINT}" if "fault" in exc.reasons else ""
        raise CommandError(EXIT_REFUSED, f"the board refused to arm: "
                                         f"{', '.join(exc.reasons) or exc}{hint}") from None
    except ValueError as exc:
        raise CommandError(EXIT_USAGE, str(exc)) from None
    finally:
        bar.close()
