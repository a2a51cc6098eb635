"""Where the UI finds the domain code that runs experiments and sequences, and how it runs
it: in a thread worker of the App's ``experiment`` group (so the kill key cancels it), with
a cancel flag read from the worker and progress handed back through callbacks that post
messages.

A runner the build does not have is reported in words; nothing is simulated in its place.

Must not import: bench.rig, serial, bench.ui.app.
"""

from __future__ import annotations

import importlib

from textual.worker import get_current_worker

# kind -> (module, function) of the domain runner
RUNNERS = {
    "relay": ("bench.experiments", "run_relay"),
    "sweep": ("bench.experiments", "run_sweep"),
    "sequence": ("bench.sequence_run", "run_sequence"),
}


def find(kind: str):
    """The domain function for ``kind``, or None when this build lacks it."""
    module_name, func = RUNNERS[kind]
    try:
        module = importlib.import_module(module_name)
    except ImportError:
        return None
    return getattr(module, func, None)


def missing_text(kind: str) -> str:
    module_name, func = RUNNERS[kind]
    return (f"not available in this build: {module_name}.{func} (the {kind} runner) is "
            "missing, so nothing was started")


def error_text(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    words = text[0] if text else ""
    name = type(exc).__name__
    return f"{name}: {words}" if words else name


def run_in_worker(screen, kind: str, runner, link, options: dict, *, on_progress, on_done):
    """Start ``runner(link, cancel=..., progress=..., **options)`` in a thread worker.

    ``on_done(result, text)`` is called from the worker with the result (None on failure or
    cancel) and a line of words; ``on_progress(p)`` with each progress object.
    """
    app = screen.app

    def work():
        worker = get_current_worker()
        try:
            result = runner(link, cancel=lambda: worker.is_cancelled, progress=on_progress,
                            **options)
        except Exception as exc:  # noqa: BLE001 - reported in words, never a traceback
            on_done(None, f"{kind} stopped: {error_text(exc)}")
            return
        if worker.is_cancelled:
            on_done(None, f"{kind} cancelled; motor left off")
        else:
            on_done(result, f"{kind} finished")

    return app.run_worker(work, thread=True, group="experiment", exclusive=True,
                          exit_on_error=False, name=f"{kind} run")
