"""``sim://`` URLs: parse into ``SimOptions`` and format back (README.md, Simulated rigs).

    sim://balance[?drive=speed|torque]
    sim://wheel
    sim://plant?num=1&den=1,3,3,1[&delay=0.5][&plant=stable|integrating|unstable]

Common options: ``seed`` (whole number ≥ 0, default 0), ``noise`` (scale of sensor noise,
≥ 0, default 1), ``rate`` (loop Hz, 10..10000, default 500), ``clock=real|virtual``
(default real), ``state=PATH`` (file of the board's non-volatile storage).
``plant`` (sim://plant only) is what the board declares for its loop (PROTOCOL.md §5.4);
by default it follows the denominator's roots: a root in the right half-plane makes it
``unstable`` (relay on the integral channel), else a root at 0 ``integrating``, else
``stable``.
Faults: ``corrupt=P`` and ``drop=P`` (probability per byte, 0..1, both directions),
``stall=AFTER:FOR`` (seconds: the board stops stepping and sending for FOR s),
``reset=AFTER`` (the board reboots), ``unplug=AFTER`` (the port goes away), ``dropkill=1``
(the line loses every kill byte 0x18 the host sends, and nothing else: for testing that a
kill the board never confirms is escalated). Times are simulated seconds since the port was
opened.

Every option may appear once; unknown options, options of another rig and bad values
raise ValueError naming the option. Pure function, no I/O: fuzzed in the tests.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from urllib.parse import parse_qsl, quote, urlsplit

__all__ = ["SimOptions", "parse_sim_url", "format_sim_url"]

_COMMON = ("seed", "noise", "rate", "clock", "state", "corrupt", "drop", "stall", "reset",
           "unplug", "dropkill")
_BY_RIG = {"balance": ("drive",), "wheel": (), "plant": ("num", "den", "delay", "plant")}
_SEED_RE = re.compile(r"[0-9]{1,19}")


@dataclass(frozen=True)
class SimOptions:
    """What a ``sim://`` URL asks for; defaults are the URL's defaults."""

    rig: str = "balance"
    drive: str = "speed"
    num: tuple[float, ...] = (1.0,)
    den: tuple[float, ...] = (1.0, 1.0)
    delay_s: float = 0.0
    plant_kind: str | None = None   # sim://plant: declared plant kind; None = from den
    seed: int = 0
    noise: float = 1.0
    rate_hz: float = 500.0
    clock: str = "real"
    state_path: str | None = None
    corrupt: float = 0.0
    drop: float = 0.0
    stall_after_s: float | None = None
    stall_for_s: float = 0.0
    reset_after_s: float | None = None
    unplug_after_s: float | None = None
    drop_kill: bool = False


_NUMBER_RE = re.compile(r"[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?\Z")


def _number(option: str, text: str, lo: float = -math.inf, hi: float = math.inf) -> float:
    """A plain decimal number (not ``1_0``, ``nan`` or ``inf``, which float() would take)."""
    if not _NUMBER_RE.match(text):
        raise ValueError(f"sim:// option {option}={text!r} is not a number")
    value = float(text)
    if not math.isfinite(value) or not lo <= value <= hi:
        raise ValueError(f"sim:// option {option}={text!r} must lie in {lo:g}..{hi:g}")
    return value


def _coefficients(option: str, text: str) -> tuple[float, ...]:
    parts = text.split(",")
    if not text or any(p.strip() == "" for p in parts):
        raise ValueError(f"sim:// option {option}={text!r}: give comma-separated numbers")
    values = tuple(_number(option, p.strip()) for p in parts)
    if values[0] == 0.0:
        raise ValueError(f"sim:// option {option}={text!r}: the leading coefficient is 0")
    return values


def parse_sim_url(url: str) -> SimOptions:
    """``SimOptions`` of a ``sim://`` URL. Raises ValueError naming the bad part."""
    if not isinstance(url, str):
        raise ValueError(f"a sim:// URL must be a string, got {type(url).__name__}")
    parts = urlsplit(url)
    if parts.scheme != "sim":
        raise ValueError(f"{url!r} is not a sim:// URL")
    rig = parts.netloc
    if rig not in _BY_RIG:
        raise ValueError(f"sim:// rig {rig!r} is unknown; use one of {', '.join(_BY_RIG)}")
    if parts.path not in ("", "/") or parts.fragment:
        raise ValueError(f"sim://{rig}: unexpected {parts.path or '#' + parts.fragment!r}")
    try:
        pairs = parse_qsl(parts.query, keep_blank_values=True, strict_parsing=bool(parts.query))
    except ValueError:
        raise ValueError(f"sim://{rig}: options must be key=value joined by '&'") from None
    allowed = _COMMON + _BY_RIG[rig]
    seen: dict[str, str] = {}
    for key, value in pairs:
        if key not in allowed:
            other = [r for r, keys in _BY_RIG.items() if key in keys]
            where = f" (an option of sim://{other[0]})" if other else ""
            raise ValueError(f"sim://{rig}: unknown option {key!r}{where}")
        if key in seen:
            raise ValueError(f"sim://{rig}: option {key} given twice")
        seen[key] = value
    kw: dict = {"rig": rig}
    for key, text in seen.items():
        if key == "drive":
            if text not in ("speed", "torque"):
                raise ValueError(f"sim:// option drive={text!r} must be speed or torque")
            kw["drive"] = text
        elif key == "clock":
            if text not in ("real", "virtual"):
                raise ValueError(f"sim:// option clock={text!r} must be real or virtual")
            kw["clock"] = text
        elif key == "state":
            if not text:
                raise ValueError("sim:// option state= needs a file path")
            kw["state_path"] = text
        elif key in ("num", "den"):
            kw[key] = _coefficients(key, text)
        elif key == "plant":
            if text not in ("stable", "integrating", "unstable"):
                raise ValueError(f"sim:// option plant={text!r} must be stable, integrating "
                                 "or unstable")
            kw["plant_kind"] = text
        elif key == "delay":
            kw["delay_s"] = _number(key, text, 0.0, 100.0)
        elif key == "seed":
            if not _SEED_RE.fullmatch(text):      # ASCII digits: str.isdigit() takes '²'
                raise ValueError(f"sim:// option seed={text!r} must be a whole number >= 0 "
                                 "(at most 19 digits 0-9)")
            kw["seed"] = int(text)
        elif key == "noise":
            kw["noise"] = _number(key, text, 0.0, 100.0)
        elif key == "rate":
            kw["rate_hz"] = _number(key, text, 10.0, 10000.0)
        elif key in ("corrupt", "drop"):
            kw[key] = _number(key, text, 0.0, 1.0)
        elif key == "stall":
            after, colon, length = text.partition(":")
            if not colon:
                raise ValueError(f"sim:// option stall={text!r} must be AFTER:FOR seconds")
            kw["stall_after_s"] = _number(key, after, 0.0)
            kw["stall_for_s"] = _number(key, length, 0.0)
            if kw["stall_for_s"] <= 0.0:
                raise ValueError(f"sim:// option stall={text!r}: FOR must be > 0")
        elif key == "reset":
            kw["reset_after_s"] = _number(key, text, 0.0)
        elif key == "unplug":
            kw["unplug_after_s"] = _number(key, text, 0.0)
        elif key == "dropkill":
            if text not in ("0", "1"):
                raise ValueError(f"sim:// option dropkill={text!r} must be 0 or 1")
            kw["drop_kill"] = text == "1"
    opts = SimOptions(**kw)
    if rig == "plant" and len(opts.num) > len(opts.den):
        raise ValueError("sim://plant: num has a higher degree than den (improper)")
    return opts


def format_sim_url(o: SimOptions) -> str:
    """The shortest ``sim://`` URL that parses back to ``o``."""
    d = SimOptions(rig=o.rig)
    q: list[tuple[str, str]] = []
    if o.rig == "balance" and o.drive != d.drive:
        q.append(("drive", o.drive))
    if o.rig == "plant":
        q.append(("num", ",".join(repr(v) for v in o.num)))
        q.append(("den", ",".join(repr(v) for v in o.den)))
        if o.delay_s:
            q.append(("delay", repr(o.delay_s)))
        if o.plant_kind is not None:
            q.append(("plant", o.plant_kind))
    for key, attr in (("seed", "seed"), ("noise", "noise"), ("rate", "rate_hz"),
                      ("clock", "clock"), ("state", "state_path"), ("corrupt", "corrupt"),
                      ("drop", "drop"), ("reset", "reset_after_s"),
                      ("unplug", "unplug_after_s")):
        value = getattr(o, attr)
        if value != getattr(d, attr):
            q.append((key, value if isinstance(value, str) else repr(value)))
    if o.stall_after_s is not None:
        q.append(("stall", f"{o.stall_after_s!r}:{o.stall_for_s!r}"))
    if o.drop_kill:
        q.append(("dropkill", "1"))
    query = "&".join(f"{k}={quote(v, safe='/,.:-_')}" for k, v in q)
    return f"sim://{o.rig}" + (f"?{query}" if query else "")
