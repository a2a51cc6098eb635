"""The simulated board's parameter table and its non-volatile storage (PROTOCOL.md §5.5).

``ParamTable`` holds the live values in declaration order. Values are kept as the board
reports them: rounded to 7 significant digits (what a float32 holds and what replies
carry), so a value read back is the value in use. ``check_set`` validates a whole group
before anything changes (a ``set`` is atomic).

``NvStore`` is the board's flash: a dict in memory, or a JSON file when a path is given,
written atomically (temporary file in the same folder, fsync, rename), so a crash leaves
the old image or the new one, never half of one. The stored image's CRC is the CRC-16 of
``name=value`` for every writable parameter in declaration order, joined by single spaces,
values formatted as in replies (§5.5).
"""

from __future__ import annotations

import json
import os
import stat
import tempfile
from dataclasses import dataclass

from rigbench.rig.firmware.boards import ParamDef
from rigbench.wire.crc import crc16
from rigbench.wire.describe import ParamInfo, format_value

__all__ = ["ParamTable", "NvStore", "SetRefusal", "image_crc"]


def board_round(value: float) -> float:
    """The value as the board stores and reports it (7 significant digits)."""
    return float(format_value(value))


@dataclass(frozen=True)
class SetRefusal:
    """Why a ``set`` was refused: a PROTOCOL.md §4.3 code and short text."""

    code: str
    text: str


class ParamTable:
    def __init__(self, defs: tuple[ParamDef, ...]) -> None:
        self.defs = defs
        self._by_name = {d.name: d for d in defs}
        self.values: dict[str, float] = {}
        self.load_defaults()

    def load_defaults(self) -> None:
        self.values = {d.name: board_round(d.default) for d in self.defs}

    def __contains__(self, name: str) -> bool:
        return name in self._by_name

    def info(self, index: int) -> ParamInfo:
        d = self.defs[index]
        return ParamInfo(index, d.name, d.unit, d.minimum, d.maximum, self.values[d.name],
                         d.writable)

    def check_set(self, pairs, busy_names: frozenset[str] = frozenset()) -> SetRefusal | None:
        """First reason to refuse the whole group, or None when every assignment is legal."""
        for name, value in pairs:
            d = self._by_name.get(name)
            if d is None:
                return SetRefusal("unknown_name", f"no parameter {name}")
            if not d.writable:
                return SetRefusal("readonly", f"{name} is read-only")
            v = board_round(value)
            if not d.minimum <= v <= d.maximum:
                return SetRefusal(
                    "range", f"{name} {format_value(d.minimum)}..{format_value(d.maximum)}")
            if name in busy_names:
                return SetRefusal("busy", f"{name} belongs to a loop under test")
        return None

    def apply(self, pairs) -> list[tuple[str, float]]:
        """Apply a checked group; return the values as applied."""
        out = []
        for name, value in pairs:
            self.values[name] = board_round(value)
            out.append((name, self.values[name]))
        return out

    def in_range(self, name: str) -> bool:
        d = self._by_name[name]
        return d.minimum <= self.values[name] <= d.maximum

    def writable_image(self) -> dict[str, float]:
        return {d.name: self.values[d.name] for d in self.defs if d.writable}


def image_crc(values: dict[str, float]) -> int:
    """CRC-16 of the stored image text (PROTOCOL.md §5.5), in the dict's order."""
    text = " ".join(f"{k}={format_value(v)}" for k, v in values.items())
    return crc16(text.encode("ascii"))


STATE_MAX_BYTES = 1 << 20  # a stored image is a few hundred bytes


class NvStore:
    """Non-volatile parameter storage: in memory, or a JSON file at ``path``.

    The file holds ``{"rig": <rig>, "params": {name: value}}``. A file written for another
    rig, or naming a parameter this rig does not have, raises ValueError naming the file.
    """

    def __init__(self, rig: str, defs: tuple[ParamDef, ...], path: str | None = None) -> None:
        self.rig = rig
        self.path = path
        self._writable = [d.name for d in defs if d.writable]
        self._defs = {d.name: d for d in defs}
        self._image: dict[str, float] | None = None
        if path is not None and os.path.lexists(path):
            self._image = self._read_file(path)

    def _read_file(self, path: str) -> dict[str, float]:
        try:
            if not stat.S_ISREG(os.stat(path).st_mode):  # /dev/zero, a fifo: would never end
                raise ValueError("not a regular file")
            with open(path, "rb") as fh:
                data = fh.read(STATE_MAX_BYTES + 1)
            if len(data) > STATE_MAX_BYTES:
                raise ValueError(f"larger than {STATE_MAX_BYTES} bytes")
            doc = json.loads(data.decode("utf-8"))
        except (OSError, ValueError, RecursionError) as exc:
            raise ValueError(f"{path}: cannot read stored parameters: {exc}") from None
        if not isinstance(doc, dict) or set(doc) != {"rig", "params"}:
            raise ValueError(f"{path}: expected keys 'rig' and 'params'")
        if doc["rig"] != self.rig:
            raise ValueError(f"{path}: stored for rig {doc['rig']!r}, not {self.rig!r}")
        params = doc["params"]
        if not isinstance(params, dict):
            raise ValueError(f"{path}: 'params' must be a mapping")
        image = {}
        for name, value in params.items():
            if name not in self._writable:
                raise ValueError(f"{path}: unknown parameter {name!r}")
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ValueError(f"{path}: {name} is not a number")
            d = self._defs[name]
            if not d.minimum <= value <= d.maximum:
                raise ValueError(f"{path}: {name}={value} outside {d.minimum}..{d.maximum}")
            image[name] = board_round(float(value))
        return {n: image[n] for n in self._writable if n in image}

    @property
    def image(self) -> dict[str, float] | None:
        """The stored values, or None when nothing was ever saved."""
        return None if self._image is None else dict(self._image)

    def save(self, values: dict[str, float]) -> int:
        """Store ``values`` (writable parameters, declaration order); return the image CRC.

        Raises OSError when the file cannot be written (the old image stays).
        """
        image = {n: board_round(values[n]) for n in self._writable}
        if self.path is not None:
            self._write_file(image)
        self._image = image
        return image_crc(image)

    def _write_file(self, image: dict[str, float]) -> None:
        folder = os.path.dirname(os.path.abspath(self.path))
        fd, tmp = tempfile.mkstemp(prefix=".nv-", suffix=".tmp", dir=folder)
        try:
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                json.dump({"rig": self.rig, "params": image}, fh, indent=1)
                fh.write("\n")
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, self.path)
        except BaseException:
            try:
                os.unlink(tmp)
            except OSError:
                pass
            raise
