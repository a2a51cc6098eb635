"""Pure numerical core of rigbench's tuning: relay analysis, tuning rules, loop margins,
balance-rig model fitting and designs, sweep metrics. Modules:

- point:    FrequencyPoint (one measured G(jω))
- relay:    analyse_relay, RelayTracker
- cycles:   check_cycles, settled_cycles (when relay cycles have stopped drifting)
- rules:    IdealPid, ParallelPid, Proposal, propose_from_ultimate, propose_from_point
- loop:     PlantModel, LoopController, loop transfer, simulate_disturbance
- margins:  Margins, margins, loop_margins (continuous loops; sampled ones go to
            margins_sampled, built with sampled and interconnect, docs/METHODS.md §10)
- sampled:  SampledSystem, sample_ss, sample_tf, board_pid, FrequencyEvaluator
- interconnect: SampledLoop, close_loops (loops in state space, broken at a signal)
- margins_sampled: sampled_margins, sampled_stability; margin_result: Margins and reasons
- crossings: grid, crossovers and peak sensitivity shared by both margin paths
- multiloop: FeedbackLoop, multiloop_margins (several loops closed, one broken)
- balance:  BalanceModel, fit_balance_model, BalanceFitError (+ designs from balance_design)
- metrics:  disturbance_metrics, step_metrics, summarise

Everything takes and returns SI numbers (see rigbench.base.units for the edge conversion).
"""
