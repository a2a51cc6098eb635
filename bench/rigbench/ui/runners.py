"""How the UI runs experiments and sequences: domain functions in a thread worker of the
App's ``experiment`` group, with a cancel flag (a ``threading.Event`` the App also sets on
kill) and progress handed back through callbacks that post messages.

The domain functions are found by name; one this build lacks is reported in words and
nothing is simulated in its place.

Must not import: rigbench.rig, serial, rigbench.ui.app.
"""

from __future__ import annotations

import importlib
import threading
from dataclasses import dataclass

# kind -> (module, function) of the domain runner
RUNNERS = {
    "relay": ("rigbench.experiments.relay", "run_relay"),
    "sweep": ("rigbench.experiments.sweep", "run_sweep"),
    "sequence": ("rigbench.sequences.run", "run_sequence"),
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
    words = " ".join(t.strip() for t in text[:3])
    name = type(exc).__name__
    return f"{name}: {words}" if words else name


@dataclass
class RelayOutcome:
    """A relay run and, when it converged, the proposals made from it."""

    run: object  # rigbench.experiments.relay.RelayRun
    proposals: object | None  # rigbench.experiments.proposals.ProposalSet
    proposal_error: str = ""

    @property
    def loop_name(self) -> str:
        return self.run.loop.name


def relay_and_proposals(link, *, loop: str, cancel, progress, **settings) -> RelayOutcome:
    """Run the relay test, then propose gains from it (both domain calls)."""
    from rigbench.experiments.proposals import propose

    run = find("relay")(link, loop, cancel=cancel, progress=progress, **settings)
    if not run.converged:
        return RelayOutcome(run, None, f"no proposals: {run.stopped_by} ({run.reason})")
    try:
        return RelayOutcome(run, propose(run))
    except Exception as exc:  # noqa: BLE001 - the measured run is still worth showing
        return RelayOutcome(run, None, f"no proposals: {error_text(exc)}")


def sweep(link, *, cancel, progress, gain_sets, **settings):
    return find("sweep")(link, gain_sets, cancel=cancel, progress=progress, **settings)


def sequence(link, *, cancel, progress, sequence):
    return find("sequence")(link, sequence=sequence, cancel=cancel, progress=progress)


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
