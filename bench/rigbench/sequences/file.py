"""Scripted test sequences: the YAML file format, its strict reading, and unrolling of repeats.

A sequence is data, never code: a fixed vocabulary of steps (``STEP_KINDS``, documented in
sequences/README.md), guards, and loops over parameter values. ``load_sequence`` reads and
checks a whole file (and every profile it pushes) before anything runs; every problem is a
``SchemaError`` naming the file, the line and the step (``steps[3].relay.amplitude``; list
positions count from 1). The step types and ``expand`` (repeats unrolled, for dry runs and
the runner) are in rigbench.sequences.steps and re-exported here. The runner lives elsewhere.

Paths (``push``) are relative to the project folder, which is the sequence's folder, or its
parent when that folder is named ``sequences`` (the layout ``profiles/``, ``sequences/``,
``results/``). No absolute paths, no ``..``, nothing that resolves (through symlinks) outside
the project folder. Recording names are plain file names inside the results folder.

``port:`` names only a serial device (``/dev/...``, ``COMn``) or a ``sim://`` URL without
``state=`` (a simulated board's storage file could be anywhere); any other URL (a network
socket, a replayed file) is refused. ``rigbench run --port`` is not limited: that is the
user's own choice, not the file's.
"""

from __future__ import annotations

import re
from dataclasses import replace
from pathlib import Path, PurePosixPath

from rigbench.profiles.model import load_profile
from rigbench.rig.url import parse_sim_url
from rigbench.sequences.steps import *  # noqa: F401,F403  (the step types are this module's API)
from rigbench.sequences.steps import (
    GUARD_KEYS, MAX_STEPS, METRICS, OPS, ArmStep, CheckStep, ClearStep, DisarmStep, Guards,
    HoldStep, PushStep, RecordStep, RelayStep, RepeatStep, Sequence, Settled, SetStep, Step, SweepStep,
    WaitStep, count_steps, expand,
)
from rigbench.wire.messages import NAME_RE
from rigbench.base.yamlload import Cursor, MapCursor, SchemaError, load_yaml, load_yaml_text, near_hint

__all__ = ["SEQUENCE_VERSION", "STEP_KINDS", "MAX_NESTING", "DEFAULT_STALE_S", "SchemaError",
           "load_sequence", "load_sequence_text", "project_folder", "expand", "Sequence"]

SEQUENCE_VERSION = 1
MAX_NESTING = 3  # repeats inside repeats
DEFAULT_STALE_S = 0.5

_OPTIONS = ("timeout_s", "guards")
_RECORD_NAME = r"[A-Za-z0-9][A-Za-z0-9_.{}-]{0,63}"
_CHECK_TEXT = re.compile(r"\s*([a-z_.]+)\s*(<=|>=|<|>)\s*(\S+)\s*\Z")
_NUMBER = re.compile(r"-?[0-9]+(\.[0-9]*)?([eE][-+]?[0-9]+)?\Z")
_DEVICE_PATH = r"/dev/[A-Za-z0-9_.:+,=-]+(/[A-Za-z0-9_.:+,=-]+)*"
# serial devices only: not /dev/tty (the terminal), /dev/fd/0, /dev/zero, consoles …
_SERIAL_DEVICE = (r"/dev/(tty[A-Za-z][A-Za-z0-9_.:+,=-]*|cu\.[A-Za-z0-9_.:+,=-]+|pts/[0-9]+"
                  r"|serial/by-(id|path)/[A-Za-z0-9_.:+,=-]+|rfcomm[0-9]+)")
_SPECIAL_TTYS = ("/dev/tty", "/dev/ttyprintk")
# every time in a sequence (seconds): 1 ms to one day
TIME_RANGE_S = (1e-3, 86400.0)
# every other number (amplitudes, bounds, parameter values, check values): finite, and
# no larger than any value a float32 board parameter holds meaningfully
VALUE_MAX = 1e12
_COM_PORT = r"COM[1-9][0-9]{0,2}"


# --------------------------------------------------------------------------- reading


def project_folder(sequence_path: str | Path) -> Path:
    """The folder a sequence's paths are relative to (see the module docstring)."""
    folder = Path(sequence_path).absolute().parent
    return folder.parent if folder.name == "sequences" else folder


def load_sequence(path: str | Path, *, project: str | Path | None = None) -> Sequence:
    """Read and check a sequence file and every profile it pushes; raise SchemaError."""
    return _Reader(Path(path), project).read(load_yaml(path))


def load_sequence_text(text: str, path: str | Path, *,
                       project: str | Path | None = None) -> Sequence:
    """As load_sequence, from text; ``path`` locates the project folder and names errors."""
    return _Reader(Path(path), project).read(load_yaml_text(text, path))


class _Reader:
    def __init__(self, path: Path, project) -> None:
        self.path = path
        self.project = Path(project).absolute() if project is not None else project_folder(path)

    def read(self, root: Cursor) -> Sequence:
        root.expect_mapping()
        if "sequence" in root.value:
            version_c = MapCursor(root)["sequence"]
            if version_c.integer(minimum=1) != SEQUENCE_VERSION:
                raise version_c.error(f"format version {version_c.value} is not one this "
                                      f"rigbench reads ({SEQUENCE_VERSION})")
        m = root.mapping(("sequence", "name", "guards", "steps"),
                         ("port", "rig", "on_abort", "notes", "demo"))
        guards = self.guards(m["guards"])
        if guards.stale_s is None:
            guards = replace(guards, stale_s=DEFAULT_STALE_S)
        steps = self.steps(m["steps"], prefix="", params=())
        seq = Sequence(
            name=m["name"].text(pattern=r"[^\n\r]{1,80}", what="one line of at most 80 characters"),
            path=self.path, project=self.project, guards=guards,
            on_abort=m["on_abort"].choice(("kill", "disarm")) if "on_abort" in m else "kill",
            steps=steps, port=self.port(m["port"]) if "port" in m else None,
            rig=m["rig"].text(max_len=48) if "rig" in m else None,
            notes=m["notes"].text(max_len=20000) if "notes" in m else None,
            demo=m["demo"].boolean() if "demo" in m else False)
        self.check_expanded(seq, m["steps"])
        return seq

    def port(self, cur: Cursor) -> str:
        """A serial device or a ``sim://`` URL that writes no file (see the module docstring)."""
        text = cur.text(max_len=300)
        if text.startswith("/dev/"):
            if not re.fullmatch(_DEVICE_PATH, text) or ".." in text.split("/") \
                    or "://" in text:
                raise cur.error(f"{text!r} is not a device path (/dev/ then names of letters, "
                                f"digits and - _ . : + , =)")
            if not re.fullmatch(_SERIAL_DEVICE, text) or text in _SPECIAL_TTYS:
                raise cur.error(f"{text!r} is not a serial device (/dev/ttyUSB0, /dev/ttyACM0,"
                                " /dev/ttyS0, /dev/cu.*, /dev/pts/N, /dev/serial/by-id/...)")
            return text
        if re.fullmatch(_COM_PORT, text):
            return text
        if text.startswith("sim://"):
            try:
                options = parse_sim_url(text)
            except ValueError as exc:
                raise cur.error(str(exc)) from None
            if options.state_path is not None:
                raise cur.error("sim:// state= makes the simulated board write its storage "
                                "file wherever state= points, and a sequence writes only inside "
                                "its results folder: leave state= out, or give the port with "
                                "rigbench run --port")
            return text
        raise cur.error(f"{text!r} is not a port a sequence may name: give a serial device "
                        f"(/dev/..., COMn) or a sim:// URL; other URLs (network sockets, "
                        f"replays) only with rigbench run --port")

    def guards(self, cur: Cursor) -> Guards:
        m = cur.mapping(optional=GUARD_KEYS)
        return Guards(
            tilt_deg=m["tilt_deg"].number(above=0, maximum=180) if "tilt_deg" in m else None,
            wheel_fraction=(m["wheel_fraction"].number(above=0, maximum=1)
                            if "wheel_fraction" in m else None),
            stale_s=m["stale_s"].number(minimum=0.01, maximum=60) if "stale_s" in m else None)

    def steps(self, cur: Cursor, *, prefix: str, params: tuple[str, ...]) -> tuple[Step, ...]:
        items = cur.items(min_items=1)
        if len(items) > 1000:
            raise cur.error("more than 1000 steps")
        return tuple(self.step(c, f"{prefix}{i}", params) for i, c in enumerate(items, 1))

    def step(self, cur: Cursor, index: str, params: tuple[str, ...]) -> Step:
        kinds = ", ".join(STEP_KINDS)
        if isinstance(cur.value, str):
            kind, body = cur.value, Cursor(None, cur.path, f"{cur.field}.{cur.value}", cur.line)
        elif isinstance(cur.value, dict) and len(cur.value) == 1:
            kind = next(iter(cur.value))
            body = MapCursor(cur)[kind]
        elif isinstance(cur.value, dict) and cur.value:
            raise cur.error(f"a step is one kind with its fields indented under it; found keys "
                            f"{', '.join(cur.value)}")
        else:
            raise cur.error(f"expected a step (one of {kinds})")
        if kind not in STEP_KINDS:
            raise cur.error(f"unknown step kind {kind!r}{near_hint(kind, STEP_KINDS)}; "
                            f"allowed: {kinds}")
        reader, shorthand, required, optional = STEP_KINDS[kind]
        if body.value is None and not required:
            body = body.as_mapping({})
        elif shorthand and body.value is not None and not isinstance(body.value, dict):
            body = body.as_mapping({shorthand: body.value})
        elif body.value is None:
            raise body.error(f"{kind} needs its fields: {', '.join(required or ('name: value',))}")
        if required is None:  # free keys (parameter names) besides the options
            body.expect_mapping()
            m = MapCursor(body)
        else:
            m = body.mapping(required, optional + _OPTIONS)
        common = dict(index=index, line=cur.line, where=f"{cur.field}.{kind}",
                      timeout_s=_seconds(m["timeout_s"]) if "timeout_s" in m else None,
                      guards=self.guards(m["guards"]) if "guards" in m else None)
        return reader(self, m, common, params)

    # -- one reader per kind: (self, MapCursor, common fields, repeat params in force)

    def push(self, m, common, params):
        path = self.inside(m["profile"])
        try:
            profile = load_profile(path)
        except SchemaError as exc:
            raise m["profile"].error(f"bad profile: {exc}") from None
        return PushStep(path=path, profile=profile,
                        persist=m["persist"].boolean() if "persist" in m else False, **common)

    def inside(self, cur: Cursor) -> Path:
        """A path relative to the project folder that stays inside it and names a file."""
        text = cur.text(max_len=300)
        pure = PurePosixPath(text)
        if not text.isprintable():
            raise cur.error(f"{text!r} contains control characters")
        if "\\" in text or re.match(r"[A-Za-z]:", text) or text.startswith("~"):
            raise cur.error(f"{text!r}: write paths with / relative to the project folder")
        if pure.is_absolute():
            raise cur.error(f"{text!r} is absolute; paths are relative to the project folder "
                            f"{self.project}")
        if ".." in pure.parts:
            raise cur.error(f"{text!r} steps out with '..'; paths stay inside the project "
                            f"folder {self.project}")
        full = self.project / pure
        try:
            real = full.resolve(strict=True)
        except (OSError, RuntimeError, ValueError):
            raise cur.error(f"{text!r} does not exist in the project folder {self.project}") \
                from None
        if not real.is_relative_to(self.project.resolve()):
            raise cur.error(f"{text!r} leads outside the project folder (through a link to "
                            f"{real})")
        if not real.is_file():
            raise cur.error(f"{text!r} is not a file")
        return full

    def wait(self, m, common, params):
        if ("seconds" in m) == ("settled" in m):
            raise m.cursor.error("give either seconds or settled (not both)")
        if "seconds" in m:
            return WaitStep(seconds=_seconds(m["seconds"]), **common)
        if common["timeout_s"] is None:
            raise m.cursor.error("a wait until settled needs timeout_s")
        s = m["settled"].mapping(("signal", "below", "for_s"))
        return WaitStep(settled=Settled(_name(s["signal"], "a signal name"),
                                        _value(s["below"], above=0), _seconds(s["for_s"])),
                        **common)

    def relay(self, m, common, params):
        return RelayStep(
            loop=_name(m["loop"], "a loop name"), amplitude=_value(m["amplitude"], above=0),
            hysteresis=_value(m["hysteresis"], minimum=0), bound=_value(m["bound"], above=0),
            max_s=_seconds(m["max_s"]),
            bias=_value(m["bias"]) if "bias" in m else 0.0,
            cycles=m["cycles"].integer(minimum=2, maximum=1000) if "cycles" in m else 6,
            **common)

    def sweep(self, m, common, params):
        amps = []
        for c in m["amplitudes"].items(min_items=1):
            amp = _value(c)
            if amp == 0:
                raise c.error("an amplitude of 0 pushes nothing")
            amps.append(amp)
        time_s = _seconds(m["time_s"])
        spacing = m["spacing_s"]
        if _seconds(spacing) < time_s:
            raise spacing.error(f"spacing_s {spacing.value:g} is shorter than time_s {time_s:g}")
        return SweepStep(
            loop=_name(m["loop"], "a loop name"), shape=m["shape"].choice(("pulse", "step")),
            at=m["at"].choice(("setpoint", "output", "body")), amplitudes=tuple(amps),
            repeats=m["repeats"].integer(minimum=1, maximum=1000),
            spacing_s=spacing.number(), time_s=time_s, **common)

    def record(self, m, common, params):
        name_c = m["name"]
        name = name_c.text(pattern=_RECORD_NAME, what="a plain file name (letters, digits, "
                           "- _ . and {param} placeholders)")
        for ref in re.findall(r"\{([^}]*)\}", name):
            if ref not in params:
                raise name_c.error(f"{{{ref}}} names no repeat parameter in force here"
                                   + (f" ({', '.join(params)})" if params else ""))
        if re.sub(r"\{[^}]*\}", "", name).count("{") or "}" in re.sub(r"\{[^}]*\}", "", name):
            raise name_c.error("unbalanced { } in the name")
        return RecordStep(seconds=_seconds(m["seconds"]), name=name, **common)

    def set(self, m, common, params):
        values = {}
        loosen = False
        for name, c in m.cursor.entries():
            if name in _OPTIONS:
                continue
            if name == "loosen_limits":
                loosen = c.boolean()
                continue
            if not NAME_RE.match(name):
                raise c.error(f"{name!r} is not a parameter name", line=m.cursor.key_line(name))
            values[name] = _value(c)
        if not values:
            raise m.cursor.error("set needs at least one parameter: value")
        return SetStep(values=values, loosen_limits=loosen, **common)

    def check(self, m, common, params):
        if "text" in m and ("metric" in m or "op" in m or "value" in m):
            raise m.cursor.error("give either the short form or metric, op and value")
        if "text" in m:
            cur = m["text"]
            match = _CHECK_TEXT.match(cur.value) if isinstance(cur.value, str) else None
            if not match:
                raise cur.error("expected 'METRIC OP NUMBER', e.g. relay.period_s < 0.5")
            metric, op, number = match.groups()
            if not _NUMBER.match(number):
                raise cur.error(f"{number!r} is not a number")
            value = _value(Cursor(float(number), cur.path, cur.field, cur.line))
        else:
            for key in ("metric", "op", "value"):
                m[key]  # noqa: B018 (raises naming the missing key)
            metric = m["metric"].text()
            op = m["op"].choice(OPS)
            value = _value(m["value"])
            cur = m["metric"]
        if metric not in METRICS:
            raise cur.error(f"unknown metric {metric!r}; known: {', '.join(METRICS)}")
        return CheckStep(metric=metric, op=op, value=value, **common)

    def repeat(self, m, common, params):
        f = m["for"].mapping(("param", "values"))
        param = _name(f["param"], "a parameter name")
        if param in params:
            raise f["param"].error(f"{param!r} is already the parameter of an enclosing repeat")
        if len(params) >= MAX_NESTING:
            raise m.cursor.error(f"repeats nest at most {MAX_NESTING} deep")
        values = tuple(_value(c) for c in f["values"].items(min_items=1))
        steps = self.steps(m["steps"], prefix=f"{common['index']}.", params=params + (param,))
        return RepeatStep(param=param, values=values, steps=steps, **common)

    def check_expanded(self, seq: Sequence, steps_cur: Cursor) -> None:
        if count_steps(seq.steps) > MAX_STEPS:
            raise steps_cur.error(f"more than {MAX_STEPS} steps once repeats are unrolled")
        seen: dict[str, Step] = {}
        for step in expand(seq):
            if isinstance(step, RecordStep):
                if step.name in seen:
                    first = seen[step.name]
                    raise SchemaError(str(self.path), step.line, f"{step.where}.name",
                                      f"recording name {step.name!r} is used twice ({first.label()}"
                                      f" and {step.label()}); inside a repeat put {{param}} in it")
                seen[step.name] = step


def _seconds(cur: Cursor) -> float:
    """A time in seconds within TIME_RANGE_S."""
    return cur.number(minimum=TIME_RANGE_S[0], maximum=TIME_RANGE_S[1])


def _value(cur: Cursor, **bounds) -> float:
    """A finite number no larger than VALUE_MAX in size (and within ``bounds``)."""
    v = cur.number(**bounds)
    if abs(v) > VALUE_MAX:
        raise cur.error(f"{v:g} is larger than {VALUE_MAX:g} in size")
    return v


def _name(cur: Cursor, what: str) -> str:
    return cur.text(pattern=NAME_RE.pattern, what=what)


STEP_KINDS = {
    # kind: (reader, shorthand field, required fields, optional fields)
    "push": (_Reader.push, "profile", ("profile",), ("persist",)),
    "arm": (lambda r, m, c, p: ArmStep(**c), None, (), ()),
    "hold": (lambda r, m, c, p: HoldStep(**c), None, (), ()),
    "wait": (_Reader.wait, "seconds", (), ("seconds", "settled")),
    "relay": (_Reader.relay, None, ("loop", "amplitude", "hysteresis", "bound", "max_s"),
              ("bias", "cycles")),
    "sweep": (_Reader.sweep, None,
              ("loop", "shape", "at", "amplitudes", "repeats", "spacing_s", "time_s"), ()),
    "record": (_Reader.record, None, ("seconds", "name"), ()),
    "set": (_Reader.set, None, None, ()),
    "check": (_Reader.check, "text", (), ("metric", "op", "value", "text")),
    "disarm": (lambda r, m, c, p: DisarmStep(**c), None, (), ()),
    "clear": (lambda r, m, c, p: ClearStep(**c), None, (), ()),
    "repeat": (_Reader.repeat, None, ("for", "steps"), ()),
}


