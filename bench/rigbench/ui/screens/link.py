"""Link screen: choose a port (serial devices and simulated boards), see who answered, the
link's health counters, and a console of what crossed the link, filterable.

The console shows raw frames when the link offers a tap of them (``link.raw_since``);
otherwise it shows the decoded board events and status frames the link keeps, and says so.
Nothing here parses protocol lines.
"""

from __future__ import annotations

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.widgets import Button, Checkbox, Input, Label, Log, OptionList, Static
from textual.widgets.option_list import Option

from rigbench.link.ports import list_ports
from rigbench.ui.safety import BenchScreen

SIM_PORTS = (
    ("sim://balance", "simulated balance rig"),
    ("sim://balance?drive=torque", "simulated, torque drive"),
    ("sim://wheel", "simulated flywheel (stable)"),
    ("sim://plant?num=1&den=1,1&delay=0.1", "simulated lag + dead time"),
)
CONSOLE_LINES = 2000


def is_chatter(text: str) -> bool:
    """Telemetry or a heartbeat: a display filter on the whole lines the link's tap gives,
    not a parser."""
    return text.startswith(("@tm ", "@hb|"))


def list_serial_ports() -> list[tuple[str, str]]:
    """(device, description) of the serial ports the system lists (ptys are not listed)."""
    return [(p.device, p.description) for p in list_ports()]


def health_lines(link, stream_rate_hz) -> list[str]:
    """The board and the link's counters in short lines (most under 38 columns), so they
    read beside the port list in an 80-column terminal."""
    h = link.health()
    info = link.info
    bad = ", ".join(f"{k} {v}" for k, v in sorted(h.bad_frames.items())) or "none"
    lat = (f"{1e3 * h.reply_latency_median_s:.1f} ms" if h.reply_latency_median_s is not None
           else "–")
    since = f"{h.since_rx_s:.2f} s" if h.since_rx_s is not None else "–"
    return [
        f"board      {info.board}" + ("  SIMULATED" if info.simulated else ""),
        f"firmware   {info.firmware}  rig {info.rig}",
        f"protocol   {'%d.%d' % info.version}  loop {info.rate_hz:g} Hz",
        f"watchdog   {info.watchdog_ms:g} ms",
        f"declares   {info.params} params {info.signals} signals {info.loops} loops",
        f"stream     asked {stream_rate_hz or 0:g} Hz, got {h.telemetry_per_s:.0f}/s",
        "",
        f"state      {h.state}, last byte {since} ago",
        f"frames     {h.rx_frames} good, {h.frames_per_s:.0f}/s",
        f"bad frames {bad}",
        f"lost       {h.lost_frames} frames (board dropped {h.board_drops})",
        f"board saw  {h.board_rx_errors} unreadable frames from us",
        f"replies    median {lat}, {h.timeouts} timeouts",
        f"           {h.resends} resends, {h.late_replies} late",
        f"heartbeats {h.heartbeats} sent",
        f"bytes      {h.rx_bytes} in, {h.tx_bytes} out",
        f"restarts   {h.resets} seen, {h.resyncs} handshakes again",
    ] + ([f"lost       {h.lost_reason}"] if h.lost_reason else [])


class LinkScreen(BenchScreen):
    """Ports, board identity, health and the console."""

    SUB_TITLE = "Link"
    BINDINGS = [
        Binding("u", "rescan", "Rescan ports"),
        Binding("ctrl+l", "clear_console", "Clear console"),
    ]

    def __init__(self) -> None:
        super().__init__()
        self._cursors: dict[str, int] = {}
        self._link_id = None

    def compose_body(self) -> ComposeResult:
        with Horizontal(id="link-top"):
            with Vertical(id="link-ports"):
                yield Label("Ports: choose one, then Connect (enter)", classes="section")
                yield OptionList(id="port-list")
                with Horizontal(id="port-row"):
                    yield Input(placeholder="or type a device path or URL", id="port-url",
                                compact=True)
                    yield Button("Connect", id="connect", variant="primary", compact=True)
            with VerticalScroll(id="link-health-box"):
                yield Static("", id="link-health", markup=False)
        with Horizontal(id="console-row"):
            yield Label("Console", classes="section")
            yield Input(placeholder="filter: show lines containing…", id="console-filter",
                        compact=True)
            yield Checkbox("hide telemetry and heartbeats", True, compact=True,
                           id="console-quiet")
        yield Static("", id="console-kind", markup=False)
        yield Log(max_lines=CONSOLE_LINES, id="console")

    def on_mount(self) -> None:
        self.action_rescan()
        self.set_interval(0.5, self.refresh_view)
        self.refresh_view()

    # ------------------------------------------------------------------ ports

    def action_rescan(self) -> None:
        self.scan_ports()

    @work(thread=True, exclusive=True, group="ports", exit_on_error=False)
    def scan_ports(self) -> None:
        try:
            devices = list_serial_ports()
        except Exception as exc:  # noqa: BLE001 - shown as a line in the list
            devices = [("", f"cannot list serial ports: {exc}")]
        self.app.call_from_thread(self._show_ports, devices)

    def _show_ports(self, devices) -> None:
        ports = self.query_one("#port-list", OptionList)
        ports.clear_options()
        for url, what in SIM_PORTS:
            ports.add_option(Option(f"{url:<36} {what}", id=url))
        for dev, what in devices:
            ports.add_option(Option(f"{dev:<36} {what}", id=dev or None, disabled=not dev))
        if not devices:
            ports.add_option(Option("(no serial devices found; `rigbench sim` boards are "
                                    "pseudo-terminals: type their path below)", disabled=True))

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        if event.option.id:
            self.query_one("#port-url", Input).value = event.option.id
            self.action_connect()

    def on_option_list_option_highlighted(self, event: OptionList.OptionHighlighted) -> None:
        if event.option.id:
            self.query_one("#port-url", Input).value = event.option.id

    def on_input_submitted(self, event: Input.Submitted) -> None:
        if event.input.id == "port-url":
            self.action_connect()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        if event.button.id == "connect":
            self.action_connect()

    def action_connect(self) -> None:
        url = self.query_one("#port-url", Input).value.strip()
        if not url:
            self.notify("Choose a port or type one first.", severity="warning")
            return
        self.app.connect(url)

    # ------------------------------------------------------------------ health, console

    def action_clear_console(self) -> None:
        self.query_one("#console", Log).clear()

    def refresh_view(self) -> None:
        if not self.is_current:
            return
        link = self.app.link
        health = self.query_one("#link-health", Static)
        if link is None:
            state = self.app.safety
            health.update(f"No link open ({state.link}).\n{self.app.failure}")
            return
        health.update("\n".join(health_lines(link, self.app.stream_rate_hz)))
        if id(link) != self._link_id:
            self._link_id = id(link)
            self._cursors = {}
        self._pull_console(link)

    def _pull_console(self, link) -> None:
        log = self.query_one("#console", Log)
        text = self.query_one("#console-filter", Input).value.strip()
        lines: list[str] = []
        raw = getattr(link, "raw_since", None)
        kind = self.query_one("#console-kind", Static)
        if callable(raw):
            kind.update("raw frames: > to the board, < from the board")
            cur = self._cursors.get("raw", 0)
            self._cursors["raw"], items = raw(cur)
            quiet = self.query_one("#console-quiet", Checkbox).value
            lines = [str(item) for item in items if not (quiet and is_chatter(item.text))]
        else:
            kind.update("decoded events and status frames (this link offers no raw-frame "
                        "tap); telemetry is on the live view")
            cur = self._cursors.get("ev", 0)
            self._cursors["ev"], events = link.events_since(cur)
            for ev in events:
                fields = " ".join(f"{k}={v}" for k, v in ev.fields.items())
                lines.append(f"{ev.host_time_s:10.3f} < ev {ev.source} {ev.kind} {fields}")
            cur = self._cursors.get("st", 0)
            self._cursors["st"], statuses = link.statuses_since(cur)
            for st in statuses[-20:]:
                lines.append(f"{st.host_time_s:10.3f} < st mode={st.mode} motor={st.motor} "
                             f"fault={st.fault or 'none'} why={','.join(st.why) or 'none'} "
                             f"drops={st.drops} hb_ms={1e3 * st.heartbeat_age_s:.0f}")
        if text:
            lines = [ln for ln in lines if text in ln]
        if lines:
            log.write_lines(lines[-CONSOLE_LINES:])
