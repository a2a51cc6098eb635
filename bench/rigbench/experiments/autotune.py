"""One autotune flow for the CLI (``rigbench tune``), the UI and sequences: a relay test
(relay.py) and gain proposals from it (proposals.py), with the reason stated whenever the
model, a margin or a recommendation is missing.

``autotune(link, loop, config, cancel=…, progress=…) -> AutotuneResult``;
``evaluate(run, config)`` makes the proposals of a finished run (a sequence's relay step
runs the relay itself, then calls this). ``AutotuneResult.to_dict()`` is the ``tune
--json`` document; ``exit_code`` the command's exit code (base/stops.py): a run that
converged but recommends nothing exits with EXIT_CHECK.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from rigbench.base.stops import EXIT_CHECK, EXIT_OK, exit_code_for

from rigbench.experiments.proposals import ProposalSet, propose
from rigbench.experiments.ranking import RankLimits
from rigbench.experiments.relay import RelayConfig, RelayRun, run_relay

__all__ = ["AutotuneConfig", "AutotuneResult", "autotune", "evaluate"]


@dataclass(frozen=True)
class AutotuneConfig:
    relay: RelayConfig = field(default_factory=RelayConfig)
    margin_deg: float = 45.0        # target phase margin of the one-point designs
    limits: RankLimits = field(default_factory=RankLimits)

    def __post_init__(self):
        if not 0 < self.margin_deg < 90:
            raise ValueError("margin_deg must lie in (0, 90)")


@dataclass
class AutotuneResult:
    run: RelayRun
    proposals: ProposalSet | None
    proposal_error: str = ""        # why there are no proposals ('' when there are)

    @property
    def loop_name(self) -> str:
        return self.run.loop.name

    @property
    def model_missing(self) -> str:
        """Why there is no model ('' when there is one)."""
        if self.proposals is None:
            return self.proposal_error
        return self.proposals.model_missing

    @property
    def recommended(self) -> list:
        return [] if self.proposals is None else self.proposals.recommended()

    @property
    def exit_code(self) -> int:
        if not self.run.converged:
            return exit_code_for(self.run.stopped_by)
        return EXIT_OK if self.recommended else EXIT_CHECK

    def to_dict(self, *, simulated: bool | None = None) -> dict:
        from rigbench.experiments.autotunedoc import autotune_document

        return autotune_document(self, simulated=simulated)


def evaluate(run: RelayRun, config: AutotuneConfig | None = None) -> AutotuneResult:
    """Proposals from a finished relay run; the reason in words when there are none."""
    config = config or AutotuneConfig()
    if not run.converged:
        return AutotuneResult(run, None, f"no proposals: the relay test did not converge "
                                         f"({run.stopped_by}: {run.reason})")
    try:
        ps = propose(run, margin_deg=config.margin_deg, limits=config.limits)
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        return AutotuneResult(run, None, f"no proposals: {exc}")
    return AutotuneResult(run, ps)


def autotune(link, loop: str, config: AutotuneConfig | None = None, *, cancel=None,
             progress=None, results_dir=None, guards=None) -> AutotuneResult:
    """Relay test on ``loop``, then proposals (see the module docstring)."""
    config = config or AutotuneConfig()
    run = run_relay(link, loop, config.relay, cancel=cancel, progress=progress,
                    results_dir=results_dir, guards=guards)
    return evaluate(run, config)
