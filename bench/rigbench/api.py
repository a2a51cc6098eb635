"""The Python API: the names a script needs to drive a board and use the results.

    from rigbench.api import Link, run_relay, propose, load_recording

    with Link.open("sim://wheel?clock=virtual") as link:   # the simulated wheel rig
        run = run_relay(link, "speed", results_dir="results/api-demo")
        best = propose(run).best()

- ``Link.open(url)`` opens a port (device path, any pyserial URL, ``sim://``, ``replay://``)
  and handshakes; ``with`` closes it (the motor state is left as the board has it).
  Errors: ``LinkError`` (port, lost link, no reply), ``BoardRefused`` (the board said no).
- ``autotune(link, loop, config)`` is the one autotune flow the CLI, the UI and sequences
  use: the relay test and the proposals, ranked with their margins; ``result.recommended``
  lists the proposals that meet the limits, ``result.to_dict()`` is ``tune --json``'s
  document, and every missing figure carries its reason.
- ``run_relay(link, loop, ...)`` arms the board and runs a guarded relay test (on a real
  rig it moves the motor: ask the user first); it returns a ``RelayRun``:
  ``converged``, ``ku``, ``tu_s`` (s), ``point`` (gain, ``phase_deg``, ``omega_rad_s``);
  with ``results_dir`` its telemetry is recorded (``run.experiment.recording``).
- ``propose(run)`` returns a ``ProposalSet``: ``proposals`` (each with ``rule``, ``kp``,
  ``ki``, ``kd``, ``margins``, ``rank``) and ``best()``.
- ``load_recording(path)`` reads a recording (CSV + YAML sidecar) as numpy arrays:
  ``host_time_s``, ``board_time_s`` (s), ``frame``, ``values[:, i]`` for ``signals[i]`` in
  ``units[i]``; ``recording_frame(rec)`` gives the same as a pandas DataFrame when pandas
  is installed.
- Profiles: ``load_profile``, ``save_profile``, ``profile_from_board``, ``push_profile``.

Functions take and return SI units except where a name says otherwise; values read from or
sent to a board are in the units the board declares. The package logs through
``logging.getLogger("rigbench...")`` and configures no handlers: a script that wants the
messages calls ``logging.basicConfig()``.
"""

from __future__ import annotations

from pathlib import Path

from rigbench.experiments.autotune import AutotuneConfig, AutotuneResult, autotune
from rigbench.experiments.proposals import ProposalSet, Rated, propose
from rigbench.experiments.relay import RelayRun, run_relay
from rigbench.experiments.runner import ArmRefused, Guards
from rigbench.link import BoardRefused, Link, LinkError
from rigbench.link.urls import register_url_handlers
from rigbench.profiles.model import Profile, load_profile, profile_from_board, save_profile
from rigbench.profiles.push import push_profile
from rigbench.recordings.recording import Recorder, Recording, RecordingError, load_recording

__all__ = [
    "Link", "LinkError", "BoardRefused", "register_url_handlers",
    "autotune", "AutotuneConfig", "AutotuneResult",
    "run_relay", "RelayRun", "Guards", "ArmRefused", "propose", "ProposalSet", "Rated",
    "load_recording", "Recording", "RecordingError", "Recorder", "recording_frame",
    "load_profile", "save_profile", "profile_from_board", "push_profile", "Profile",
]


def recording_frame(recording: Recording | str | Path):
    """A recording as a pandas DataFrame: columns ``host_time_s``, ``board_time_s``,
    ``frame`` and one per signal (named as in the recording, values in its units, which are
    in ``df.attrs["units"]``); ``df.attrs["sidecar"]`` holds the sidecar. Raises
    ImportError naming the install when pandas is missing."""
    try:
        import pandas as pd
    except ImportError:
        raise ImportError("recording_frame needs pandas: pip install pandas (with pipx: "
                          "pipx inject rigbench pandas); load_recording gives numpy arrays "
                          "without it") from None
    rec = recording if isinstance(recording, Recording) else load_recording(recording)
    data = {"host_time_s": rec.host_time_s, "board_time_s": rec.board_time_s,
            "frame": rec.frame}
    for i, name in enumerate(rec.signals):
        data[name] = rec.values[:, i]
    df = pd.DataFrame(data)
    df.attrs["units"] = dict(zip(rec.signals, rec.units))
    df.attrs["sidecar"] = rec.sidecar
    return df
