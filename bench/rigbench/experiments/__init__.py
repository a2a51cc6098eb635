"""Experiments on a live board: the guarded runner, relay autotune, gain proposals with
predicted margins, and disturbance sweeps. Modules:

- runner:      Experiment (arm through the interlock, modes, guards, recording, safe end)
- guards:      Guards, guard limits, Progress, ExperimentResult, stop reasons
- relay:       run_relay(link, loop, RelayConfig) -> RelayRun (sizing, convergence, exact point)
- relaysession: the relay test's phases (noise hold, sizing, cycling, wrap-up)
- pointmodel:  low-order models fitted to measured frequency-response points
- balancefit:  balance-model fit and LQR gains for an unstable balance loop
- proposals:   propose(run) -> ProposalSet (rules, designs, margins)
- ranking:     which proposals to recommend (margin limits, board ranges, 2σ worst case)
- autotune:    autotune(link, loop, config) -> AutotuneResult: the one flow for the CLI,
               the UI and sequences; autotunedoc: its plain-data document
- sweep:       run_sweep -> SweepResult (disturbance metrics per gain set)
- conventions: what the host reads from a board's declarations by naming convention

Pure Python/numpy/scipy on top of rigbench.link, rigbench.tuning and rigbench.recordings.recording.
"""
