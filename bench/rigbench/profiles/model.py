"""Gain profiles: a gain set of one loop, or of several loops that run together (a cascade),
plus limits, in a YAML file people keep.

The schema is documented in profiles/README.md. ``load_profile`` reads a file strictly
(unknown keys and bad values raise ``SchemaError`` with file, line and field),
``save_profile`` writes one atomically, ``check_against_board`` compares a profile with what
a board declares (parameters, units, ranges, access, loops) before anything is sent,
``profile_from_board`` reads a board's current values into a profile, ``diff_profiles``
compares two profiles setting by setting. Values are in the board's declared units.
"""

from __future__ import annotations

import datetime as _dt
import math
import re
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Iterable, Mapping

from rigbench.base.atomic import write_text_atomic
from rigbench.wire.describe import LoopInfo, ParamInfo, format_value
from rigbench.wire.messages import NAME_RE, WORD_RE
from rigbench.base.yamlload import Cursor, MapCursor, SchemaError, load_yaml, load_yaml_text, near_hint

__all__ = ["PROFILE_VERSION", "SOURCES", "PREDICTED_KEYS", "Setting", "Provenance", "Profile",
           "Problem", "SchemaError", "load_profile", "load_profile_text",
           "dump_profile", "save_profile", "check_against_board", "profile_from_board",
           "read_values", "profile_from_proposal"]

PROFILE_VERSION = 2          # written when a profile holds several loops
READ_VERSIONS = (1, 2)       # format 1: one loop (``loop:``); 2 adds ``loops:``
SOURCES = ("rule", "design", "manual", "pulled", "sweep")
PREDICTED_KEYS = ("gain_margin_db", "gain_margin_lower_db", "phase_margin_deg",
                  "target_phase_margin_deg", "delay_margin_s", "ms", "crossover_rad_s")
_TOP_REQUIRED = ("profile", "name", "rig", "gains", "provenance")
_TOP_OPTIONAL = ("board", "limits", "notes", "demo")
# format 1 names its one loop with ``loop``; format 2 names every loop with ``loops``
_NAME, _WORD = NAME_RE.pattern, WORD_RE.pattern  # protocol tokens (PROTOCOL.md §3)
_METHOD = r"[a-z0-9][a-z0-9._-]{0,63}"


@dataclass(frozen=True)
class Setting:
    """One board parameter's value in the board's declared unit."""

    name: str
    value: float
    unit: str
    line: int | None = field(default=None, compare=False)


@dataclass(frozen=True)
class Provenance:
    """Where the numbers came from: ``source`` (one of SOURCES), ISO ``date``, and optionally
    ``method`` (rule or design id), ``experiment`` (a recording path), ``predicted`` margins
    (keys from PREDICTED_KEYS) and ``sweep`` metrics (name -> number)."""

    source: str
    date: str
    method: str | None = None
    experiment: str | None = None
    predicted: dict[str, float] = field(default_factory=dict)
    sweep: dict[str, float] = field(default_factory=dict)


@dataclass(frozen=True)
class Profile:
    """A gain set. ``loop`` is the loop the set was made for (the one tuned); ``loops`` every
    loop whose complete gain set it holds, ``loop`` first — several for a cascade such as a
    tilt loop with its wheel-speed trim loop, pushed together as one atomic ``set``."""

    name: str
    rig: str
    loop: str
    gains: dict[str, Setting]
    provenance: Provenance
    limits: dict[str, Setting] = field(default_factory=dict)
    board: str | None = None
    notes: str | None = None
    demo: bool = False
    path: str | None = field(default=None, compare=False)
    loops: tuple[str, ...] = ()

    def __post_init__(self):
        others = self.loops if len(self.loops) > 1 else ()  # replace(loop=...) of a
        loops = tuple(dict.fromkeys((self.loop, *others)))       # one-loop set renames it
        object.__setattr__(self, "loops", loops)

    @property
    def version(self) -> int:
        """The file format this profile needs: 1 for one loop, 2 for several."""
        return 1 if len(self.loops) == 1 else 2

    def settings(self) -> dict[str, Setting]:
        """Gains then limits, in file order: everything a push sends."""
        return {**self.gains, **self.limits}

    def values(self) -> dict[str, float]:
        return {n: s.value for n, s in self.settings().items()}

    def where(self, name: str) -> str:
        return f"{'gains' if name in self.gains else 'limits'}.{name}"


# --------------------------------------------------------------------------- reading


def load_profile(path: str | Path) -> Profile:
    """Read a profile file; any problem raises SchemaError (``FILE:LINE: field: message``)."""
    return _read(load_yaml(path), str(path))


def load_profile_text(text: str, path: str = "<text>") -> Profile:
    return _read(load_yaml_text(text, path), path)


def _read(root: Cursor, path: str) -> Profile:
    root.expect_mapping()
    version = 1
    if "profile" in root.value:  # check the format version before complaining about keys
        version_c = MapCursor(root)["profile"]
        version = version_c.integer(minimum=1)
        if version not in READ_VERSIONS:
            raise version_c.error(f"format version {version_c.value} is not one this "
                                  f"rigbench reads ({', '.join(map(str, READ_VERSIONS))})")
    loop_key = "loop" if version == 1 else "loops"
    m = root.mapping((*_TOP_REQUIRED, loop_key), _TOP_OPTIONAL)
    if version == 1:
        loops = (m["loop"].text(pattern=_NAME, what="a loop name"),)
    else:
        loops = _loop_list(m["loops"])
    gains = _settings(m["gains"], min_items=1)
    limits = _settings(m["limits"], min_items=0) if "limits" in m else {}
    for name, s in limits.items():
        if name in gains:
            raise m["limits"].error(f"{name!r} is also given under gains (line {gains[name].line})",
                                    line=s.line, field=f"limits.{name}")
    return Profile(
        name=m["name"].text(pattern=r"[^\n\r]{1,80}", what="one line of at most 80 characters"),
        rig=m["rig"].text(pattern=_WORD, what="a rig kind (letters, digits, - _ .)"),
        loop=loops[0],
        loops=loops,
        gains=gains,
        limits=limits,
        provenance=_provenance(m["provenance"]),
        board=m["board"].text(pattern=_WORD, what="a board id") if "board" in m else None,
        notes=m["notes"].text(max_len=20000) if "notes" in m else None,
        demo=m["demo"].boolean() if "demo" in m else False,
        path=path,
    )


def _loop_list(cur: Cursor) -> tuple[str, ...]:
    """``loops: [tilt, trim]``: one or more distinct loop names, the tuned loop first."""
    if not isinstance(cur.value, list) or not cur.value:
        raise cur.error("expected a list of one or more loop names, e.g. [tilt, trim]")
    names = [c.text(pattern=_NAME, what="a loop name") for c in cur.items(min_items=1)]
    if len(set(names)) != len(names):
        raise cur.error(f"a loop is named twice in {names}")
    return tuple(names)


def _settings(cur: Cursor, *, min_items: int) -> dict[str, Setting]:
    entries = cur.entries()
    if len(entries) < min_items:
        raise cur.error(f"needs at least {min_items} parameter(s)")
    out = {}
    for name, c in entries:
        if not NAME_RE.match(name):
            raise c.error(f"{name!r} is not a parameter name (lower case, digits, _; "
                          "at most 32 characters)", line=cur.key_line(name))
        m = c.mapping(("value", "unit"))
        unit_c = m["unit"]
        if isinstance(unit_c.value, int) and not isinstance(unit_c.value, bool):
            unit_c.value = str(unit_c.value)  # `unit: 1` (dimensionless) reads as text
        unit = unit_c.text(pattern=_WORD, what="a unit word such as deg, rev/s/deg or 1")
        out[name] = Setting(name, m["value"].number(), unit, line=c.line)
    return out


def _provenance(cur: Cursor) -> Provenance:
    m = cur.mapping(("source", "date"), ("method", "experiment", "predicted", "sweep"))
    date_c = m["date"]
    date = date_c.text()
    try:
        (_dt.datetime if "T" in date or " " in date else _dt.date).fromisoformat(date)
    except ValueError:
        raise date_c.error(f"{date!r} is not an ISO date (2025-03-14) or date-time") from None
    predicted = {}
    if "predicted" in m:
        pm = m["predicted"].mapping(optional=PREDICTED_KEYS)
        predicted = {k: pm[k].number() for k in m["predicted"].value}
    sweep = {}
    if "sweep" in m:
        for name, c in m["sweep"].entries():
            if not NAME_RE.match(name):
                raise c.error(f"{name!r} is not a metric name", line=m["sweep"].key_line(name))
            sweep[name] = c.number()
    return Provenance(
        source=m["source"].choice(SOURCES), date=date,
        method=m["method"].text(pattern=_METHOD, what="a rule or design id such as "
                                "amigo-pid") if "method" in m else None,
        experiment=m["experiment"].text(max_len=500) if "experiment" in m else None,
        predicted=predicted, sweep=sweep)


# --------------------------------------------------------------------------- writing


def _scalar(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(float(value)) if isinstance(value, float) else str(value)
    text = str(value)
    if re.fullmatch(r"[A-Za-z0-9_][A-Za-z0-9_./+^-]*( [A-Za-z0-9_./+^()-]+)*", text):
        try:
            if load_yaml_text(f"k: {text}\n").value["k"] == text:
                return text
        except SchemaError:
            pass
    return _quote(text)


def _quote(text: str) -> str:
    """A YAML double-quoted scalar; anything not printable is written as an escape."""
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ch.isprintable():
            out.append(ch)
        else:
            code = ord(ch)
            out.append(f"\\x{code:02x}" if code < 0x100 else
                       f"\\u{code:04x}" if code < 0x10000 else f"\\U{code:08x}")
    return '"' + "".join(out) + '"'


def _block(text: str, indent: str = "  ") -> str:
    """A literal block when the text reads back exactly; otherwise a quoted string."""
    lines = text.split("\n")
    body = lines[:-1] if text.endswith("\n") else lines
    ok = (text.strip() and not text.endswith("\n\n") and not body[0][:1].isspace()
          and all(ln.isprintable() and ln == ln.rstrip() for ln in body))
    if not ok:
        return " " + _quote(text)
    chomp = "" if text.endswith("\n") else "-"
    return f" |{chomp}\n" + "\n".join(indent + ln if ln else "" for ln in body)


def dump_profile(profile: Profile) -> str:
    """The YAML text of a profile (checked by reading it back before it is returned)."""
    p, pv = profile, profile.provenance
    out = [f"# rigbench gain profile, format {p.version} (schema: profiles/README.md)",
           f"profile: {p.version}", f"name: {_scalar(p.name)}", f"rig: {_scalar(p.rig)}"]
    if p.board is not None:
        out.append(f"board: {_scalar(p.board)}")
    if p.version == 1:
        out.append(f"loop: {_scalar(p.loop)}")
    else:
        out.append(f"loops: [{', '.join(_scalar(n) for n in p.loops)}]")
    if p.demo:
        out.append("demo: true")
    for section, items in (("gains", p.gains), ("limits", p.limits)):
        if items or section == "gains":
            out.append(f"{section}:")
            out += [f"  {n}: {{value: {_scalar(s.value)}, unit: {_scalar(s.unit)}}}"
                    for n, s in items.items()]
    out += ["provenance:", f"  source: {_scalar(pv.source)}", f"  date: {_scalar(pv.date)}"]
    for key in ("method", "experiment"):
        if getattr(pv, key) is not None:
            out.append(f"  {key}: {_scalar(getattr(pv, key))}")
    for key in ("predicted", "sweep"):
        if getattr(pv, key):
            out.append(f"  {key}:")
            out += [f"    {k}: {_scalar(v)}" for k, v in getattr(pv, key).items()]
    if p.notes is not None:
        out.append("notes:" + _block(p.notes))
    text = "\n".join(out) + "\n"
    back = load_profile_text(text, p.path or "<profile>")
    if back != replace(profile, path=back.path):
        raise ValueError("profile does not survive writing and reading back")  # a bug here
    return text


def save_profile(profile: Profile, path: str | Path) -> Path:
    """Write ``profile`` to ``path`` atomically (the old file stays whole if anything fails)."""
    return write_text_atomic(path, dump_profile(profile))


# --------------------------------------------------------------------------- the board


@dataclass(frozen=True)
class Problem:
    """Something in a profile that does not fit the board; ``severity`` error or warning."""

    field: str
    message: str
    line: int | None = None
    severity: str = "error"

    def format(self, path: str | None = None) -> str:
        where = f"{path}:{self.line}: " if path and self.line else (f"{path}: " if path else "")
        return f"{where}{self.field}: {self.message}"


def check_against_board(profile: Profile, params: Mapping[str, ParamInfo],
                        loops: Mapping[str, LoopInfo], *, info=None) -> list[Problem]:
    """Everything in ``profile`` the board would refuse or that does not match it.

    ``info`` (a BoardInfo), when given, is checked for the rig kind (error) and board id
    (warning). Nothing is sent; this runs before any ``set``.
    """
    out: list[Problem] = []
    if info is not None:
        if info.rig != profile.rig:
            out.append(Problem("rig", f"profile is for a {profile.rig!r} rig; the board is a "
                                      f"{info.rig!r} rig"))
        if profile.board is not None and info.board != profile.board:
            out.append(Problem("board", f"profile was made on board {profile.board!r}; this is "
                                        f"{info.board!r}", severity="warning"))
    for name in profile.loops:
        loop = loops.get(name)
        where = "loop" if len(profile.loops) == 1 else "loops"
        if loop is None:
            out.append(Problem(where, f"the board has no loop {name!r}; it has: "
                                      f"{', '.join(loops) or 'none'}"))
            continue
        missing = [g for g in loop.gains if g not in profile.gains]
        if missing:
            out.append(Problem("gains", f"loop {loop.name!r} has gains "
                                        f"{', '.join(loop.gains)}; the profile lacks "
                                        f"{', '.join(missing)}"))
    for name, s in profile.settings().items():
        out += param_problems(params, name, [s.value], profile.where(name), s.line, unit=s.unit)
    return out


def param_problems(params: Mapping[str, ParamInfo], name: str, values, where: str,
                   line: int | None = None, *, unit: str | None = None,
                   named: bool = False) -> list[Problem]:
    """What stops writing ``values`` to board parameter ``name``: unknown to the board (with
    a near name), another ``unit`` than the board's (when given), read-only, outside the
    board's range. ``named``: the messages name the parameter (for a ``where`` that does
    not)."""
    p = params.get(name)
    if p is None:
        return [Problem(where, f"the board has no parameter {name!r}{near_hint(name, params)}",
                        line)]
    out = []
    if unit is not None and unit != p.unit:
        out.append(Problem(where, f"unit {unit!r} differs from the board's {p.unit!r}", line))
    if not p.writable:
        out.append(Problem(where, f"{name if named else 'the parameter'} is read-only on this "
                                  "board", line))
    for v in values:
        if not p.admits(v):
            shown = f"{name} = {format_value(v)}" if named else format_value(v)
            out.append(Problem(where, f"{shown} is outside the board's range "
                                      f"{format_value(p.minimum)}..{format_value(p.maximum)} "
                                      f"{p.unit}", line))
    return out


def read_values(link, names: Iterable[str]) -> dict[str, float]:
    """Current values of ``names`` from ``link.get`` as floats; a missing one is an error."""
    names = list(names)
    got = link.get(*names) if names else {}
    missing = [n for n in names if not isinstance(got.get(n), (int, float))]
    if missing:
        raise ValueError(f"the board did not give a number for {', '.join(missing)}")
    return {n: float(got[n]) for n in names}


def profile_from_board(link, loop: str, *, also: Iterable[str] = (), name: str | None = None,
                       extra: Iterable[str] = (),
                       limits: Iterable[str] | None = None,
                       limit_prefixes: tuple[str, ...] = ("trip_", "arm_"),
                       source: str = "pulled", date: str | None = None,
                       notes: str | None = None) -> Profile:
    """The board's current values of ``loop``'s gains (plus ``extra`` parameters) as a profile.

    ``also`` names more loops whose gains go into the same set (a cascade: format 2).
    Limits are ``limits`` when given, else the writable parameters whose names start with
    ``limit_prefixes`` (the protocol gives ``trip_`` and ``arm_`` their meaning, §5.2).
    """
    loops, params, info = link.loops, link.params, link.info
    names = tuple(dict.fromkeys((loop, *also)))
    for n in names:
        if n not in loops:
            raise ValueError(f"the board has no loop {n!r}; it has: "
                             f"{', '.join(loops) or 'none'}")
    gain_names = list(dict.fromkeys([*(g for n in names for g in loops[n].gains), *extra]))
    if limits is None:
        limit_names = [n for n, p in params.items() if p.writable and n not in gain_names
                       and n.startswith(tuple(limit_prefixes))]
    else:
        limit_names = [n for n in dict.fromkeys(limits) if n not in gain_names]
    unknown = [n for n in gain_names + limit_names if n not in params]
    if unknown:
        raise ValueError(f"the board has no parameter {', '.join(unknown)}")
    values = read_values(link, gain_names + limit_names)

    def setting(n):
        return Setting(n, values[n], params[n].unit)

    return Profile(
        name=name or f"{'+'.join(names)} gains read from {info.board}", rig=info.rig,
        board=info.board, loop=loop, loops=names, gains={n: setting(n) for n in gain_names},
        limits={n: setting(n) for n in limit_names},
        provenance=Provenance(source=source,
                              date=date or _dt.date.today().isoformat()),
        notes=notes if notes is not None else
        f"Read from board {info.board} (firmware {info.firmware}).")


def profile_from_proposal(link, proposal, *, loop: str, name: str | None = None,
                          experiment: str | None = None, date: str | None = None,
                          notes: str | None = None) -> Profile:
    """A gain proposal (``rule``, ``gains``, ``margins``, ``details``, ``source`` — the
    autotune result's proposals) as a profile for ``link``'s board, ready to push.

    The set is complete: every loop whose gains the proposal sets is in it (``loop`` first)
    with all of that loop's gains, the ones the proposal leaves alone at the board's current
    values — so a design that retunes the wheel-speed trim loop with the tilt loop is one
    atomic set (format 2). The predicted margins go into the provenance."""
    loops, params, info = link.loops, link.params, link.info
    if loop not in loops:
        raise ValueError(f"the board has no loop {loop!r}")
    gains = {str(k): float(v) for k, v in proposal.gains.items()}
    unknown = [n for n in gains if n not in params]
    if unknown:
        raise ValueError(f"the proposal sets {', '.join(unknown)}, which the board does not have")
    touched = [loop] + [n for n, lp in loops.items() if n != loop and set(lp.gains) & set(gains)]
    names = list(dict.fromkeys(g for n in touched for g in loops[n].gains))
    missing = [g for g in names if g not in gains]
    current = read_values(link, missing) if missing else {}
    extra = [g for g in gains if g not in names]      # e.g. a derivative filter time
    m = getattr(proposal, "margins", None)
    predicted = {}
    if m is not None and getattr(m, "stable", False):
        for key, value in (("gain_margin_db", m.gain_margin_upper_db),
                           ("gain_margin_lower_db", m.gain_margin_lower_db),
                           ("phase_margin_deg", m.phase_margin_deg),
                           ("delay_margin_s", m.delay_margin_s), ("ms", m.ms),
                           ("crossover_rad_s", m.crossover_rad_s)):
            if value is not None and math.isfinite(value):
                predicted[key] = float(value)
    target = (getattr(proposal, "details", None) or {}).get("target_margin_deg")
    if target is not None:
        predicted["target_phase_margin_deg"] = float(target)
    # model-based designs (pole placement, LQR) are "design"; published rules are "rule"
    source = "design" if proposal.rule.startswith(("pole-placement", "lqr")) else "rule"
    return Profile(
        name=name or f"{proposal.rule} on {'+'.join(touched)}",
        rig=info.rig, board=info.board, loop=loop, loops=tuple(touched),
        gains={n: Setting(n, gains.get(n, current.get(n)), params[n].unit)
               for n in names + extra},
        provenance=Provenance(source=source, date=date or _dt.date.today().isoformat(),
                              method=proposal.rule, experiment=experiment,
                              predicted=predicted),
        notes=notes)
