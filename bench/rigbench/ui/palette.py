"""Command palette entries: one per action of the UI, so everything the keys do can be found
by name (ctrl+p). Screen actions are sent to whichever screen they belong to after switching
to it.
"""

from __future__ import annotations

from functools import partial

from textual.command import DiscoveryHit, Hit, Hits, Provider

# (title, help, mode to show first or None, action run on the App or on that screen)
ACTIONS: tuple[tuple[str, str, str | None, str], ...] = (
    ("KILL the motor", "kill bytes to the board now (ctrl+k, F9)", None, "app.kill"),
    ("Arm the motor…", "ask, then arm: the board checks its interlock", None, "app.arm"),
    ("Disarm the motor", "motor driver off", None, "app.disarm"),
    ("Clear the latched fault", "motor stays off; arming needs a new arm", None, "app.clear"),
    ("Hold: closed loop with the current gains", "mode hold", None, "app.hold"),
    ("Mode off (motor stays armed)", "output zero", None, "app.motor_off"),
    ("Show the live view", "plots and readouts (1)", "live", ""),
    ("Pause or resume the plots", "live view (space)", "live", "screen.pause"),
    ("Change the plot time window", "live view (w)", "live", "screen.window"),
    ("Auto or fixed plot scale", "live view (s)", "live", "screen.scale"),
    ("Show experiments", "relay autotune, disturbance sweep (2)", "experiments", ""),
    ("Start the relay autotune", "experiments screen (r)", "experiments", "screen.start_relay"),
    ("Start the disturbance sweep", "experiments screen (t)", "experiments",
     "screen.start_sweep"),
    ("Cancel the running experiment", "motor left safe (x)", "experiments", "screen.cancel"),
    ("Show gains", "board gains, proposals, profiles (3)", "gains", ""),
    ("Read the gains back from the board", "gains screen (g)", "gains", "screen.reload"),
    ("Push the edited gains…", "difference first, then one atomic set (p)", "gains",
     "screen.push"),
    ("Save the gains as a profile…", "gains screen (ctrl+s)", "gains", "screen.save_profile"),
    ("Load a profile…", "gains screen (l)", "gains", "screen.load_profile"),
    ("Store the gains in the board's memory…", "board save (ctrl+w)", "gains",
     "screen.store"),
    ("Show sequences", "scripted test sequences (4)", "sequences", ""),
    ("Validate the chosen sequence", "sequences screen (v)", "sequences", "screen.validate"),
    ("Run the chosen sequence", "sequences screen (r)", "sequences", "screen.run"),
    ("Abort the sequence", "motor off (x)", "sequences", "screen.abort"),
    ("Show the link", "ports, raw frames, health (5)", "link", ""),
    ("Connect to the chosen port", "link screen (enter)", "link", "screen.connect"),
    ("Show keys and help", "every key (F1)", "help", ""),
    ("Reconnect the lost link", "same port, handshake, never re-arms (ctrl+r)", None,
     "app.reconnect"),
    ("Quit", "disarms and stops the stream first; asks while armed (ctrl+q)", None,
     "app.quit"),
)


class BenchCommands(Provider):
    """The palette's rigbench entries."""

    def _run(self, mode: str | None, action: str) -> None:
        app = self.app
        if mode is not None and app.current_mode != mode:
            app.switch_mode(mode)
        if action:
            app.call_after_refresh(app.run_action, action)

    async def discover(self) -> Hits:
        for title, help_text, mode, action in ACTIONS:
            yield DiscoveryHit(title, partial(self._run, mode, action), help=help_text)

    async def search(self, query: str) -> Hits:
        matcher = self.matcher(query)
        for title, help_text, mode, action in ACTIONS:
            score = matcher.match(title)
            if score > 0:
                yield Hit(score, matcher.highlight(title), partial(self._run, mode, action),
                          help=help_text)
