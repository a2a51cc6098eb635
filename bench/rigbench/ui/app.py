"""``RigApp``: the terminal UI's application: screens, global keys, the link it owns, the
safety state every screen shows, and the motor commands (kill, arm, disarm, clear, hold).

The kill is an App-level priority binding on ctrl+k and F9: both reach the App with any
widget focused, in dialogs and in the command palette (DEVELOPERS.md, Practice notes). It
calls ``link.kill()`` at once on the UI thread (the link writes the kill bytes ahead of
anything queued) and cancels any running experiment worker. Every other board command runs
in a thread worker and reports back with a message; errors come back in words.

Every action that can move the motor asks first (rigbench.ui.guard). A lost link turns the
bar into "kill not delivered", refuses motor starts and is reopened by rigbench.ui.relink
(never re-arming); quitting disarms and stops the telemetry stream, and asks first while
the motor is armed.

"""

from __future__ import annotations

import time
from pathlib import Path

from textual.app import App
from textual.binding import Binding
from textual.message import Message
from textual.reactive import reactive
from textual.worker import get_current_worker

from rigbench.link import BoardRefused, Link, LinkError
from rigbench.link.reopen import compare, remember

from rigbench.ui import guard, relink

from rigbench.ui.palette import BenchCommands
from rigbench.ui.screens.experiments import ExperimentsScreen
from rigbench.ui.screens.gains import GainsScreen
from rigbench.ui.screens.help import HelpScreen
from rigbench.ui.screens.link import LinkScreen
from rigbench.ui.screens.live import LiveScreen
from rigbench.ui.screens.sequences import SequencesScreen
from rigbench.ui.state import KILL_KEYS_TEXT, SafetyState, read_safety, refusal_words, trip_words
from rigbench.ui.theme import THEMES

DEFAULT_URL = "sim://balance"


class LinkOpened(Message):
    def __init__(self, link: Link, url: str) -> None:
        super().__init__()
        self.link, self.url = link, url


class LinkFailed(Message):
    def __init__(self, url: str, text: str) -> None:
        super().__init__()
        self.url, self.text = url, text


class CommandDone(Message):
    """A board command finished in a worker: ``ok`` with ``result``, or ``text`` in words."""

    def __init__(self, what: str, ok: bool, text: str, result=None, on_done=None) -> None:
        super().__init__()
        self.what, self.ok, self.text, self.result, self.on_done = what, ok, text, result, on_done


def error_words(exc: BaseException) -> str:
    """Any exception from a domain call, in one line of words (never a traceback)."""
    if isinstance(exc, BoardRefused):
        return refusal_words(exc.code, exc.text)
    if isinstance(exc, LinkError):
        return str(exc)
    text = str(exc).strip().splitlines()
    return f"{type(exc).__name__}: {text[0]}" if text else type(exc).__name__


class RigApp(guard.QuitMixin, relink.RelinkMixin, App):
    """The rigbench terminal UI on one board at ``url``, in colour ``theme`` (one of
    rigbench.ui.theme.THEMES or Textual's own)."""

    TITLE = "rigbench"
    CSS_PATH = "rigbench.tcss"
    COMMANDS = App.COMMANDS | {BenchCommands}
    MODES = {
        "live": LiveScreen, "experiments": ExperimentsScreen, "gains": GainsScreen,
        "sequences": SequencesScreen, "link": LinkScreen, "help": HelpScreen,
    }
    DEFAULT_MODE = "live"
    # classes on every screen by terminal size (rigbench.tcss lays out narrow/short screens)
    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (110, "-wide")]
    VERTICAL_BREAKPOINTS = [(0, "-short"), (34, "-tall")]
    BINDINGS = [
        Binding("ctrl+k", "kill", "KILL", priority=True),
        Binding("f9", "kill", "KILL", show=False, priority=True),
        Binding("ctrl+q", "quit", "Quit", priority=True),  # early: the footer keeps it
        Binding("ctrl+r", "reconnect", "Reconnect", show=False, priority=True),
        Binding("1", "switch_mode('live')", "Live"),
        Binding("2", "switch_mode('experiments')", "Experiments"),
        Binding("3", "switch_mode('gains')", "Gains"),
        Binding("4", "switch_mode('sequences')", "Sequences"),
        Binding("5", "switch_mode('link')", "Link"),
        Binding("f1", "switch_mode('help')", "Help"),
        Binding("question_mark", "switch_mode('help')", "Help", show=False),
        Binding("a", "arm", "Arm…"),
        Binding("h", "hold", "Hold"),
        Binding("o", "motor_off", "Mode off", show=False),
        Binding("d", "disarm", "Disarm"),
        Binding("c", "clear", "Clear fault", show=False),
    ]

    # repaint=False: a change is drawn by the bars that watch it, not by a full-screen repaint
    safety: reactive[SafetyState] = reactive(SafetyState, init=False, repaint=False)
    link_serial: reactive[int] = reactive(0, init=False, repaint=False)  # bumps per new link

    def __init__(self, url: str = DEFAULT_URL, *, stream_hz: float = 250.0,
                 safety_hz: float = 10.0, virtual_speed: float | None = 1.0,
                 baudrate: int = 115200, theme: str = THEMES[0].name) -> None:
        super().__init__()
        self.url = url
        self.baudrate = baudrate
        self.virtual_speed = virtual_speed
        self.stream_hz = stream_hz
        self.safety_hz = safety_hz
        self.link: Link | None = None
        self.stream_rate_hz: float | None = None
        self.failure = ""
        self.note_text = ""
        self.trip_cause: str | None = None
        self.kills_sent = 0
        self.last_relay = None  # the last relay outcome (runners.RelayOutcome)
        self.cancel_events: set = set()  # cancel flags of running experiments
        self._event_cursor = 0
        self.memory = None  # what the link knew while it worked (link.reopen.LinkMemory)
        self.relink_text = ""
        self._lost_link: Link | None = None  # the lost link being reopened
        self._asking_quit = False
        # the app's themes exist before one is chosen: a theme set on an app that has not
        # registered it yet would be refused, or replaced later by a default
        for bench_theme in THEMES:
            self.register_theme(bench_theme)
        self.theme = theme

    # ------------------------------------------------------------------ life cycle

    def on_mount(self) -> None:
        self.set_interval(1.0 / self.safety_hz, self.update_safety)
        self.update_safety()
        self.connect(self.url)

    def on_unmount(self) -> None:
        self.close_link(disarm=True)

    def close_link(self, *, disarm: bool = False) -> None:
        """Close the link; ``disarm``: first disarm an armed motor and stop the telemetry
        stream, so the next program on the port does not start with a backlog of frames."""
        link, self.link = self.link, None
        if link is None:
            return
        if disarm and link.state not in ("lost", "closed"):
            try:
                if link.motor_state in ("armed", "running"):
                    link.disarm()
            except (LinkError, BoardRefused):
                pass  # closing stops the heartbeat: the board's watchdog trips the motor
            try:
                link.stream(0)
            except (LinkError, BoardRefused):
                pass  # the board goes on streaming; the next program counts the backlog
        link.close()

    # ------------------------------------------------------------------ the link

    def connect(self, url: str) -> None:
        """Close the present link and open ``url`` in a worker (handshake, stream)."""
        self.url = url
        self.failure = ""
        self.note(f"opening {url}")
        self.close_link(disarm=True)
        self.update_safety()

        def open_it() -> None:
            try:
                link = Link.open(url, baudrate=self.baudrate)
            except Exception as exc:  # noqa: BLE001 - shown in words in the bar
                self.post_message(LinkFailed(url, error_words(exc)))
                return
            try:
                self.stream_rate_hz = link.stream(min(self.stream_hz, link.info.rate_hz))
            except Exception as exc:  # noqa: BLE001
                link.close()
                self.post_message(LinkFailed(url, error_words(exc)))
                return
            self.post_message(LinkOpened(link, url))

        self.run_worker(open_it, thread=True, group="link", exclusive=True,
                        exit_on_error=False, name=f"open {url}")

    def on_link_opened(self, message: LinkOpened) -> None:
        if message.url != self.url:  # superseded by a later connect
            message.link.close()
            return
        self.adopt(message.link)
        sim = " (SIMULATED)" if message.link.info.simulated else ""
        self.note(f"connected to {message.link.info.board}{sim}, telemetry "
                  f"{self.stream_rate_hz:g} Hz")
        self.update_safety()

    def adopt(self, link: Link) -> None:
        """Make ``link`` (open, handshaken, streaming) the App's link."""
        self.link = link
        self._event_cursor = link.event_cursor()
        self.trip_cause = None
        self.memory = None
        self._lost_link = None
        self.relink_text = ""
        info = link.info
        sim = " (SIMULATED)" if info.simulated else ""
        self.sub_title = f"{info.board} · {info.rig}{sim}"
        self.link_serial += 1
        if getattr(link.clock, "virtual", False):
            self.pace_virtual_clock(link)

    def pace_virtual_clock(self, link: Link, *, step_s: float = 0.02) -> None:
        """A virtual clock moves only while someone waits on the link: the UI watches live,
        so it keeps waiting, at most ``virtual_speed`` times faster than real time (None:
        as fast as the computer allows)."""
        speed = self.virtual_speed

        def pace() -> None:
            worker = get_current_worker()
            real0, sim0 = time.monotonic(), link.now()
            while self.link is link and not worker.is_cancelled:
                try:
                    link.sleep(step_s)
                except Exception:  # noqa: BLE001 - closed or lost: the bar says which
                    return
                if speed:
                    ahead = (link.now() - sim0) / speed - (time.monotonic() - real0)
                    if ahead > 0:
                        time.sleep(min(ahead, 0.1))

        self.run_worker(pace, thread=True, group="pace", exclusive=True,
                        exit_on_error=False, name="virtual clock")

    def on_link_failed(self, message: LinkFailed) -> None:
        if message.url == self.url:
            self.failure = message.text
            self.note("")
            self.update_safety()
            self.notify(message.text, title="Cannot open the link", severity="error")

    def telemetry_window(self, seconds: float):
        """The newest ``seconds`` of telemetry (a TelemetryBlock), or None without a link."""
        link = self.link
        if link is None:
            return None
        # an experiment may raise the stream rate up to the loop rate: bound by that
        rate = max(self.stream_rate_hz or 0.0, link.info.rate_hz)
        return link.snapshot(seconds=seconds, rows=int(seconds * rate * 1.25) + 64)

    def telemetry_cursor(self) -> int:
        return self.link.telemetry_cursor() if self.link else 0

    # ------------------------------------------------------------------ safety state

    def note(self, text: str) -> None:
        """Say what just happened on the bar's second line."""
        self.note_text = f"{time.strftime('%H:%M:%S')} {text}" if text else ""

    def update_safety(self) -> None:
        link = self.link
        if link is not None and link is not self._lost_link:
            self._event_cursor, events = link.events_since(self._event_cursor)
            for ev in events:
                self._on_event(ev)
            state = link.state
            if state == "ok":
                self.memory = remember(link)  # what to compare with after a restart
            elif state == "lost":
                self.link_lost(link)
        self.safety = read_safety(link, port=self.url, note=self.note_text,
                                  failure=self.failure, trip_cause=self.trip_cause,
                                  relink=self.relink_text)

    def _on_event(self, ev) -> None:
        if ev.source == "board" and ev.kind == "trip":
            self.trip_cause = ev.get("cause")
            words = trip_words(self.trip_cause)
            if self.trip_cause == "kill" and self.kills_sent:
                self.note("board confirmed the kill: motor tripped")
            else:
                self.note(f"TRIP: {words}")
                self.notify(f"Motor tripped: {words}", title="Trip", severity="error")
        elif ev.source == "board" and ev.kind == "clear":
            self.trip_cause = None
        elif ev.source == "board" and ev.kind == "done":
            self.note(f"{ev.get('mode', 'timed mode')} finished")
        elif ev.source == "link" and ev.kind == "resync" and self.memory is not None:
            found = compare(self.memory, self.link, restarted=True)
            text = (f"board restarted, handshake done again: {'; '.join(found.changes())}; "
                    f"motor {found.motor}, not re-armed")
            self.note(text)
            self.notify(text, title="Board restarted", severity="warning", timeout=10)
        elif ev.source == "link" and ev.kind in ("lost", "reset", "resync"):
            what = {"lost": "link lost", "reset": "board restarted",
                    "resync": "handshake done again after the restart"}[ev.kind]
            reason = ev.get("reason") or ev.get("why")
            self.note(f"{what}: {reason}" if reason else what)

    # ------------------------------------------------------------------ motor commands

    def action_kill(self) -> None:
        """Kill bytes now, on this thread; then stop any experiment worker."""
        link = self.link
        self.cancel_experiments()
        if link is None:
            self.note("KILL: no link is open: nothing was sent. Use the hardware cut-off.")
            self.update_safety()
            return
        try:
            link.kill()
        except Exception as exc:  # noqa: BLE001 - a failed kill must be said, never raised
            why = "the link is lost" if link.state == "lost" else error_words(exc)
            self.note(f"KILL NOT SENT ({why}): use the hardware cut-off")
            self.notify(f"The kill could not be sent ({why}): use the hardware cut-off.",
                        title="KILL NOT DELIVERED", severity="error", timeout=10)
        else:
            self.kills_sent += 1
            self.note("kill sent; waiting for the board to confirm")
        self.update_safety()

    def cancel_experiments(self) -> None:
        """Set the cancel flag of every running experiment (the runner leaves the rig safe)."""
        for event in list(self.cancel_events):
            event.set()
        self.workers.cancel_group(self, "experiment")

    def need_link(self, what: str) -> Link | None:
        if self.link is None:
            self.note(f"{what}: no link is open")
            self.notify(f"{what}: no link is open (Link screen: 5)", severity="warning")
        return self.link

    def board_command(self, what: str, call, *, on_done=None) -> None:
        """Run ``call(link)`` in a worker; report with CommandDone (result or words)."""
        link = self.need_link(what)
        if link is None:
            return

        def work() -> None:
            try:
                result = call(link)
            except Exception as exc:  # noqa: BLE001 - reported in words
                self.post_message(CommandDone(what, False, error_words(exc), None, on_done))
            else:
                self.post_message(CommandDone(what, True, "", result, on_done))

        self.run_worker(work, thread=True, group="command", exit_on_error=False, name=what)

    def on_command_done(self, message: CommandDone) -> None:
        if message.ok:
            result = message.result
            shown = f": {result}" if isinstance(result, (str, int, float)) else ""
            self.note(f"{message.what} done{shown}")
        else:
            self.note(f"{message.what} refused: {message.text}")
            self.notify(message.text, title=f"{message.what} refused", severity="error")
        if message.on_done is not None:
            message.on_done(message)
        self.update_safety()

    def action_arm(self) -> None:
        what = ("Arming enables the motor driver. Nothing turns until a mode runs (hold, "
                "relay, open loop, injection), but from then on only a trip, a disarm or the "
                f"kill ({KILL_KEYS_TEXT}) stops it.")
        guard.ask_motor_start(self, "Arm the motor?", what, "Arm the motor",
                              lambda: self.board_command("arm", lambda link: link.arm()),
                              cancelled="arming cancelled")

    def action_disarm(self) -> None:
        self.board_command("disarm", lambda link: link.disarm())

    def action_clear(self) -> None:
        self.board_command("clear fault", lambda link: link.clear())

    def action_hold(self) -> None:
        what = ("Hold closes the loop on the board's present gains. With the motor armed the "
                "loop drives it at once; disarmed, it turns as soon as it is armed.")
        guard.ask_motor_start(
            self, "Hold: close the loop?", what, "Hold",
            lambda: self.board_command("hold (closed loop)",
                                       lambda link: link.mode("hold").get("mode")))

    def action_motor_off(self) -> None:
        self.board_command("mode off", lambda link: link.mode("off").get("mode"))

    def action_help_screen(self) -> None:
        self.switch_mode("help")


def stylesheet_path() -> Path:
    return Path(__file__).with_name("rigbench.tcss")
