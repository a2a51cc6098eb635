"""How the UI runs experiments and sequences: domain functions in a thread worker of the
App's ``experiment`` group, with a cancel flag (a ``threading.Event`` the App also sets on
kill) and progress handed back through callbacks that post messages.

The relay test and its proposals run through the one autotune flow
(rigbench.experiments.autotune), as in the CLI and sequences.
"""

from __future__ import annotations

import threading

from rigbench.experiments.autotune import AutotuneConfig, AutotuneResult, autotune
from rigbench.experiments.relay import RelayConfig
from rigbench.experiments.sweep import run_sweep
from rigbench.sequences.run import run_sequence

# kind -> the domain function it runs
RUNNERS = {"relay": autotune, "sweep": run_sweep, "sequence": run_sequence}


def find(kind: str):
    """The domain function for ``kind``."""
    return RUNNERS[kind]


def error_text(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    words = " ".join(t.strip() for t in text[:3])
    name = type(exc).__name__
    return f"{name}: {words}" if words else name


# the UI keeps the autotune result as the last relay outcome
RelayOutcome = AutotuneResult


def relay_and_proposals(link, *, loop: str, cancel, progress, margin_deg: float = 45.0,
                        **settings) -> AutotuneResult:
    """The autotune flow on ``loop``; ``settings`` are RelayConfig fields (None: default)."""
    relay = RelayConfig(**{k: v for k, v in settings.items()
                           if v is not None or getattr(RelayConfig, k, None) is None})
    return autotune(link, loop, AutotuneConfig(relay=relay, margin_deg=margin_deg),
                    cancel=cancel, progress=progress)


def sweep(link, *, cancel, progress, gain_sets, **settings):
    return run_sweep(link, gain_sets, cancel=cancel, progress=progress, **settings)


def sequence(link, *, cancel, progress, sequence):
    return run_sequence(link, sequence=sequence, cancel=cancel, progress=progress)


CALLS = {"relay": relay_and_proposals, "sweep": sweep, "sequence": sequence}


def start(app, kind: str, link, options: dict, *, on_progress, on_done):
    """Start experiment ``kind`` in a thread worker; returns the worker.

    ``on_done(result, text)`` is called from the worker with the result (None on failure)
    and a line of words; ``on_progress(p)`` with each progress object.
    """
    cancel = threading.Event()
    app.cancel_events.add(cancel)
    call = CALLS[kind]

    def work():
        try:
            result = call(link, cancel=cancel, progress=on_progress, **options)
        except Exception as exc:  # noqa: BLE001 - reported in words, never a traceback
            on_done(None, f"{kind} stopped: {error_text(exc)}")
        else:
            on_done(result, f"{kind} finished" + ("; cancelled" if cancel.is_set() else ""))
        finally:
            app.cancel_events.discard(cancel)

    return app.run_worker(work, thread=True, group="experiment", exclusive=True,
                          exit_on_error=False, name=f"{kind} run")
