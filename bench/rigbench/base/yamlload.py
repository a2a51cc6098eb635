"""Strict YAML reading for files people keep (profiles, sequences): line numbers on every value.

``load_yaml(path)`` / ``load_yaml_text(text, path)`` parse one YAML document with
``StrictLoader`` (a ``yaml.SafeLoader`` subclass) and return a :class:`Cursor` on the root.
A cursor knows its file, its field path (``gains.tilt_kp.value``, ``steps[2].relay.amp``;
list positions count from 1 because they are read by people) and its line, so every check
made through it raises a :class:`SchemaError` whose ``str`` is ``FILE:LINE: field: message``.

What the loader accepts, deliberately narrower than YAML 1.1:
- scalars resolve as in the YAML 1.2 core schema: ``null``/``~``/empty, ``true``/``false``,
  decimal integers, decimal floats (``1e-3`` is a float; ``010`` is ten, not eight; ``yes``,
  ``on``, ``1:30`` and dates stay text);
- keys are plain scalars and appear once per mapping (a duplicate is an error naming both
  lines); anchors, aliases, merge keys and tags other than the core ones are errors;
- nesting deeper than ``MAX_DEPTH`` is an error.
Nothing raised while reading a file is anything but ``SchemaError``.

``near_hint(word, choices)`` is the " (did you mean 'x'?)" that the unknown-name messages
of these files' readers and checkers carry (unknown key, step kind, parameter).
"""

from __future__ import annotations

import difflib
import math
import os
import re
import stat
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable

import yaml

__all__ = ["SchemaError", "StrictLoader", "Cursor", "MapCursor", "load_yaml", "load_yaml_text",
           "MAX_DEPTH", "MAX_BYTES", "near_hint"]

MAX_DEPTH = 32
MAX_BYTES = 1 << 20  # a profile or sequence is a few kB; refuse anything absurd

_TAG = "tag:yaml.org,2002:"
_STR, _INT, _FLOAT, _BOOL, _NULL = (_TAG + t for t in ("str", "int", "float", "bool", "null"))
_MAP, _SEQ = _TAG + "map", _TAG + "seq"



def near_hint(word: str, choices: Iterable[str]) -> str:
    """`` (did you mean 'x'?)`` naming the choice closest to ``word``, or "" if none is close."""
    near = difflib.get_close_matches(word, choices, n=1)
    return f" (did you mean {near[0]!r}?)" if near else ""

class SchemaError(ValueError):
    """A file is not what its schema says: ``FILE:LINE: field: message``."""

    def __init__(self, path: str, line: int | None, field: str, message: str) -> None:
        self.path = str(path)
        self.line = line
        self.field = field
        self.message = message
        where = f"{self.path}:{line}" if line is not None else self.path
        super().__init__(f"{where}: {field}: {message}")


class StrictLoader(yaml.SafeLoader):
    """SafeLoader with YAML 1.2 core scalars and no anchors, aliases or merge keys."""

    yaml_implicit_resolvers: dict = {}

    def compose_node(self, parent, index):
        event = self.peek_event()
        if isinstance(event, yaml.AliasEvent) or getattr(event, "anchor", None):
            raise yaml.MarkedYAMLError(
                problem="anchors and aliases (&name, *name) are not allowed here",
                problem_mark=event.start_mark)
        return super().compose_node(parent, index)


for _tag, _regexp, _first in (
    (_BOOL, r"^(?:true|True|TRUE|false|False|FALSE)$", "tTfF"),
    (_INT, r"^[-+]?[0-9]+$", "-+0123456789"),
    (_FLOAT, r"^(?:[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?"
             r"|[-+]?\.(?:inf|Inf|INF)|\.(?:nan|NaN|NAN))$", "-+0123456789."),
    (_NULL, r"^(?:~|null|Null|NULL|)$", ["~", "n", "N", ""]),
):
    StrictLoader.add_implicit_resolver(_tag, re.compile(_regexp), list(_first))


class _Map(dict):
    """A mapping read from a file; ``lines[key] = (key_line, value_line)``."""

    line: int
    lines: dict


class _Seq(list):
    line: int
    lines: list


def _line(node) -> int:
    return node.start_mark.line + 1


def _sub(field: str, key) -> str:
    if isinstance(key, int):
        return f"{field}[{key}]"
    return f"{field}.{key}" if field else key


def _convert(node, path: str, field: str = "", depth: int = 0):
    where = field or "(top)"
    if depth > MAX_DEPTH:
        raise SchemaError(path, _line(node), where, f"nested deeper than {MAX_DEPTH} levels")
    tag = node.tag
    if isinstance(node, yaml.MappingNode):
        if tag != _MAP:
            raise SchemaError(path, _line(node), where, f"tag {tag} is not allowed")
        out = _Map()
        out.line, out.lines = _line(node), {}
        for knode, vnode in node.value:
            if not isinstance(knode, yaml.ScalarNode) or knode.tag not in (_STR, _INT):
                raise SchemaError(path, _line(knode), where,
                                  "keys must be plain names, not lists, mappings or other values")
            key = knode.value
            if key in out:
                raise SchemaError(path, _line(knode), _sub(field, key),
                                  f"duplicate key (first given on line {out.lines[key][0]})")
            out[key] = _convert(vnode, path, _sub(field, key), depth + 1)
            out.lines[key] = (_line(knode), _line(vnode))
        return out
    if isinstance(node, yaml.SequenceNode):
        if tag != _SEQ:
            raise SchemaError(path, _line(node), where, f"tag {tag} is not allowed")
        out = _Seq(_convert(item, path, _sub(field, i), depth + 1)
                   for i, item in enumerate(node.value, 1))
        out.line, out.lines = _line(node), [_line(item) for item in node.value]
        return out
    return _scalar(node, path, where)


def _scalar(node, path: str, where: str):
    text, tag = node.value, node.tag
    try:
        if tag == _STR:
            return text
        if tag == _NULL:
            return None
        if tag == _BOOL:
            return {"true": True, "false": False}[text.lower()]
        if tag == _INT:
            return int(text)
        if tag == _FLOAT:
            low = text.lower()
            if low.endswith(".inf"):
                return -math.inf if low.startswith("-") else math.inf
            return math.nan if low == ".nan" else float(text)
    except (ValueError, KeyError):
        raise SchemaError(path, _line(node), where,
                          f"{text!r} is not a valid {tag[len(_TAG):]}") from None
    raise SchemaError(path, _line(node), where, f"tag {tag} is not allowed")


def load_yaml_text(text: str, path: str | Path = "<text>", *,
                   max_bytes: int = MAX_BYTES) -> "Cursor":
    """Parse one YAML document; raise SchemaError (never anything else) when it cannot.
    ``max_bytes``: the largest text accepted (a sidecar may be larger than a profile)."""
    path = str(path)
    if len(text) > max_bytes:
        raise SchemaError(path, None, "(file)", f"larger than {max_bytes} bytes")
    try:
        loader = StrictLoader(text)
        try:
            node = loader.get_single_node()
        finally:
            loader.dispose()
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark is not None else None
        what = " ".join(str(x) for x in (exc.context, exc.problem) if x)
        raise SchemaError(path, line, "(yaml)", what or "not valid YAML") from None
    except yaml.YAMLError as exc:  # reader errors: control characters, bad encoding
        line = None
        mark = getattr(exc, "position", None)
        if isinstance(mark, int):
            line = text.count("\n", 0, mark) + 1
        reason = getattr(exc, "reason", None) or str(exc).splitlines()[0]
        raise SchemaError(path, line, "(yaml)", f"not valid YAML: {reason}") from None
    except RecursionError:
        raise SchemaError(path, None, "(file)", "nested too deeply") from None
    if node is None:
        raise SchemaError(path, 1, "(file)", "the file is empty")
    value = _convert(node, path)
    return Cursor(value, path, "", _line(node))


def load_yaml(path: str | Path, *, max_bytes: int = MAX_BYTES) -> "Cursor":
    """Read and parse ``path`` (UTF-8); unreadable files raise SchemaError too. Reads no
    more than ``max_bytes`` + 1 bytes, and only from a regular file."""
    path = str(path)
    try:
        with open(path, "rb") as f:
            if not stat.S_ISREG(os.fstat(f.fileno()).st_mode):
                raise SchemaError(path, None, "(file)", "not a regular file")
            data = f.read(max_bytes + 1)
    except (OSError, ValueError) as exc:  # ValueError: a NUL in the path
        raise SchemaError(path, None, "(file)",
                          f"cannot read: {getattr(exc, 'strerror', None) or exc}") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise SchemaError(path, line, "(file)", "not UTF-8 text") from None
    return load_yaml_text(text, path, max_bytes=max_bytes)


# --------------------------------------------------------------------------- schema helpers


def _kind(value) -> str:
    if value is None:
        return "nothing (null)"
    if isinstance(value, bool):
        return f"{str(value).lower()} (a yes/no value)"
    if isinstance(value, (int, float)):
        return f"the number {value!r}"
    if isinstance(value, str):
        return f"text {value!r}" if len(value) < 40 else "a long text"
    if isinstance(value, dict):
        return "a mapping"
    return "a list"


@dataclass
class Cursor:
    """A value read from a file, with where it came from: checks raise SchemaError there."""

    value: Any
    path: str
    field: str
    line: int

    def error(self, message: str, *, line: int | None = None, field: str | None = None):
        return SchemaError(self.path, line if line is not None else self.line,
                           field if field is not None else (self.field or "(top)"), message)

    def _child(self, key: str | int, value, line: int) -> "Cursor":
        return Cursor(value, self.path, _sub(self.field, key), line)

    # -- containers

    def mapping(self, required: Iterable[str] = (), optional: Iterable[str] = ()) -> "MapCursor":
        """This value as a mapping with exactly these keys (all ``required`` present)."""
        required, optional = tuple(required), tuple(optional)
        self.expect_mapping()
        allowed = required + optional
        for key in self.value:
            if key not in allowed:
                raise self.unknown_key(key, allowed)
        for key in required:
            if key not in self.value:
                raise self.missing(key)
        return MapCursor(self)

    def expect_mapping(self) -> None:
        if not isinstance(self.value, dict):
            raise self.error(f"expected a mapping (key: value lines), got {_kind(self.value)}")

    def missing(self, key: str) -> SchemaError:
        return self._child(key, None, self.line).error(
            "required key missing")

    def unknown_key(self, key: str, allowed: Iterable[str]) -> SchemaError:
        allowed = sorted(allowed)
        hint = near_hint(str(key), allowed)
        return self._child(key, None, self.value.lines[key][0]).error(
            f"unknown key {key!r}{hint}; allowed: {', '.join(allowed) or 'none'}")

    def entries(self) -> list[tuple[str, "Cursor"]]:
        """A mapping whose keys are data (parameter names): (key, cursor on value) in order."""
        self.expect_mapping()
        return [(k, self._child(k, v, self.value.lines[k][1])) for k, v in self.value.items()]

    def as_mapping(self, items: dict) -> "Cursor":
        """A cursor on a mapping built here (a shorthand expanded), every line this one's."""
        out = _Map(items)
        out.line, out.lines = self.line, {k: (self.line, self.line) for k in items}
        return Cursor(out, self.path, self.field, self.line)

    def key_line(self, key: str) -> int:
        return self.value.lines[key][0]

    def items(self, *, min_items: int = 0) -> list["Cursor"]:
        """This value as a list: a cursor on each item."""
        if not isinstance(self.value, list):
            raise self.error(f"expected a list (lines starting with '- '), got {_kind(self.value)}")
        if len(self.value) < min_items:
            raise self.error(f"needs at least {min_items} item(s)")
        return [self._child(i + 1, v, ln)
                for i, (v, ln) in enumerate(zip(self.value, self.value.lines))]

    # -- scalars

    def text(self, *, pattern: str | None = None, what: str = "", max_len: int = 4000) -> str:
        if not isinstance(self.value, str):
            raise self.error(f"expected text, got {_kind(self.value)}")
        if not self.value.strip():
            raise self.error("must not be empty")
        if len(self.value) > max_len:
            raise self.error(f"longer than {max_len} characters")
        if pattern is not None and not re.fullmatch(pattern, self.value):
            raise self.error(f"{self.value!r} is not {what or 'in the expected form'}")
        return self.value

    def number(self, *, minimum: float | None = None, maximum: float | None = None,
               above: float | None = None) -> float:
        """A finite number (yes/no values are not numbers), as float, optionally bounded."""
        v = self.value
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise self.error(f"expected a number, got {_kind(v)}")
        try:
            v = float(v)
        except OverflowError:
            raise self.error("number too large") from None
        if not math.isfinite(v):
            raise self.error(f"must be a finite number, got {self.value!r}")
        if minimum is not None and v < minimum:
            raise self.error(f"{v:g} is below the minimum {minimum:g}")
        if maximum is not None and v > maximum:
            raise self.error(f"{v:g} is above the maximum {maximum:g}")
        if above is not None and v <= above:
            raise self.error(f"must be greater than {above:g}, got {v:g}")
        return v

    def integer(self, *, minimum: int | None = None, maximum: int | None = None) -> int:
        v = self.value
        if isinstance(v, bool) or not isinstance(v, int):
            raise self.error(f"expected a whole number, got {_kind(v)}")
        if minimum is not None and v < minimum:
            raise self.error(f"{v} is below the minimum {minimum}")
        if maximum is not None and v > maximum:
            raise self.error(f"{v} is above the maximum {maximum}")
        return v

    def boolean(self) -> bool:
        if not isinstance(self.value, bool):
            raise self.error(f"expected true or false, got {_kind(self.value)}")
        return self.value

    def choice(self, choices: Iterable[str]) -> str:
        choices = tuple(choices)
        if not isinstance(self.value, str) or self.value not in choices:
            raise self.error(f"expected one of {', '.join(choices)}; got {_kind(self.value)}")
        return self.value


class MapCursor:
    """A checked mapping: ``m["key"]`` (required) and ``m.get("key")`` give cursors."""

    def __init__(self, cursor: Cursor) -> None:
        self.cursor = cursor

    def __contains__(self, key: str) -> bool:
        return key in self.cursor.value

    def __getitem__(self, key: str) -> Cursor:
        c = self.cursor
        if key not in c.value:
            raise c.missing(key)
        return c._child(key, c.value[key], c.value.lines[key][1])

    def get(self, key: str) -> Cursor | None:
        return self[key] if key in self.cursor.value else None

    @property
    def line(self) -> int:
        return self.cursor.line
