"""Typed messages of the line protocol and their text form (PROTOCOL.md §3–§8).

Every message is a frozen dataclass. ``parse_host_body`` turns a body sent by the host
into a host message, ``parse_board_body`` a body sent by the board into a board message;
``format_body`` turns any message back into its body. Both directions share the tokeniser
and the number grammar. The grammar of each command is one row of ``COMMANDS`` (data, not
logic spread over methods).

No I/O.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, fields

from rigbench.wire.errors import LocalProtocolError, RemoteProtocolError

PROTOCOL_VERSION = (1, 0)
SEQ_MODULO = 65536
U32 = 1 << 32

# PROTOCOL.md §3: token grammar.
NAME_RE = re.compile(r"[a-z][a-z0-9_]{0,31}\Z")
NUMBER_RE = re.compile(r"-?\d+(\.\d+)?([eE][-+]?\d+)?\Z")
WORD_RE = re.compile(r"[A-Za-z0-9_.:/%+^,-]{1,48}\Z")
UINT_RE = re.compile(r"\d{1,10}\Z")


# --------------------------------------------------------------------------- numbers


def parse_number(tok: str, what: str = "number") -> float:
    """PROTOCOL.md §3: decimal with optional fraction and exponent; no nan/inf."""
    if not NUMBER_RE.match(tok):
        raise RemoteProtocolError("bad_number", f"{what} {tok!r} is not a number")
    value = float(tok)
    if not math.isfinite(value):
        raise RemoteProtocolError("bad_number", f"{what} {tok!r} is out of range")
    return value


def parse_uint(tok: str, what: str, limit: int) -> int:
    if not UINT_RE.match(tok) or int(tok) >= limit:
        raise RemoteProtocolError("bad_number", f"{what} {tok!r} is not an integer below {limit}")
    return int(tok)


def format_number(value: float, digits: int = 7) -> str:
    """Shortest text of ``value`` with ``digits`` significant digits that the grammar accepts."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise LocalProtocolError("bad_number", f"{value!r} is not a number")
    if isinstance(value, int):
        return str(value)
    if not math.isfinite(value):
        raise LocalProtocolError("bad_number", f"{value!r} cannot be sent")
    text = "%.*g" % (digits, value)
    if "e" in text:
        mant, exp = text.split("e")
        text = f"{mant}e{int(exp)}"
    if text == "-0":
        text = "0"
    return text


def _check_name(name: str) -> str:
    if not NAME_RE.match(name):
        raise LocalProtocolError("bad_field", f"{name!r} is not a valid name")
    return name


def _check_word(word: str) -> str:
    if not WORD_RE.match(word):
        raise LocalProtocolError("bad_field", f"{word!r} is not a valid word")
    return word


# --------------------------------------------------------------------------- fields

Fields = tuple[tuple[str, str], ...]


def parse_fields(tokens: list[str]) -> Fields:
    """``key=value`` tokens, keys are names, values are words; duplicate keys are illegal."""
    out: list[tuple[str, str]] = []
    seen: set[str] = set()
    for tok in tokens:
        key, eq, value = tok.partition("=")
        if not eq or not NAME_RE.match(key) or not WORD_RE.match(value):
            raise RemoteProtocolError("bad_field", f"{tok!r} is not key=value")
        if key in seen:
            raise RemoteProtocolError("bad_field", f"key {key!r} given twice")
        seen.add(key)
        out.append((key, value))
    return tuple(out)


def format_fields(items) -> list[str]:
    out = []
    for key, value in items:
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            value = format_number(value)
        out.append(f"{_check_name(key)}={_check_word(str(value))}")
    return out


def fields_get(items: Fields, key: str, default=None):
    for k, v in items:
        if k == key:
            return v
    return default


# --------------------------------------------------------------------------- host -> board


@dataclass(frozen=True)
class Command:
    """A host command: ``<verb> <seq> ...`` (PROTOCOL.md §4). Subclasses set VERB."""

    seq: int

    VERB = ""
    IDEMPOTENT = True  # safe to resend after a reply timeout (PROTOCOL.md §4.2)


@dataclass(frozen=True)
class Hello(Command):
    version: str = "%d.%d" % PROTOCOL_VERSION
    VERB = "hello"


@dataclass(frozen=True)
class DescribeParam(Command):
    index: int = 0
    VERB = "param"


@dataclass(frozen=True)
class DescribeSignal(Command):
    index: int = 0
    VERB = "signal"


@dataclass(frozen=True)
class DescribeLoop(Command):
    index: int = 0
    VERB = "loop"


@dataclass(frozen=True)
class Get(Command):
    names: tuple[str, ...] = ()
    VERB = "get"


@dataclass(frozen=True)
class Set(Command):
    """Set one or more parameters atomically: all are applied together or none."""

    values: tuple[tuple[str, float], ...] = ()
    VERB = "set"


@dataclass(frozen=True)
class Stage(Command):
    """Check assignments and keep them for the next ``set``, which applies them with its
    own, all at once (PROTOCOL.md §5.5: an atomic group longer than one line)."""

    values: tuple[tuple[str, float], ...] = ()
    VERB = "stage"


@dataclass(frozen=True)
class Save(Command):
    VERB = "save"


@dataclass(frozen=True)
class Restore(Command):
    VERB = "restore"


@dataclass(frozen=True)
class Arm(Command):
    VERB = "arm"
    IDEMPOTENT = False


@dataclass(frozen=True)
class Disarm(Command):
    VERB = "disarm"


@dataclass(frozen=True)
class Clear(Command):
    VERB = "clear"


@dataclass(frozen=True)
class Mode(Command):
    """Change mode: off, hold, relay, open, inject with ``key=value`` arguments."""

    name: str = "off"
    args: Fields = ()
    VERB = "mode"
    IDEMPOTENT = False


@dataclass(frozen=True)
class Stream(Command):
    rate_hz: float = 0.0
    VERB = "stream"


@dataclass(frozen=True)
class Kill(Command):
    VERB = "kill"


@dataclass(frozen=True)
class StatusRequest(Command):
    VERB = "status"


@dataclass(frozen=True)
class Heartbeat:
    """``hb``: no sequence number, no reply (PROTOCOL.md §8)."""


MODES = ("off", "hold", "relay", "open", "inject")

# One row per verb: class and the shape of its arguments after the seq.
#   "none"   no arguments
#   "int"    one unsigned index
#   "version" one major.minor
#   "names"  one or more names
#   "assign" one or more name=number
#   "mode"   a mode name then key=value fields
#   "rate"   rate_hz=number
COMMANDS: dict[str, tuple[type, str]] = {
    "hello": (Hello, "version"),
    "param": (DescribeParam, "int"),
    "signal": (DescribeSignal, "int"),
    "loop": (DescribeLoop, "int"),
    "get": (Get, "names"),
    "set": (Set, "assign"),
    "stage": (Stage, "assign"),
    "save": (Save, "none"),
    "restore": (Restore, "none"),
    "arm": (Arm, "none"),
    "disarm": (Disarm, "none"),
    "clear": (Clear, "none"),
    "mode": (Mode, "mode"),
    "stream": (Stream, "rate"),
    "kill": (Kill, "none"),
    "status": (StatusRequest, "none"),
}
_VERSION_RE = re.compile(r"\d{1,3}\.\d{1,3}\Z")


def parse_host_body(text: str):
    """Parse a body sent by the host. Raises RemoteProtocolError."""
    tokens = text.split(" ")
    verb = tokens[0]
    if verb == "hb":
        if len(tokens) != 1:
            raise RemoteProtocolError("bad_field", "hb takes no arguments")
        return Heartbeat()
    if verb not in COMMANDS:
        if verb in _BOARD_VERBS:
            raise RemoteProtocolError("wrong_direction", f"{verb!r} is sent by the board")
        raise RemoteProtocolError("unknown_verb", f"unknown verb {verb[:16]!r}")
    if len(tokens) < 2:
        raise RemoteProtocolError("bad_field", f"{verb} needs a sequence number")
    seq = parse_uint(tokens[1], "sequence number", SEQ_MODULO)
    cls, shape = COMMANDS[verb]
    args = tokens[2:]
    if shape == "none":
        if args:
            raise RemoteProtocolError("bad_field", f"{verb} takes no arguments")
        return cls(seq)
    if shape == "int":
        if len(args) != 1:
            raise RemoteProtocolError("bad_field", f"{verb} takes one index")
        return cls(seq, parse_uint(args[0], "index", 256))
    if shape == "version":
        if len(args) != 1 or not _VERSION_RE.match(args[0]):
            raise RemoteProtocolError("bad_field", "hello takes a version major.minor")
        return cls(seq, args[0])
    if shape == "names":
        if not args or not all(NAME_RE.match(a) for a in args):
            raise RemoteProtocolError("bad_field", "get takes one or more names")
        return cls(seq, tuple(args))
    if shape == "assign":
        if not args:
            raise RemoteProtocolError("bad_field", "set takes name=value pairs")
        pairs = parse_fields(args)
        return cls(seq, tuple((k, parse_number(v, k)) for k, v in pairs))
    if shape == "mode":
        if not args or args[0] not in MODES:
            raise RemoteProtocolError("bad_field", f"mode must be one of {', '.join(MODES)}")
        return cls(seq, args[0], parse_fields(args[1:]))
    if shape == "rate":
        pairs = parse_fields(args)
        if len(pairs) != 1 or pairs[0][0] != "rate_hz":
            raise RemoteProtocolError("bad_field", "stream takes rate_hz=<number>")
        return cls(seq, parse_number(pairs[0][1], "rate_hz"))
    raise AssertionError(shape)  # pragma: no cover - table and code disagree


def _format_command(msg: Command) -> str:
    verb = type(msg).VERB
    if not 0 <= msg.seq < SEQ_MODULO:
        raise LocalProtocolError("bad_field", f"sequence number {msg.seq} out of range")
    parts = [verb, str(msg.seq)]
    shape = COMMANDS[verb][1]
    if shape == "int":
        parts.append(str(int(msg.index)))
    elif shape == "version":
        parts.append(msg.version)
    elif shape == "names":
        if not msg.names:
            raise LocalProtocolError("bad_field", "get needs at least one name")
        parts += [_check_name(n) for n in msg.names]
    elif shape == "assign":
        if not msg.values:
            raise LocalProtocolError("bad_field", "set needs at least one value")
        parts += format_fields(msg.values)
    elif shape == "mode":
        if msg.name not in MODES:
            raise LocalProtocolError("bad_field", f"unknown mode {msg.name!r}")
        parts.append(msg.name)
        parts += format_fields(msg.args)
    elif shape == "rate":
        parts.append(f"rate_hz={format_number(float(msg.rate_hz))}")
    return " ".join(parts)


# --------------------------------------------------------------------------- board -> host


@dataclass(frozen=True)
class Ok:
    """Success reply to command ``seq`` with the values the board applied or reports."""

    seq: int
    fields: Fields = ()

    def get(self, key: str, default=None):
        return fields_get(self.fields, key, default)


@dataclass(frozen=True)
class Err:
    """Refusal of command ``seq``: a PROTOCOL.md §9 code and short text."""

    seq: int
    code: str
    text: str = ""


@dataclass(frozen=True)
class Telemetry:
    """``tm <frame> <time_us> <values...>`` in the order of the declared signals."""

    frame: int
    time_us: int
    values: tuple[float, ...]


@dataclass(frozen=True)
class Status:
    """``st <time_us> key=value...`` a few times a second (PROTOCOL.md §6)."""

    time_us: int
    fields: Fields = ()

    def get(self, key: str, default=None):
        return fields_get(self.fields, key, default)


@dataclass(frozen=True)
class Event:
    """``ev <time_us> <kind> key=value...``: trips, mode changes, boot (PROTOCOL.md §6)."""

    time_us: int
    kind: str
    fields: Fields = ()

    def get(self, key: str, default=None):
        return fields_get(self.fields, key, default)


_BOARD_VERBS = ("ok", "err", "tm", "st", "ev")
ERROR_CODES = (
    "unknown_verb", "bad_args", "unknown_name", "range", "readonly", "interlock",
    "not_armed", "busy", "version", "storage", "state", "bad_frame",
)


# Fast path for the one frame that comes thousands of times a second (PROTOCOL.md §6.1).
# The pattern admits only number characters; float() then rejects malformed tokens, and the
# substrings below catch the forms float() takes but the grammar (§3) does not: ".5", "+5",
# "-.5", "5.", "5.e3". Anything unusual falls through to the general parser, which names
# the error.
_TELEMETRY_RE = re.compile(r"tm (\d{1,10}) (\d{1,10})((?: [-0-9.eE+]+)*)\Z")
_LOOSE_FORMS = (" .", " +", "-.", ". ", ".e", ".E")


def _fast_telemetry(text: str):
    fast = _TELEMETRY_RE.match(text)
    if fast is None:
        return None
    frame, time_us, rest = fast.groups()
    if rest.endswith(".") or any(bit in rest for bit in _LOOSE_FORMS):
        return None
    try:
        values = tuple(map(float, rest.split()))
    except ValueError:
        return None
    frame, time_us = int(frame), int(time_us)
    if frame >= U32 or time_us >= U32 or not all(map(math.isfinite, values)):
        return None
    # Same object as Telemetry(frame, time_us, values), without the frozen dataclass's
    # per-field __setattr__ (a third of the decode time at 2 kHz).
    msg = _new(Telemetry)
    state = msg.__dict__
    state["frame"], state["time_us"], state["values"] = frame, time_us, values
    return msg


_new = object.__new__


def parse_board_body(text: str):
    """Parse a body sent by the board. Raises RemoteProtocolError."""
    if text.startswith("tm "):
        msg = _fast_telemetry(text)
        if msg is not None:
            return msg
    return parse_board_body_strict(text)


def parse_board_body_strict(text: str):
    """The general parser of board bodies, token by token (the reference for the fast path)."""
    tokens = text.split(" ")
    verb = tokens[0]
    if verb == "tm":
        if len(tokens) < 3:
            raise RemoteProtocolError("bad_field", "tm needs frame and time")
        return Telemetry(
            parse_uint(tokens[1], "frame counter", U32),
            parse_uint(tokens[2], "board time", U32),
            tuple(parse_number(t, "value") for t in tokens[3:]),
        )
    if verb == "ok":
        if len(tokens) < 2:
            raise RemoteProtocolError("bad_field", "ok needs a sequence number")
        return Ok(parse_uint(tokens[1], "sequence number", SEQ_MODULO), parse_fields(tokens[2:]))
    if verb == "err":
        if len(tokens) < 3:
            raise RemoteProtocolError("bad_field", "err needs a sequence number and a code")
        seq = parse_uint(tokens[1], "sequence number", SEQ_MODULO)
        if not NAME_RE.match(tokens[2]):
            raise RemoteProtocolError("bad_field", f"error code {tokens[2][:16]!r} is not a name")
        return Err(seq, tokens[2], " ".join(tokens[3:]))
    if verb == "st":
        if len(tokens) < 2:
            raise RemoteProtocolError("bad_field", "st needs the board time")
        return Status(parse_uint(tokens[1], "board time", U32), parse_fields(tokens[2:]))
    if verb == "ev":
        if len(tokens) < 3 or not NAME_RE.match(tokens[2]):
            raise RemoteProtocolError("bad_field", "ev needs the board time and a kind")
        return Event(parse_uint(tokens[1], "board time", U32), tokens[2], parse_fields(tokens[3:]))
    if verb in COMMANDS or verb == "hb":
        raise RemoteProtocolError("wrong_direction", f"{verb!r} is sent by the host")
    raise RemoteProtocolError("unknown_verb", f"unknown verb {verb[:16]!r}")


def format_body(msg) -> str:
    """Body text of any message (either direction). Raises LocalProtocolError."""
    if isinstance(msg, Command):
        return _format_command(msg)
    if isinstance(msg, Heartbeat):
        return "hb"
    if isinstance(msg, Telemetry):
        return " ".join(
            ["tm", str(msg.frame % U32), str(msg.time_us % U32)]
            + [format_number(float(v), 6) for v in msg.values]
        )
    if isinstance(msg, Ok):
        return " ".join(["ok", str(msg.seq)] + format_fields(msg.fields))
    if isinstance(msg, Err):
        _check_name(msg.code)
        text = " ".join(msg.text.split())
        return f"err {msg.seq} {msg.code}" + (f" {text}" if text else "")
    if isinstance(msg, Status):
        return " ".join(["st", str(msg.time_us % U32)] + format_fields(msg.fields))
    if isinstance(msg, Event):
        return " ".join(["ev", str(msg.time_us % U32), _check_name(msg.kind)] + format_fields(msg.fields))
    raise LocalProtocolError("bad_field", f"{type(msg).__name__} is not a message")


def as_dict(msg) -> dict:
    """Plain-data view of a message, as written in protocol/vectors (tests, tools)."""
    out: dict = {"type": type(msg).__name__}
    for f in fields(msg):
        value = getattr(msg, f.name)
        if f.name in ("fields", "args"):
            value = dict(value)
        elif f.name == "values" and isinstance(msg, (Set, Stage)):
            value = {k: v for k, v in value}
        elif isinstance(value, tuple):
            value = list(value)
        out[f.name] = value
    return out
